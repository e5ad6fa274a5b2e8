"""The charged parts of a unit (scheduling.hazards), checked against the
worked values of references.md §7 (computed from E = C V^2 / 2 and
t = R C ln(V0 / V_safe))."""

from numpy.testing import assert_allclose

from scheduling import parameters as P
from scheduling.hazards import charged_parts


def test_only_parts_rated_above_sixty_volts_count_most_energy_first():
    parts = charged_parts(designators=["C1", "C2", "C3", "C4"], capacitance_uf=[100, 220, 4700, 47],
                          rated_voltage_v=[400, 350, 35, 60])
    assert [p.designator for p in parts] == ["C2", "C1"]
    # references.md §7: 220 uF at 350 V through 2 kohm reaches 60 V after 0.776 s; through
    # 10 kohm five times that.  100 uF at 400 V holds 8.0 J and takes 1.897 s through 10 kohm.
    assert_allclose(parts[0].energy_j, 0.5 * 220e-6 * 350**2)
    assert_allclose(parts[0].discharge_s, 5 * 0.776, rtol=1e-3)
    assert_allclose(parts[1].energy_j, 8.0)
    assert_allclose(parts[1].discharge_s, 1.897, rtol=1e-3)


def test_the_stated_resistor_and_safe_level_are_the_documented_ones():
    assert P.SAFE_VOLTAGE_V == 60.0   # SELV, IEC 60335-1 as quoted in IEC Electropedia (references.md §7)
    parts = charged_parts(designators=["C1"], capacitance_uf=[100], rated_voltage_v=[400], resistor_ohm=2e3)
    assert_allclose(parts[0].discharge_s, 1.897 / 5, rtol=1e-3)


def test_a_unit_without_high_voltage_parts_has_none():
    assert charged_parts(designators=["C1"], capacitance_uf=[1000], rated_voltage_v=[50]) == []
    assert charged_parts(designators=[], capacitance_uf=[], rated_voltage_v=[]) == []
