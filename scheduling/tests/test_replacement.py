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


# The rated-voltage rule (common practice, no single source): the smallest usual rating at least
# the original's and 1.25 x the working voltage; a high-voltage can goes at most one usual rating
# above its original; never below the working voltage.


def _volts(original, working=0.0):
    return R.recommend(capacitance_uf=47, rated_voltage_v=original, rated_life_h=2000, diameter_mm=25,
                       mount="radial", role="supply_reservoir", operating_voltage_v=working).rated_voltage_v


def test_a_450_v_filter_can_gets_at_most_500_v_never_600_v():
    assert _volts(450, 470.0) == 500.0   # 1.25 x 470 = 587.5 would be 600 V: capped at the next rating
    assert _volts(450, 440.0) == 500.0   # 1.25 x 440 = 550 V: capped at 500 V
    assert _volts(450, 380.0) == 500.0   # 1.25 x 380 = 475 V: 500 V, the smallest usual rating above
    assert _volts(450, 300.0) == 450.0   # 375 V asked: the original's 450 V is enough
    assert _volts(450) == 450.0          # working voltage not known: the original's rating
    assert _volts(500, 470.0) == 550.0   # 587.5 V asked: one rating above 500 V


def test_the_cap_never_goes_below_the_working_voltage():
    # a can run above its own rating (520 V on a 450 V can): at least 550 V, the first rating above 520 V
    assert _volts(450, 520.0) == 550.0


def test_low_voltage_parts_keep_the_whole_margin():
    assert _volts(16, 15.0) == 25.0      # 18.75 V asked: 25 V, two ratings above the original
    assert _volts(63, 60.0) == 80.0      # 75 V asked
    assert _volts(10) == 10.0
    assert _volts(40) == 50.0            # an unusual original rating goes up to the next usual one


def test_the_suggestion_is_the_smallest_usual_rating_that_meets_the_rule():
    for original in R.RATED_VOLTAGES_V:
        for working in (0.0, 0.3 * original, 0.8 * original, original, 1.1 * original):
            v = _volts(original, working)
            assert v in R.RATED_VOLTAGES_V or v > R.RATED_VOLTAGES_V[-1]   # beyond the table: the exact figure
            assert v >= original and v >= working
            smaller = [r for r in R.RATED_VOLTAGES_V if original <= r < v and r >= working]
            # no smaller usual rating would meet the margin (below the high-voltage cap)
            for r in smaller:
                assert r < R.VOLTAGE_MARGIN * working
            if original >= R.HIGH_VOLTAGE_V and working <= original:
                above = [r for r in R.RATED_VOLTAGES_V if r > original]
                assert v <= (above[0] if above else original)
