"""The replacement part's rules (common practice) and the IEC 60063 tables they use.

E-series values: refs §8 ([V] IEC 60063 as quoted there, and run in the PyPI
package ``eseries``): E6 10 15 22 33 47 68; E12 adds 12 18 27 39 56 82; E24
adds 11 13 16 20 24 30 36 43 51 62 75 91.  Checks from the same section:
the nearest E24 value to 319 is 330; around 5000 lie 4700, 5100 and 5600.
"""

import pytest

from scheduling import replacement as R


def test_the_series_tables_are_iec_60063_refs_s8():
    assert [round(v * 10) for v in R.E6] == [10, 15, 22, 33, 47, 68]
    assert [round(v * 10) for v in R.E12] == [10, 12, 15, 18, 22, 27, 33, 39, 47, 56, 68, 82]
    added = sorted(set(round(v * 10) for v in R.E24) - set(round(v * 10) for v in R.E12))
    assert added == [11, 13, 16, 20, 24, 30, 36, 43, 51, 62, 75, 91]


def test_nearest_values_refs_s8():
    assert R.nearest_in_series(319, "E24") == pytest.approx(330)
    assert R.nearest_in_series(4800, "E24") == pytest.approx(4700)
    assert R.nearest_in_series(5050, "E24") == pytest.approx(5100)
    assert R.nearest_in_series(5500, "E24") == pytest.approx(5600)
    assert R.nearest_in_series(0.0099, "E12") == pytest.approx(0.01)


def test_a_usual_value_is_kept_and_an_unusual_one_goes_to_the_nearest_e12():
    assert R.recommend(capacitance_uf=2200, rated_voltage_v=35, rated_life_h=2000, diameter_mm=16, mount="radial",
                       role="supply_reservoir").capacitance_uf == 2200
    assert R.recommend(capacitance_uf=3.3, rated_voltage_v=50, rated_life_h=1000, diameter_mm=5, mount="radial",
                       role="general").capacitance_uf == 3.3
    assert R.recommend(capacitance_uf=250, rated_voltage_v=16, rated_life_h=1000, diameter_mm=8, mount="axial",
                       role="general").capacitance_uf == 270


def test_voltage_endurance_temperature_and_size_follow_common_practice():
    r = R.recommend(capacitance_uf=47, rated_voltage_v=16, rated_life_h=1000, diameter_mm=6.3, mount="axial",
                    role="signal_coupling", operating_voltage_v=15.0)
    assert r.rated_voltage_v == 25.0          # at least 1.25 x 15 V, rounded up to a usual rating
    assert r.rated_life_h == 2000.0           # at least 2,000 h
    assert r.rated_temp_c == 105.0
    assert (r.max_diameter_mm, r.mount) == (6.3, "axial")
    assert not r.low_esr
    kept = R.recommend(capacitance_uf=100, rated_voltage_v=450, rated_life_h=5000, diameter_mm=25, mount="radial",
                       role="supply_reservoir", operating_voltage_v=330.0)
    assert (kept.rated_voltage_v, kept.rated_life_h) == (450.0, 5000.0)  # never below the original


def test_only_the_pump_pair_asks_for_a_low_esr_type():
    for role in ("pump_flying", "pump_reservoir"):
        assert R.recommend(capacitance_uf=10, rated_voltage_v=16, rated_life_h=2000, diameter_mm=5, mount="radial",
                           role=role).low_esr


def test_nonsense_is_refused():
    with pytest.raises(ValueError):
        R.recommend(capacitance_uf=0, rated_voltage_v=16, rated_life_h=2000, diameter_mm=5, mount="radial",
                    role="general")
    with pytest.raises(ValueError):
        R.nearest_in_series(-1.0)
