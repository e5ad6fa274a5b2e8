"""The bench pages: intake, readings with messages next to their fields,
the recap with suggested parts, release; technicians and managers only."""

from html.parser import HTMLParser

import pytest
from django.urls import reverse

from fleet.models import BenchVisit, Reading, Unit
from front import bench
from tests.test_bench_loop import unit  # noqa: F401  (a unit with a charge pump)

from ..base import make_role_users


@pytest.fixture
def users(db):
    return make_role_users()


def url(name, tag="EC-0001"):
    return reverse(name, args=[tag])


def test_the_bench_is_for_technicians_and_managers(client, users, unit):
    client.force_login(users.desk)
    assert client.get(url("bench_unit")).status_code == 403
    client.force_login(users.technician)
    assert client.get(url("bench_unit")).status_code == 200


def test_intake_from_the_page(client, users, unit):
    Unit.objects.filter(pk=unit.pk).update(status=Unit.Status.HOLD)
    client.force_login(users.technician)
    response = client.post(url("bench_intake"), {"notes": "Dry signal only"}, follow=True)
    assert "EC-0001 is on the bench." in response.content.decode()
    visit = BenchVisit.objects.get()
    assert (visit.opened_by, visit.intake_notes) == (users.technician, "Dry signal only")


def test_a_reading_that_cannot_be_right_is_shown_next_to_its_field_and_not_saved(client, users, unit):
    bench.bench_intake(unit_id=unit.pk)
    client.force_login(users.technician)
    response = client.post(url("bench_reading"), {"cap-designator": "c4", "cap-esr_ohm": "0.2",
                                                  "cap-esr_freq_hz": "100"})
    form = response.context["cap_form"]
    assert "well below a new part" in " ".join(form.errors["esr_ohm"])
    assert form.fields["esr_ohm"].widget.attrs.get("autofocus")
    response = client.post(url("bench_reading"), {"cap-designator": "C4", "cap-capacitance_uf": "4x7"})
    assert response.context["cap_form"].errors["capacitance_uf"]
    response = client.post(url("bench_reading"), {"rail-rail_name": "-5V", "rail-rail_measured_v": "3.3",
                                                  "rail-rail_load_ma": "20"})
    assert "wrong sign" in " ".join(response.context["rail_form"].errors["rail_measured_v"])
    assert not Reading.objects.exists()


def test_a_reading_moves_the_forecast_and_the_page_says_how(client, users, unit):
    bench.bench_intake(unit_id=unit.pk)
    client.force_login(users.technician)
    response = client.post(url("bench_reading"), {"cap-designator": "C4", "cap-esr_ohm": "14",
                                                  "cap-esr_freq_hz": "100", "cap-capacitance_uf": "8u2"},
                           follow=True)
    text = response.content.decode()
    assert "C4: ESR 14 Ω measured" in text and "damage C4" in text
    reading = Reading.objects.get()
    assert reading.capacitance_uf == pytest.approx(8.2) and reading.taken_by == users.technician
    # predicted against measured on the unit page
    page = client.get(reverse("unit_detail", args=["EC-0001"])).content.decode()
    assert "C4 ESR at 100 Hz" in page and "14 Ω" in page


def test_a_recap_from_the_page_with_suggested_parts(client, users, unit):
    bench.bench_intake(unit_id=unit.pk)
    client.force_login(users.technician)
    response = client.get(url("bench_recap"), {"choice": "role", "role": "pump_flying"})
    rows = response.context["rows"]
    assert [r["cap"].position.designator for r in rows] == ["C4"]
    initial = {f.name: f.value() for f in rows[0]["fields"]}
    assert initial["C4__rated_temp_c"] == "105" and initial["C4__diameter_mm"] == "5"
    data = {"choice": "pick", "pick": ["C4", "C5"], "signed_off": "on", "notes": "Pump pair"}
    for d in ("C4", "C5"):
        form_fields = client.get(url("bench_recap"), {"choice": "pick", "pick": ["C4", "C5"]}).context["form"]
        for name, field in form_fields.fields.items():
            if name.startswith(d + "__") and field.initial not in (None, ""):
                data[name] = field.initial
    data["C5__removed_esr_ohm"] = "3.1"
    response = client.post(url("bench_recap"), data, follow=True)
    assert "Recap recorded and signed off: C4, C5 replaced" in response.content.decode()
    record = unit.service_records.get()
    assert record.signed_off_by == users.technician


def test_the_recap_needs_the_sign_off(client, users, unit):
    bench.bench_intake(unit_id=unit.pk)
    client.force_login(users.technician)
    response = client.post(url("bench_recap"), {"choice": "pick", "pick": ["C4"], "C4__capacitance_uf": "10",
                                                "C4__rated_voltage_v": "16", "C4__rated_temp_c": "105",
                                                "C4__rated_life_h": "2000", "C4__diameter_mm": "5",
                                                "C4__length_mm": "11"})
    assert "Sign the recap off" in " ".join(response.context["form"].errors["signed_off"])
    assert not unit.service_records.exists()


def test_release_or_keep_held_from_the_page(client, users, unit):
    bench.bench_intake(unit_id=unit.pk)
    client.force_login(users.technician)
    response = client.post(url("bench_release"), {"decision": "hold", "reason": ""})
    assert response.context["form"].errors["reason"]
    client.post(url("bench_release"), {"decision": "hold", "reason": "Waiting for parts"})
    unit.refresh_from_db()
    assert (unit.status, unit.hold_reason) == ("hold", "Waiting for parts")
    bench.bench_intake(unit_id=unit.pk)
    client.post(url("bench_release"), {"decision": "release"})
    unit.refresh_from_db()
    assert unit.status == "available"
    history = client.get(reverse("unit_detail", args=["EC-0001"])).content.decode()
    assert "Status: On the bench → Available" in history or "status: bench → available" in history


# --- the reading form, the unit's own safety, readings in plain words ----------------------------

class _Rows(HTMLParser):
    """Each ``div.readrow`` of a page: its inputs' names, and the text of the unit shown after each."""

    def __init__(self):
        super().__init__()
        self.rows, self._depth, self._unit = [], 0, False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if self._depth:
            self._depth += tag == "div"
            if tag == "input" and attrs.get("type") != "hidden":
                self.rows[-1].append([attrs["name"], ""])
            self._unit = tag == "span" and attrs.get("class") == "unit"
        elif tag == "div" and "readrow" in (attrs.get("class") or "").split():
            self.rows.append([])
            self._depth = 1

    def handle_endtag(self, tag):
        if self._depth and tag == "div":
            self._depth -= 1
        self._unit = False

    def handle_data(self, data):
        if self._unit and self.rows and self.rows[-1]:
            self.rows[-1][-1][1] += data.strip()


def test_a_capacitor_reading_is_one_row_across_with_its_units_beside_the_fields(client, users, unit):
    """Position, ESR, its test frequency, capacitance and leakage side by side in one row, in that order in
    the page (so Tab goes across, then down to the rail's row), each with its unit beside it."""
    bench.bench_intake(unit_id=unit.pk)
    client.force_login(users.technician)
    parser = _Rows()
    parser.feed(client.get(url("bench_unit")).content.decode())
    capacitor, rail = parser.rows
    assert capacitor == [["cap-designator", ""], ["cap-esr_ohm", "Ω"], ["cap-esr_freq_hz", "Hz"],
                         ["cap-capacitance_uf", "µF"], ["cap-leakage_ua", "µA"]]
    assert rail == [["rail-rail_name", ""], ["rail-rail_measured_v", "V"], ["rail-rail_load_ma", "mA"],
                    ["rail-rail_expected_v", "V"], ["rail-rail_input_v", "V"]]


def test_the_units_own_hazards_are_on_every_bench_page(client, users, unit):
    """The model's hazard notes, its parts above 60 V and the usual cautions on intake, readings, recap and
    release, not only on the unit page."""
    from fleet.models import Position, UnitCapacitor

    model = unit.gear_model
    model.hazard_tube_hv = True
    model.hazard_notes = "Invented note: the output stage's anode supply sits at about 400 V."
    model.save()
    Position.objects.filter(gear_model=model, designator="C1").update(rated_voltage_v=450, capacitance_uf=47)
    UnitCapacitor.objects.filter(unit=unit, position__designator="C1").update(rated_voltage_v=450, capacitance_uf=47)
    Unit.objects.filter(pk=unit.pk).update(status=Unit.Status.HOLD, hold_reason="Hum")
    client.force_login(users.technician)
    pages = {"intake": client.get(url("bench_unit")).content.decode()}
    bench.bench_intake(unit_id=unit.pk)
    pages["readings"] = client.get(url("bench_unit")).content.decode()
    pages["recap"] = client.get(url("bench_recap"), {"choice": "all"}).content.decode()
    pages["release"] = client.get(url("bench_release")).content.decode()
    for name, text in pages.items():
        assert "Invented note: the output stage&#x27;s anode supply sits at about 400 V." in text, name
        assert "Tube high voltage: lethal" in text, name
        assert "1 part rated above 60 V" in text and "C1</span> 47 µF 450 V, 4.8 J" in text, name
        for caution in ("Isolate the unit from the mains", "verify with a meter", "Local electrical codes",
                        "licensed practice"):
            assert caution in text, (name, caution)


def test_rail_and_capacitance_readings_are_said_in_plain_words(client, users, unit):
    bench.bench_intake(unit_id=unit.pk)
    client.force_login(users.technician)
    response = client.post(url("bench_reading"), {"rail-rail_name": "-9V", "rail-rail_measured_v": "-6.1",
                                                  "rail-rail_load_ma": "10", "rail-rail_expected_v": "-9",
                                                  "rail-rail_input_v": "12"},
                           follow=True)
    text = response.content.decode()
    # 6.1 / 9 = 0.678: low, 68 %; a true minus sign
    assert "Expected −9 V, measured −6.1 V under 10 mA: low, 68 % of expected" in text
    client.post(url("bench_reading"), {"cap-designator": "C5", "cap-capacitance_uf": "38"})
    text = client.get(url("bench_unit")).content.decode()
    # 38 / 47 = 0.809
    assert "Measured 38 µF against 47 µF rated: 81 % (within the 20 % end-of-life drift)" in text
    page = client.get(reverse("unit_detail", args=["EC-0001"])).content.decode()
    assert "measured −6.1 V under 10 mA: low, 68 % of expected" in page and "against 47 µF rated: 81 %" in page


def test_the_release_page_says_what_the_desk_will_be_asked(client, users, unit):
    from scheduling.models import UnitForecast

    bench.bench_intake(unit_id=unit.pk)
    client.force_login(users.technician)
    UnitForecast.objects.filter(unit=unit).update(status="overdue", risk=0.25)
    text = client.get(url("bench_release")).content.decode()
    assert "the desk can only check it out with a recorded reason" in text
    UnitForecast.objects.filter(unit=unit).update(status="overdue", risk=0.02)
    text = client.get(url("bench_release")).content.decode()
    assert "below the house risk limit: if you release it, the desk may hire it out" in text


def test_the_bench_page_says_what_the_desk_reported_on_return(client, users, unit):
    """The technician taking a held unit in sees the fault the hirer reported, not only "Held"."""
    import datetime as dt

    from django.utils import timezone

    from front import workflows

    out = timezone.now() - dt.timedelta(days=3)
    workflows.rental_check_out(unit_id=unit.pk, job_ref="J-HUM-4", out_at=out, override_reason="test hire")
    workflows.rental_check_in(unit_id=unit.pk, in_at=out + dt.timedelta(days=2), venue_ambient_c=31,
                              powered_hours=14, reported_faults="Hum on both outputs when warm.")
    client.force_login(users.technician)
    text = client.get(url("bench_unit")).content.decode()
    assert "Take it to the bench" in text and "Hum on both outputs when warm." in text
    assert "from job J-HUM-4: 14 h powered at 31 °C" in text


def test_the_recap_page_offers_the_positions_the_forecast_says_to_replace(client, users, unit):
    import numpy as np

    from scheduling.models import UnitForecast
    from scheduling.services import pack_positions, stored_positions
    from scheduling.triage import REPLACE

    bench.bench_intake(unit_id=unit.pk)
    forecast = UnitForecast.objects.get(unit=unit)
    positions = stored_positions(forecast).copy()
    assert len(positions) == 4
    c4 = unit.capacitors.get(position__designator="C4").pk
    positions["action"] = np.where(positions["capacitor_id"] == c4, REPLACE, 0)
    forecast.positions = pack_positions(positions)
    forecast.save()
    client.force_login(users.technician)
    response = client.get(url("bench_recap"))
    assert response.context["to_replace"] == ["C4"]
    assert "?choice=pick&amp;pick=C4" in response.content.decode()


def test_the_release_page_says_what_this_visit_did(client, users, unit):
    bench.bench_intake(unit_id=unit.pk)
    client.force_login(users.technician)
    client.post(url("bench_reading"), {"cap-designator": "C4", "cap-esr_ohm": "9", "cap-esr_freq_hz": "100"})
    text = client.get(url("bench_release")).content.decode()
    assert "1 reading;" in text and "no recap recorded." in text
    bench.bench_recap(unit_id=unit.pk, replacements={"C4": {}, "C5": {}}, user=users.technician)
    text = client.get(url("bench_release")).content.decode()
    assert "replaced C4, C5, signed off." in text
