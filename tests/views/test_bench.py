"""The bench pages: intake, readings with messages next to their fields,
the recap with suggested parts, release; technicians and managers only."""

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
