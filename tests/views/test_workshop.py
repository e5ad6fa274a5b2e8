"""The workshop page: the recap list and the units held or on the bench."""

import datetime as dt

from django.urls import reverse
from django.utils import timezone

from fleet.models import Unit
from scheduling.models import UnitForecast
from tests.base import make_unit


def forecast(unit, status, due_date=None, reasons=()):
    UnitForecast.objects.update_or_create(unit=unit, defaults=dict(
        computed_at=timezone.now(), status=status, due_date=due_date, risk=0.25, horizon_days=90,
        max_damage_ratio=1.0, reasons=list(reasons), positions=b""))


def test_the_recap_list_shows_due_and_overdue_units_earliest_first(client, users, fleet):
    later = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002")
    fine = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0003")
    forecast(fleet.unit, "overdue", dt.date(2025, 1, 1), ["C1 worn out"])
    forecast(later, "due", dt.date(2026, 6, 1), ["C7 near its endurance"])
    forecast(fine, "ok")
    client.force_login(users.technician)
    response = client.get(reverse("workshop"))
    assert [f.unit.asset_tag for f in response.context["recaps"]] == ["NMB-0001", "NMB-0002"]
    text = response.content.decode()
    assert "C1 worn out" in text and "C7 near its endurance" in text
    assert "NMB-0003" not in text


def test_held_and_bench_units_are_listed_with_the_safety_caution(client, users, fleet):
    make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0004", status=Unit.Status.BENCH)
    client.force_login(users.technician)
    text = client.get(reverse("workshop")).content.decode()
    assert "NMB-0004" in text and "On the bench" in text
    assert "Mains voltage and charged capacitors can kill" in text
