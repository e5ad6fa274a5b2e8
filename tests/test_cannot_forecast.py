"""One unit whose figures the engine cannot use never stops the others.

A capacitor stored as 1 pF (before the plausibility checks, or written past
them) made every forecast fail with "damage must not be NaN"; now that unit
is stored as "cannot forecast" with the reason in words, shown on its page,
in the recap list and the due list, to the desk at check-in, and counted in
the refresh's summary and log.  Everything else is forecast as before.

All makers, models and tags are invented.
"""

import dataclasses
import io
import datetime as dt
import json
import logging
from io import StringIO

import numpy as np
import pytest
from django.core.management import call_command
from django.urls import reverse
from django.utils import timezone

from fleet.models import Position, Unit, UnitCapacitor
from fleet.services import units_mark_changed
from front.workflows import rental_check_out
from scheduling import checks
from scheduling.loader import FleetArrays, load_fleet
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh
from scheduling.tasks import fleet_nightly_refresh
from tests.base import build_fleet, make_role_users, make_unit


@pytest.fixture(autouse=True)
def plain_http(settings):
    settings.SECURE_SSL_REDIRECT = False


@pytest.fixture
def two_units(db):
    """NMB-0001 sound; NMB-0002 with its C1 stored as 1 pF (written past the checks, as older data was)."""
    fleet = build_fleet()
    bad = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002", serial="BA-80-2001")
    UnitCapacitor.objects.filter(unit=bad, position__designator="C1").update(capacitance_uf=1e-6, esr_ohm=None,
                                                                             tan_delta=0.1)
    units_mark_changed(unit_ids=[bad.pk])  # as every writer of fitted parts does
    fleet.bad = bad
    return fleet


def test_the_fleet_is_forecast_without_the_unit_it_cannot_use(two_units):
    run = forecast_refresh()
    assert run.fleet.unit_id.tolist() == [two_units.unit.pk]
    assert [u.asset_tag for u in run.unforecastable] == ["NMB-0002"]
    good = UnitForecast.objects.get(unit=two_units.unit)
    assert good.status in ("ok", "watch", "due", "overdue") and good.risk is not None
    bad = UnitForecast.objects.get(unit=two_units.bad)
    assert bad.status == UnitForecast.Status.INVALID and bad.get_status_display() == "Cannot forecast"
    assert (bad.risk, bad.due_date, bad.max_damage_ratio, bytes(bad.positions)) == (None, None, None, b"")
    assert bad.reasons == ["C1 (supply reservoir): 1 pF at 35 V in a 16 x 31 mm can is no real part's capacitance"]
    # The sound unit's forecast is the one it gets on its own.
    alone = forecast_refresh(unit_ids=[two_units.unit.pk])
    assert alone.result.status == run.result.status and alone.result.due_day.tolist() == run.result.due_day.tolist()


def test_a_corrected_unit_is_forecast_again(two_units):
    forecast_refresh()
    UnitCapacitor.objects.filter(unit=two_units.bad, position__designator="C1").update(capacitance_uf=2200,
                                                                                       esr_ohm=0.05)
    units_mark_changed(unit_ids=[two_units.bad.pk])
    run = forecast_refresh(unit_ids=[two_units.bad.pk])
    assert not run.unforecastable
    assert UnitForecast.objects.get(unit=two_units.bad).status != UnitForecast.Status.INVALID


def test_the_refresh_counts_them_in_its_summary_and_log(two_units, caplog):
    with caplog.at_level(logging.INFO, logger="scheduling.services"):
        summary = fleet_nightly_refresh.delay().get()
    assert (summary["forecast"], summary["cannot_forecast"]) == (1, 1)
    warnings = [r.getMessage() for r in caplog.records
                if r.levelno == logging.WARNING and r.name == "scheduling.services"]
    assert warnings == ["Cannot forecast NMB-0002: C1 (supply reservoir): 1 pF at 35 V in a 16 x 31 mm can is no "
                        "real part's capacitance"]
    assert "Forecast 1 units as of" in caplog.text and "1 could not be forecast" in caplog.text


def test_the_commands_list_it_first(two_units):
    out = StringIO()
    call_command("forecast", stdout=out)
    text = out.getvalue()
    assert text.startswith("NMB-0002     cannot forecast\n    C1 (supply reservoir): 1 pF")
    assert text.rstrip().endswith("1 units forecast as of " + timezone.localdate().isoformat()
                                  + "; 1 cannot be forecast (see above).")
    out = StringIO()
    call_command("forecast", "--json", stdout=out)
    data = json.loads(out.getvalue())
    assert data[0]["asset_tag"] == "NMB-0002" and data[0]["status"] == "invalid"
    assert data[1]["asset_tag"] == "NMB-0001"
    out = StringIO()
    call_command("due_list", stdout=out)
    text = out.getvalue()
    assert "NMB-0002     cannot forecast: check its figures" in text
    assert "1 cannot be forecast (listed first)." in text
    out = StringIO()
    call_command("due_list", "--csv", stdout=out)
    assert "NMB-0002,Brindle Acoustics,Nimbus 4,Back Store,available,cannot forecast" in out.getvalue()


def test_the_pages_show_it_and_the_desk_is_told_to_ask_the_workshop(client, two_units):
    users = make_role_users()
    forecast_refresh()
    client.force_login(users.technician)
    page = client.get(reverse("unit_detail", args=["NMB-0002"])).content.decode()
    assert "Cannot forecast" in page and "1 pF at 35 V in a 16 x 31 mm can" in page
    assert '<span class="muted">cannot forecast</span>' in page  # the capacitor table has no predicted figures
    workshop = client.get(reverse("workshop"))
    assert [f.unit.asset_tag for f in workshop.context["invalid"]] == ["NMB-0002"]
    text = workshop.content.decode()
    assert "Cannot forecast: figures to correct" in text and "1 pF at 35 V in a 16 x 31 mm can" in text
    assert text.index("Cannot forecast: figures to correct") < text.index("What to do first")
    listed = client.get(reverse("unit_list") + "?forecast=invalid").context["units"]
    assert [u.asset_tag for u in listed] == ["NMB-0002"]

    client.force_login(users.desk)
    page = client.get(reverse("unit_detail", args=["NMB-0002"])).content.decode()
    assert "Check with the workshop" in page and "Its forecast cannot be worked out: ask the workshop" in page
    rental_check_out(unit_id=two_units.bad.pk, job_ref="JOB-1", out_at=timezone.now() - dt.timedelta(days=1),
                     override_reason="workshop checked it")
    response = client.post(reverse("check_in"), {"asset_tag": "NMB-0002", "venue_ambient_c": "24",
                                                 "powered_hours": "5", "reported_faults": ""})
    assert response.status_code == 200  # the check-in is saved: the unit can come back in
    page = client.get(response["Content-Location"])
    verdict = page.context["verdict"]
    assert verdict["ask"] and not verdict["go"]
    assert verdict["headline"] == "NMB-0002: check with the workshop before it goes out again"
    assert "Check with the workshop" in page.content.decode()
    assert Unit.objects.get(pk=two_units.bad.pk).status == Unit.Status.AVAILABLE
    # Going out again needs the workshop's word.
    response = client.post(reverse("check_out"), {"asset_tag": "NMB-0002", "job_ref": "JOB-2",
                                                  "expected_ambient_c": "24"})
    assert response.status_code == 200
    assert "NMB-0002 cannot be forecast: C1 (supply reservoir): 1 pF" in response.content.decode()
    response = client.post(reverse("check_out"), {"asset_tag": "NMB-0002", "job_ref": "JOB-2",
                                                  "expected_ambient_c": "24",
                                                  "override_reason": "The workshop checked its supply by hand"})
    assert response.status_code == 302


# --- the checks themselves -----------------------------------------------------------------------

def test_every_fleet_array_is_classed_as_per_unit_per_capacitor_or_shared():
    classed = set(checks.UNIT_FIELDS) | set(checks.CAPACITOR_FIELDS) | set(checks.SHARED_FIELDS)
    classed |= {name for names in checks.READING_FIELDS for name in names}
    names = {f.name for f in dataclasses.fields(FleetArrays)}
    assert names == classed, f"class these in scheduling/checks.py: {sorted(names - classed)}"


def test_a_subset_keeps_each_units_capacitors(two_units):
    forecast_refresh()
    fa = load_fleet(today=timezone.localdate())
    sub = checks.fleet_subset(fa, [1])
    assert sub.unit_id.tolist() == [fa.unit_id[1]] and sub.asset_tag == [fa.asset_tag[1]]
    assert sub.n_caps == 3 and set(sub.unit_index.tolist()) == {0}
    assert sub.cap_id.tolist() == fa.cap_id[fa.unit_index == 1].tolist()
    assert sub.hist_powered.shape == (1, fa.hist_powered.shape[1])


def test_input_checks_name_the_part_and_what_is_wrong(two_units):
    """Figures the database cannot even hold (NaN, a zero endurance) are checked on the arrays."""
    forecast_refresh()
    fa = load_fleet(today=timezone.localdate())
    bad = int(np.flatnonzero(fa.unit_id == two_units.bad.pk)[0])
    good = 1 - bad
    c1 = int(np.flatnonzero((fa.unit_index == bad) & (np.array(fa.pos_designator)[fa.position_index] == "C1"))[0])
    fa.capacitance_f[c1] = 2200e-6
    fa.esr0_ohm[c1] = 0.05
    assert checks.input_problems(fa) == {}
    for name, value, words in (
        ("capacitance_f", np.nan, "C1 (supply reservoir): its capacitance is missing, not finite or not above zero"),
        ("rated_life_h", 0.0, "C1 (supply reservoir): its rated endurance is missing, not finite or not above zero"),
        ("esr0_ohm", 1e4, "C1 (supply reservoir): an ESR of 1e+04 Ω with 2200 µF means tan delta 1.7e+04 at "
                          "120 Hz, no real part's figure"),
        ("esr0_ohm", 3.0, "C1 (supply reservoir): its ripple current would heat it 83 K above the air"),
    ):
        arr = getattr(fa, name)
        kept = arr[c1]
        arr[c1] = value
        problems = checks.input_problems(fa)
        arr[c1] = kept
        if name == "esr0_ohm" and value == 3.0:
            # 0.9 A through 3 ohm in a 16 x 31 mm can: 2.43 W over 19.6 cm^2 at 1.5e-3 W/(cm^2 K) is 83 K
            # (refs §4), within what a part could survive; 4 ohm on a 1000 uF part (tan delta 3.0) is 110 K.
            assert problems == {}
            arr[c1], fa.capacitance_f[c1] = 4.0, 1000e-6
            problems = checks.input_problems(fa)
            arr[c1], fa.capacitance_f[c1] = kept, 2200e-6
            words = "C1 (supply reservoir): its ripple current would heat it 110 K above the air around it"
        assert list(problems) == [bad] and problems[bad][0].startswith(words), problems
        assert good not in problems
    fa.hist_powered[bad, 10] = np.inf
    assert checks.input_problems(fa)[bad] == [
        "its thermal history holds hours that are not finite or below zero; it is rebuilt from the records when "
        "they change"]


def test_a_circuit_figure_of_zero_stops_only_the_units_of_that_model(two_units):
    from tests.base import make_gear_model

    other = make_gear_model(model_name="Nimbus 5")
    unit = make_unit(other, two_units.location, asset_tag="NMB-0501")
    Position.objects.filter(gear_model=other, designator="C1").update(reservoir_ripple_freq_hz=0.0)
    run = forecast_refresh()
    by_tag = {u.asset_tag: u.reasons for u in run.unforecastable}
    assert by_tag["NMB-0501"] == ["C1 (supply reservoir): the gear model's reservoir ripple frequency is 0 Hz; "
                                  "it must be above zero"]
    assert "NMB-0001" not in by_tag
    assert UnitForecast.objects.get(unit=unit).status == UnitForecast.Status.INVALID


def test_a_failure_no_check_foresaw_is_found_by_halving(two_units, monkeypatch):
    """Whatever the arithmetic refuses, the units it refuses are found and the rest forecast."""
    UnitCapacitor.objects.filter(unit=two_units.bad, position__designator="C1").update(
        capacitance_uf=2200, esr_ohm=0.05, tan_delta=None)
    units_mark_changed(unit_ids=[two_units.bad.pk])
    refused = two_units.bad.pk
    real = checks.compute

    def compute(fa, **kw):
        if refused in fa.unit_id.tolist():
            raise ValueError("esr_fly_ohm must be finite")
        return real(fa, **kw)

    monkeypatch.setattr(checks, "compute", compute)
    run = forecast_refresh()
    assert run.fleet.unit_id.tolist() == [two_units.unit.pk]
    assert run.unforecastable[0].reasons == [
        "the life engine could not work it out (esr_fly_ohm must be finite); check its capacitor figures and hires"]


def test_results_that_are_not_finite_set_the_unit_aside(two_units, monkeypatch):
    UnitCapacitor.objects.filter(unit=two_units.bad, position__designator="C1").update(
        capacitance_uf=2200, esr_ohm=0.05, tan_delta=None)
    units_mark_changed(unit_ids=[two_units.bad.pk])
    real = checks.compute
    refused = two_units.bad.pk

    def compute(fa, **kw):
        result = real(fa, **kw)
        rows = np.flatnonzero(fa.unit_id[fa.unit_index] == refused)
        result.damage[rows[:1]] = np.inf
        return result

    monkeypatch.setattr(checks, "compute", compute)
    run = forecast_refresh()
    assert [u.asset_tag for u in run.unforecastable] == ["NMB-0002"]
    assert run.unforecastable[0].reasons[0].startswith("C1 (supply reservoir): the forecast gave no finite damage")


def test_the_printed_due_list_and_service_sheet_say_so(two_units):
    from pypdf import PdfReader

    from reports.duelist import due_list
    from reports.services import due_list_pdf, sheet_pdf

    forecast_refresh()
    dl = due_list()
    assert dl.rows[0].asset_tag == "NMB-0002" and dl.cannot_forecast == 1
    _, data = due_list_pdf()
    text = " ".join(page.extract_text() for page in PdfReader(io.BytesIO(data)).pages)
    text = " ".join(text.split())  # lines wrap where the page ends
    assert "1 cannot be forecast until their figures are corrected" in text and "fix figures" in text
    _, data = sheet_pdf(asset_tag="NMB-0002")
    text = " ".join(page.extract_text() for page in PdfReader(io.BytesIO(data)).pages)
    assert "Cannot forecast: the life engine cannot use this unit's figures" in " ".join(text.split())
