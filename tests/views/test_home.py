"""The start page changes with the user's role."""

import datetime as dt

from django.urls import reverse
from django.utils import timezone

from fleet.models import Unit
from front.workflows import rental_check_out
from scheduling.models import UnitForecast
from tests.base import make_unit


def test_the_desk_sees_the_tag_box_and_the_units_out_now(client, users, fleet):
    rental_check_out(unit_id=fleet.unit.pk, job_ref="JOB-7781", out_at=timezone.now() - dt.timedelta(hours=3))
    client.force_login(users.desk)
    text = client.get(reverse("home")).content.decode()
    assert "Scan or type an asset tag" in text
    assert 'name="tag"' in text and "autofocus" in text
    assert "NMB-0001" in text and "JOB-7781" in text
    assert "Fleet at a glance" not in text
    assert "Held or on the bench" not in text


def test_the_technician_sees_held_units_and_the_recap_list_link(client, users, fleet):
    held = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002", status=Unit.Status.HOLD)
    UnitForecast.objects.create(unit=fleet.unit, computed_at=timezone.now(), status="overdue",
                                risk=0.4, horizon_days=90, max_damage_ratio=1.3, reasons=["C1 worn out"],
                                positions=b"")
    client.force_login(users.technician)
    text = client.get(reverse("home")).content.decode()
    assert held.asset_tag in text
    assert "Recap list: 1 unit due or overdue" in text
    assert reverse("workshop") in text
    assert "Scan or type an asset tag" not in text


def test_the_manager_sees_counts_by_status_and_the_import_link(client, users, fleet):
    make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002", status=Unit.Status.BENCH)
    client.force_login(users.manager)
    response = client.get(reverse("home"))
    text = response.content.decode()
    assert "Fleet at a glance" in text
    assert reverse("csv_import") in text
    counts = response.context["counts"]
    assert dict((v, n) for v, _, n in counts["status"]) == {
        "available": 1, "out": 0, "bench": 1, "hold": 0, "retired": 0,
    }
    assert counts["not_forecast"] == 2


def test_a_user_without_a_role_is_told_to_ask_a_manager(client, users):
    client.force_login(users.norole)
    text = client.get(reverse("home")).content.decode()
    assert "no role yet" in text
