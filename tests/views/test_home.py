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
    assert "On the bench and held" not in text
    assert "3 h" in text  # out for


def test_the_desk_list_of_units_out_is_one_screen(client, users, fleet):
    from front.views.home import OUT_NOW_ROWS

    for i in range(OUT_NOW_ROWS + 2):
        unit = make_unit(fleet.gear_model, fleet.location, asset_tag=f"NMB-3{i:03d}")
        rental_check_out(unit_id=unit.pk, job_ref=f"JOB-{i}", out_at=timezone.now() - dt.timedelta(hours=i + 1))
    client.force_login(users.desk)
    response = client.get(reverse("home"))
    assert len(response.context["out_now"]) == OUT_NOW_ROWS
    assert response.context["out_count"] == OUT_NOW_ROWS + 2
    assert f"All {OUT_NOW_ROWS + 2} out on hire" in response.content.decode()


def test_the_technician_sees_the_top_of_the_list_and_held_units(client, users, fleet):
    held = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002", status=Unit.Status.HOLD)
    UnitForecast.objects.create(unit=fleet.unit, computed_at=timezone.now(), status="overdue",
                                risk=0.4, horizon_days=90, max_damage_ratio=1.3, reasons=["C1 worn out"],
                                positions=b"", priority=1, act_by=timezone.localdate())
    client.force_login(users.technician)
    response = client.get(reverse("home"))
    text = response.content.decode()
    assert held.asset_tag in text
    assert [r["unit"].asset_tag for r in response.context["top_rows"]] == ["NMB-0001"]
    assert "C1 worn out" in text
    assert "Workshop: all 1 unit that need work" in text
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


def test_the_manager_sees_what_is_due_this_month_and_no_later(client, users, fleet):
    later = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002")
    today = timezone.localdate()
    for unit, priority, act_by in ((fleet.unit, 1, today), (later, 2, today + dt.timedelta(days=40))):
        UnitForecast.objects.create(unit=unit, computed_at=timezone.now(), status="due", risk=0.2, horizon_days=90,
                                    max_damage_ratio=1.0, reasons=[], positions=b"", priority=priority,
                                    act_by=act_by)
    client.force_login(users.manager)
    response = client.get(reverse("home"))
    assert [r["unit"].asset_tag for r in response.context["due_rows"]] == ["NMB-0001"]
    assert response.context["due_count"] == 1
    assert f"Due this month, {today:%b %Y}" in response.content.decode()


def test_the_manager_sees_recent_imports_refused_ones_too(client, users, fleet, tmp_path):
    import pytest

    from fleet.csvio import CsvImportError
    from front.workflows import import_csv

    good = tmp_path / "locations.csv"
    good.write_text("name,kind,profile,constant_temp_c,monthly_temps_c,notes\nLoft,store,constant,24,,\n")
    bad = tmp_path / "bad-locations.csv"
    bad.write_text("name,kind,profile,constant_temp_c,monthly_temps_c,notes\nLoft,store,constant,hot,,\n")
    import_csv(str(good), name="locations.csv", user=users.manager)
    with pytest.raises(CsvImportError):
        import_csv(str(bad), name="bad-locations.csv", source="command")
    client.force_login(users.manager)
    response = client.get(reverse("home"))
    imports = response.context["imports"]
    assert [(i.file_name, i.ok) for i in imports] == [("bad-locations.csv", False), ("locations.csv", True)]
    assert "constant_temp_c" in imports[0].summary
    text = response.content.decode()
    assert "Refused" in text and "Imported" in text


def test_a_user_without_a_role_is_told_to_ask_a_manager(client, users):
    client.force_login(users.norole)
    text = client.get(reverse("home")).content.decode()
    assert "no role yet" in text


def test_the_manager_sees_the_check_outs_made_against_the_forecast(client, users, fleet):
    from front.workflows import rental_check_out as check_out

    UnitForecast.objects.create(unit=fleet.unit, computed_at=timezone.now(), status="overdue", risk=0.3,
                                horizon_days=90, max_damage_ratio=2.0, reasons=[], positions=b"", priority=1,
                                act_by=timezone.localdate())
    check_out(unit_id=fleet.unit.pk, job_ref="JOB-ODD", out_at=timezone.now() - dt.timedelta(hours=1),
              user=users.desk, override_reason="Only unit left for the festival; the workshop agreed")
    client.force_login(users.manager)
    response = client.get(reverse("home"))
    assert [o.rental.job_ref for o in response.context["overrides"]] == ["JOB-ODD"]
    text = response.content.decode()
    assert "Only unit left for the festival; the workshop agreed" in text and "NMB-0001" in text
