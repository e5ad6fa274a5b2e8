"""Plausibility where data come in: figures no real part has, hires before a
unit existed, dates at the ends of the calendar.  Each is refused with the
reason in words, and nothing is written.

Outside sources named beside the checks:
- refs §4 (computed from ESR = tan delta / (2 pi f C)): tan delta 0.10,
  1000 uF, 120 Hz -> 0.1326 ohm; can area pi D L + pi D**2 / 2.
- scipy.integrate: the volume of a cylinder as the integral of its cross-section.
- Series data sheets (from memory): 2200 uF 35 V in 16 x 31.5 mm, 10 uF 16 V in
  5 x 11 mm, 0.1 uF 50 V in 5 x 11 mm, 4700 uF 16 V in 16 x 31.5 mm.
"""

import datetime as dt

import numpy as np
import pytest
from django.core.exceptions import ValidationError
from django.urls import reverse
from django.utils import timezone
from scipy import integrate

from fleet.csvio import CsvImportError
from fleet.models import Position, Rental, Unit, UnitCapacitor
from fleet.services import ServiceError
from front.workflows import import_csv, rental_check_in, rental_check_out, service_record_recap
from scheduling import parameters as P
from scheduling import physics
from tests.base import build_fleet, make_user
from tests.test_csv_import import POSITIONS, POSITIONS_HEADER, write


@pytest.fixture(autouse=True)
def plain_http(settings):
    settings.SECURE_SSL_REDIRECT = False


@pytest.fixture
def fleet(db):
    return build_fleet()


# --- the figures --------------------------------------------------------------------------------

def test_can_volume_is_the_integral_of_its_cross_section():
    # scipy.integrate.dblquad over the disc (polar) times the length.
    d_mm, l_mm = 16.0, 31.5
    area_mm2, _ = integrate.dblquad(lambda r, phi: r, 0, 2 * np.pi, 0, d_mm / 2)
    assert physics.can_volume_cm3(d_mm, l_mm) == pytest.approx(area_mm2 * l_mm / 1000.0, rel=1e-12)


def test_tan_delta_from_esr_inverts_the_data_sheet_relation():
    # refs §4: tan delta 0.10, 1000 uF, 120 Hz -> ESR 0.1326 ohm (to four figures).
    assert physics.tan_delta_from_esr(0.1326, 1000e-6) == pytest.approx(0.10, abs=5e-5)
    esr = physics.esr_from_tan_delta_ohm(np.array([0.05, 0.2, 1.5]), np.array([10e-6, 470e-6, 2.2e-6]))
    np.testing.assert_allclose(physics.tan_delta_from_esr(esr, np.array([10e-6, 470e-6, 2.2e-6])),
                               [0.05, 0.2, 1.5], rtol=1e-12)


@pytest.mark.parametrize("uf, volts, d, length", [
    (2200, 35, 16, 31.5), (10, 16, 5, 11), (0.1, 50, 5, 11), (4700, 16, 16, 31.5),  # data sheets, from memory
])
def test_real_parts_from_series_data_sheets_are_plausible(uf, volts, d, length):
    bad = physics.implausible_parts([uf * 1e-6], [volts], [physics.esr_from_tan_delta_ohm(0.15, uf * 1e-6)],
                                    [d], [length], [0.0])
    assert not (bad["charge"][0] or bad["esr"][0] or bad["ripple"][0])
    density = bad["charge_uc_per_cm3"][0]
    assert P.CHARGE_DENSITY_MIN_UC_PER_CM3 * 10 < density < P.CHARGE_DENSITY_MAX_UC_PER_CM3 / 5


def test_figures_wrong_by_orders_of_magnitude_are_not():
    bad = physics.implausible_parts([1e-12, 2200e-6, 2200e-6], [16, 35, 35], [3.5, 100.0, 0.05], [5, 16, 16],
                                    [11, 31.5, 31.5], [0.04, 0.0, 20.0])
    assert bad["charge"].tolist() == [True, False, False]   # 1 pF in a 5 x 11 mm can
    assert bad["esr"][1] and not bad["esr"][2]               # 100 ohm on 2200 uF: tan delta 166
    # 20 A through 0.05 ohm in a 16 x 31.5 mm can (refs §4: 19.9 cm^2 at 1.5e-3 W/(cm^2 K)): 670 K.
    area = np.pi * 1.6 * 3.15 + np.pi * 1.6**2 / 2
    assert bad["ripple_rise_k"][2] == pytest.approx(400 * 0.05 / (1.5e-3 * area))
    assert bad["ripple"].tolist() == [False, False, True]


# --- where data come in -----------------------------------------------------------------------

@pytest.fixture
def models(db, tmp_path):
    from tests.test_csv_import import GEAR_MODELS, LOCATIONS

    import_csv(write(tmp_path, "locations.csv", LOCATIONS))
    import_csv(write(tmp_path, "gear_models.csv", GEAR_MODELS))


@pytest.mark.parametrize("row, message", [
    ("C3,general,1p,25,85,1000,0.9,,6.3,11,axial,,,12",
     "positions.csv, row 2, column capacitance: 1 pF at 25 V in a 6.3 x 11 mm can is far from what an aluminium "
     "electrolytic capacitor of that size holds (about 14 nF to 1400 µF); check the capacitance and its unit."),
    ("C3,general,47u,25,85,1000,900,,6.3,11,axial,,,12",
     "positions.csv, row 2, column esr_ohm: ESR 900 Ω with 47 µF means tan delta 32 at 120 Hz, far from real "
     "parts"),
    ("C3,general,47u,25,85,1000,0.9,,6.3,11,axial,3,,12",
     # refs §4: 9 A^2 x 0.9 ohm over 2.80 cm^2 at 1.5e-3 W/(cm^2 K).
     "positions.csv, row 2, column ripple_current_a: 3 A of ripple through 0.9 Ω would heat this 6.3 x 11 mm "
     "can 1,928 K above the air around it, which no part survives"),
])
def test_an_import_refuses_a_part_no_one_makes(models, tmp_path, row, message):
    text = POSITIONS_HEADER + "\nOrrery Instruments,Tidewell 12," + row + ",,,,,,,,,,,,\n"
    with pytest.raises(CsvImportError) as info:
        import_csv(write(tmp_path, "positions.csv", text))
    assert any(e.startswith(message) for e in info.value.errors), info.value.errors
    assert Position.objects.count() == 0


def test_the_issue_file_of_one_capacitor_at_1_pf_is_refused(models, tmp_path):
    import_csv(write(tmp_path, "positions.csv", POSITIONS))
    text = POSITIONS.replace(",C7,pump_flying,10u,", ",C7,pump_flying,1p,")
    with pytest.raises(CsvImportError, match="row 3, column capacitance: 1 pF at 16 V in a 5 x 11 mm can"):
        import_csv(write(tmp_path, "positions.csv", text))
    assert Position.objects.get(designator="C7").capacitance_uf == 10.0


def test_the_admin_refuses_it_too(client, fleet):
    client.force_login(make_user("superuser", username="root"))
    position = Position.objects.get(designator="C7")
    data = {f: getattr(position, f) if getattr(position, f) is not None else "" for f in (
        "designator", "role", "capacitance_uf", "rated_voltage_v", "rated_temp_c", "rated_life_h", "esr_ohm",
        "tan_delta", "diameter_mm", "length_mm", "mount", "ripple_current_a", "ripple_freq_hz",
        "operating_voltage_v", "pump_partner", "pump_input_v", "pump_load_a", "pump_freq_hz", "pump_switch_ohm",
        "pump_min_rail_v", "coupling_load_ohm", "coupling_max_corner_hz", "reservoir_load_a",
        "reservoir_ripple_freq_hz", "reservoir_ripple_limit_v")}
    data.update(gear_model=position.gear_model_id, capacitance_uf="1e-6")
    response = client.post(reverse("admin:fleet_position_change", args=[position.pk]), data)
    assert response.status_code == 200
    assert "1 pF at 50 V in a 5 x 11 mm can is far from" in response.content.decode()
    assert Position.objects.get(pk=position.pk).capacitance_uf == 4.7


def test_a_recap_refuses_a_replacement_no_one_makes(fleet):
    with pytest.raises(ServiceError, match="C7: 1 pF at 50 V in a 5 x 11 mm can"):
        service_record_recap(unit_id=fleet.unit.pk, performed_on=dt.date(2024, 3, 1),
                             replacements={"C7": {"capacitance_uf": 1e-6}})
    assert UnitCapacitor.objects.get(unit=fleet.unit, position__designator="C7").capacitance_uf == 4.7


def test_a_circuit_figure_of_zero_is_refused(fleet):
    position = Position.objects.get(designator="C1")
    position.reservoir_ripple_freq_hz = 0.0
    with pytest.raises(ValidationError) as info:
        position.full_clean()
    assert info.value.message_dict["reservoir_ripple_freq_hz"] == ["Must be above zero."]


# --- hires before the unit existed -------------------------------------------------------------

def test_a_check_out_before_the_unit_joined_the_fleet_is_refused(fleet):
    """The issue's case: a check-out dated 1900, then a check-in of a million powered hours."""
    with pytest.raises(ValidationError) as info:
        rental_check_out(unit_id=fleet.unit.pk, job_ref="OLD", out_at=dt.datetime(1900, 1, 2, tzinfo=dt.timezone.utc))
    assert info.value.message_dict["out_at"] == [
        "NMB-0001 joined the fleet on 1 Mar 2015; it cannot have gone out before that."]
    assert not Rental.objects.exists()
    rental_check_out(unit_id=fleet.unit.pk, job_ref="NEW", out_at=timezone.now() - dt.timedelta(days=2))
    with pytest.raises(ServiceError, match="1e\\+06 h powered is more than the 48.0 h the unit was out"):
        rental_check_in(unit_id=fleet.unit.pk, venue_ambient_c=25, powered_hours=1_000_000)
    assert Rental.objects.get().in_at is None


def test_a_short_hire_says_to_the_minute_how_long_the_unit_was_out(fleet):
    """Under an hour the time out is given in minutes too ("0.0 h" would say it never left)."""
    rental_check_out(unit_id=fleet.unit.pk, job_ref="QUICK", out_at=timezone.now() - dt.timedelta(minutes=3))
    with pytest.raises(ServiceError, match=r"0\.5 h powered is more than the 0\.05 h \(3 min\) the unit was out"):
        rental_check_in(unit_id=fleet.unit.pk, venue_ambient_c=25, powered_hours=0.5)
    assert Rental.objects.get().in_at is None


@pytest.mark.parametrize("moment, message", [
    ("0001-01-01T00:00", "That date is before 1900; check the year."),
    ("1899-12-31T23:00", "That date is before 1900; check the year."),
    ("9999-12-31T23:59", "That time is in the future; leave it empty for now."),
])
def test_desk_dates_at_the_ends_of_the_calendar_are_refused(client, fleet, moment, message):
    client.force_login(make_user("desk"))
    response = client.post(reverse("check_out"), {"asset_tag": "NMB-0001", "job_ref": "J-1",
                                                  "expected_ambient_c": "24", "out_at": moment})
    assert response.status_code == 200
    assert response.context["form"].errors["out_at"] == [message]
    assert not Rental.objects.exists()


def test_a_unit_cannot_join_the_fleet_at_the_ends_of_the_calendar(fleet):
    unit = Unit.objects.get(pk=fleet.unit.pk)
    for day in (dt.date(1, 1, 1), dt.date(9999, 12, 31)):
        unit.joined_on = day
        with pytest.raises(ValidationError) as info:
            unit.full_clean()
        assert info.value.message_dict["joined_on"] == ["Give a date between 1900 and 2100."]


def test_samples_and_services_at_the_ends_of_the_calendar_are_refused(fleet):
    from fleet.models import TemperatureSample

    sample = TemperatureSample(location=fleet.location, taken_at=dt.datetime(1, 1, 2, tzinfo=dt.timezone.utc),
                               temp_c=18)
    with pytest.raises(ValidationError) as info:
        sample.full_clean()
    assert info.value.message_dict["taken_at"] == ["Give a date between 1900 and 2100."]
    for day, message in ((dt.date(9999, 12, 31), "Give a date between 1900 and 2100."),
                         (dt.date(1975, 5, 1), "NMB-0001 was made in 1981; it cannot have been serviced before that.")):
        with pytest.raises(ValidationError) as info:
            service_record_recap(unit_id=fleet.unit.pk, performed_on=day, replacements={"C7": {"rated_life_h": 4000}})
        assert info.value.message_dict["performed_on"] == [message]
    assert not UnitCapacitor.objects.filter(unit=fleet.unit, is_original=False).exists()
