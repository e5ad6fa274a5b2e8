"""The workshop page: units on the bench and held (with why), the triage list
(by priority, paginated, filtered), the parts for the top of the list."""

import datetime as dt

from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils.html import escape
from django.utils import timezone

from fleet.models import Unit
from front.views.worklist import TRIAGE_PER_PAGE
from front.workflows import rental_check_in, rental_check_out
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh, stored_positions
from scheduling.thresholds import ROLE_CODES
from scheduling.triage import REPLACE
from tests.base import make_gear_model, make_unit


def forecast(unit, status, *, priority=None, due_date=None, reasons=(), roles=(), hire_risk=0.02):
    mask = sum(1 << ROLE_CODES[r] for r in roles)
    UnitForecast.objects.update_or_create(unit=unit, defaults=dict(
        computed_at=timezone.now(), status=status, due_date=due_date, risk=0.25, horizon_days=90,
        max_damage_ratio=1.0, reasons=list(reasons), positions=b"", priority=priority,
        act_by=timezone.localdate() if priority else None, hire_risk=hire_risk, action_roles=mask))


def test_the_triage_list_is_in_priority_order_not_by_date(client, users, fleet):
    second = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002")
    fine = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0003")
    forecast(fleet.unit, "overdue", priority=2, due_date=dt.date(1984, 1, 29), reasons=["C1 worn out"])
    forecast(second, "due", priority=1, due_date=dt.date(2027, 6, 1), reasons=["C7 near its endurance"])
    forecast(fine, "ok")
    client.force_login(users.technician)
    response = client.get(reverse("workshop"))
    assert [r["unit"].asset_tag for r in response.context["rows"]] == ["NMB-0002", "NMB-0001"]
    text = response.content.decode()
    assert "NMB-0003" not in text
    assert "29 Jan 1984" not in text
    assert "<strong>now</strong>" in text


def test_the_triage_list_is_paginated(client, users, fleet):
    for i in range(TRIAGE_PER_PAGE + 3):
        unit = make_unit(fleet.gear_model, fleet.location, asset_tag=f"NMB-1{i:03d}")
        forecast(unit, "due", priority=i + 1)
    client.force_login(users.technician)
    first = client.get(reverse("workshop"))
    assert len(first.context["rows"]) == TRIAGE_PER_PAGE
    assert first.context["page_obj"].paginator.count == TRIAGE_PER_PAGE + 3
    second = client.get(reverse("workshop"), {"page": 2})
    assert [r["forecast"].priority for r in second.context["rows"]] == [TRIAGE_PER_PAGE + k for k in (1, 2, 3)]


def test_the_triage_list_filters_by_model_location_and_role(client, users, fleet):
    from tests.base import make_location

    other_model = make_gear_model(model_name="Nimbus 8")
    attic = make_location(name="Attic", temp_c=28.0)
    a = make_unit(other_model, fleet.location, asset_tag="NMB-0020")
    b = make_unit(fleet.gear_model, attic, asset_tag="NMB-0021")
    forecast(fleet.unit, "due", priority=1, roles=["supply_reservoir"])
    forecast(a, "due", priority=2, roles=["signal_coupling"])
    forecast(b, "due", priority=3, roles=["supply_reservoir", "signal_coupling"])
    client.force_login(users.technician)

    def tags(**params):
        return [r["unit"].asset_tag for r in client.get(reverse("workshop"), params).context["rows"]]

    assert tags(gear_model=other_model.pk) == ["NMB-0020"]
    assert tags(location=attic.pk) == ["NMB-0021"]
    assert tags(role="signal_coupling") == ["NMB-0020", "NMB-0021"]
    assert tags(role="supply_reservoir", location=attic.pk) == ["NMB-0021"]
    assert tags(role="pump_flying") == []


def test_each_triage_row_says_what_to_do_in_one_line(client, users, fleet):
    unit = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0009", year_made=1960,
                     joined_on=dt.date(1990, 1, 1), prior_powered_h_per_year=3000, prior_ambient_c=45)
    forecast_refresh(unit_ids=[unit.pk])
    client.force_login(users.technician)
    response = client.get(reverse("workshop"))
    row = next(r for r in response.context["rows"] if r["unit"].asset_tag == "NMB-0009")
    assert row["todo"].startswith("Replace ")
    assert "\n" not in row["todo"]
    assert escape(row["todo"]) in response.content.decode()


def test_held_units_come_first_each_with_why(client, users, fleet):
    now = timezone.now()
    rental_check_out(unit_id=fleet.unit.pk, job_ref="JOB-9", out_at=now - dt.timedelta(days=2))
    rental_check_in(unit_id=fleet.unit.pk, in_at=now - dt.timedelta(days=1), venue_ambient_c=25, powered_hours=5,
                    reported_faults="Hum on both channels")
    make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0004", status=Unit.Status.BENCH,
              notes="In for a look at the reservoir.")
    client.force_login(users.technician)
    response = client.get(reverse("workshop"))
    whys = {r["unit"].asset_tag: r["why"] for r in response.context["held_rows"]}
    assert whys["NMB-0001"] == "Fault reported on return: Hum on both channels"
    assert whys["NMB-0004"] == "In for a look at the reservoir."
    text = response.content.decode()
    assert text.index("On the bench and held") < text.index("What to do first")
    assert "Follow local electrical codes and licensed practice" in text


def test_the_parts_for_the_top_of_the_list_are_grouped_with_quantities(client, users, fleet):
    units = [make_unit(fleet.gear_model, fleet.location, asset_tag=f"NMB-00{k}5", year_made=1960,
                       joined_on=dt.date(1990, 1, 1), prior_powered_h_per_year=3000, prior_ambient_c=45)
             for k in range(3)]
    forecast_refresh(unit_ids=[u.pk for u in units])
    client.force_login(users.technician)
    parts = client.get(reverse("workshop")).context["parts"]
    assert parts
    replaced = sum(int((stored_positions(u.forecast)["action"] == REPLACE).sum())
                   for u in Unit.objects.filter(pk__in=[u.pk for u in units]).select_related("forecast"))
    assert sum(p["qty"] for p in parts) == replaced
    for p in parts:
        assert p["part"].rated_temp_c == 105
        assert p["part"].rated_life_h >= 2000
        assert p["where"].count(":") >= 1


def test_the_page_costs_the_same_queries_whatever_the_fleet(client, users, fleet):
    client.force_login(users.technician)

    def count(**params):
        with CaptureQueriesContext(connection) as ctx:
            assert client.get(reverse("workshop"), params).status_code == 200
        return len(ctx.captured_queries)

    # one of each kind of row already: held, needing work, parts to order
    make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-1999", year_made=1960, status=Unit.Status.HOLD)
    forecast_refresh()
    small = count(), count(role="supply_reservoir")
    for i in range(12):
        make_unit(fleet.gear_model, fleet.location, asset_tag=f"NMB-2{i:03d}", year_made=1960 + i,
                  status=Unit.Status.HOLD if i % 3 == 0 else Unit.Status.AVAILABLE)
    forecast_refresh()
    assert (count(), count(role="supply_reservoir")) == small


def test_a_unit_in_the_triage_list_can_be_taken_to_the_bench_from_its_row(client, users, fleet):
    out = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002")
    forecast(fleet.unit, "overdue", priority=1, reasons=["C1 worn out"])
    forecast(out, "overdue", priority=2, reasons=["C1 worn out"])
    Unit.objects.filter(pk=out.pk).update(status=Unit.Status.OUT)
    client.force_login(users.technician)
    text = client.get(reverse("workshop")).content.decode()
    assert reverse("bench_unit", args=["NMB-0001"]) in text
    assert reverse("bench_unit", args=["NMB-0002"]) not in text  # out on hire: nothing to take in
