"""Check values for scheduling.physics.

Every check names its source: "refs §n" is the shared docs/references.md.  Its
markers are repeated here: [V] read in a published source, [M] from memory,
[C] computed from the formula, [CP] common practice.
"""

import doctest

import numpy as np
import pytest
import scipy.constants
import scipy.special
from numpy.testing import assert_allclose
from scipy import integrate, stats

from scheduling import parameters as P
from scheduling import physics as ph

HOURS_PER_YEAR = 8766.0  # 365.25 days


def test_docstring_examples():
    result = doctest.testmod(ph, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 20
    assert result.failed == 0


# --- refs §1: 10 K rule ----------------------------------------------------

@pytest.mark.parametrize(
    "l0, t0, t, expected",
    [
        (2000, 105, 65, 32000.0),  # [C] refs §1 table
        (1000, 85, 40, 22627.417),  # [C] refs §1 table (22 627 h)
        (2000, 85, 40, 45254.834),  # [C] refs §1 table (45 255 h)
        (1000, 105, 40, 90509.668),  # [C] refs §1 table (90 510 h)
    ],
)
def test_10k_rule_table_refs_s1(l0, t0, t, expected):
    assert_allclose(ph.life_hours_10k(l0, t0, t), expected, rtol=1e-7)


def test_10k_rule_against_encyclopedia_years_refs_s1():
    # [V] public encyclopedia article on failing capacitors: 2000 h @85 C at
    # 40 C is "roughly 6 years"; 1000 h @105 C at 40 C "more than 10 years".
    assert 5.0 < ph.life_hours_10k(2000, 85, 40) / HOURS_PER_YEAR < 6.5
    assert ph.life_hours_10k(1000, 105, 40) / HOURS_PER_YEAR > 10.0


def test_10k_rule_halves_per_10_kelvin_manufacturer_primer():
    # [V] refs §1 manufacturer primer: +10 degC -> life shortened to one half.
    t = np.array([20.0, 30.0, 40.0, 50.0])
    life = ph.life_hours_10k(5000, 105, t)
    assert_allclose(life[1:] / life[:-1], 0.5, rtol=1e-12)


# --- refs §1: Arrhenius ----------------------------------------------------

def test_boltzmann_constant_is_codata_scipy():
    # [V] refs §1: scipy.constants (CODATA, exact since 2019 SI).
    assert P.BOLTZMANN_EV_PER_K == scipy.constants.physical_constants["Boltzmann constant in eV/K"][0]
    assert_allclose(P.BOLTZMANN_EV_PER_K, 8.617333262e-5, rtol=1e-10)


@pytest.mark.parametrize(
    "t_use, t_test, ea, af",
    [
        (65, 105, 0.35, 3.5627),  # [C] refs §1 table
        (65, 105, 0.70, 12.693),  # [C] refs §1 table
        (65, 105, 0.8316, 20.466),  # [C] refs §1 table
        (40, 85, 0.35, 5.1020),  # [C] refs §1 table
        (40, 85, 0.70, 26.031),  # [C] refs §1 table
        (40, 85, 0.8316, 48.039),  # [C] refs §1 table
    ],
)
def test_arrhenius_acceleration_factors_refs_s1(t_use, t_test, ea, af):
    # With L0 = 1 h the life is the acceleration factor.
    assert_allclose(ph.life_hours_arrhenius(1.0, t_test, t_use, ea), af, rtol=1e-4)


def test_arrhenius_equivalent_ea_matches_10k_rule_95_105_refs_s1():
    # [C] refs §1: Ea = k ln2 T1 T2 / (T2 - T1) = 0.8315 eV for 95->105 C makes
    # the Arrhenius law halve life over that interval, as the 10 K rule does.
    t1, t2 = 95 + 273.15, 105 + 273.15
    ea = P.BOLTZMANN_EV_PER_K * np.log(2) * t1 * t2 / (t2 - t1)
    assert_allclose(ea, 0.8315, atol=1e-4)
    assert_allclose(P.TEN_K_EQUIVALENT_EA_EV, 0.8315)
    assert_allclose(ph.life_hours_arrhenius(2000, 105, 95, ea), ph.life_hours_10k(2000, 105, 95),
                    rtol=1e-12)
    assert_allclose(ph.life_hours_arrhenius(2000, 105, 95, 0.8315), 4000.0, rtol=1e-4)
    # ...but not elsewhere (refs §1: "not a single-Ea Arrhenius law").
    assert ph.life_hours_arrhenius(2000, 105, 40, ea) > 1.1 * ph.life_hours_10k(2000, 105, 40)


# --- refs §4: ripple heating -----------------------------------------------

def test_can_area_16x35_refs_s4():
    assert_allclose(ph.can_area_cm2(16, 35), 21.61, rtol=2e-4)  # [C] refs §4


@pytest.mark.parametrize("h, rise", [(1.0e-3, 4.63), (1.5e-3, 3.08), (2.0e-3, 2.31)])
def test_ripple_rise_refs_s4(h, rise):
    # [C] refs §4: 1 A through 0.1 ohm in a 16 x 35 mm can.
    assert_allclose(ph.ripple_rise_k(1.0, 0.1, 16, 35, h), rise, rtol=2e-3)


def test_ripple_rise_default_h_is_low_end_of_application_guides():
    # h = 1.5e-3 W/(cm^2 K): application guides quote 1.5-2.5e-3 (refs §4, from memory).
    assert P.HEAT_TRANSFER_W_PER_CM2_K == 1.5e-3
    assert_allclose(ph.ripple_rise_k(1.0, 0.1, 16, 35), 3.08, rtol=2e-3)


def test_esr_from_tan_delta_refs_s4():
    assert_allclose(ph.esr_from_tan_delta_ohm(0.10, 1000e-6), 0.1326, atol=5e-5)  # [C] refs §4, 4 places
    assert_allclose(ph.esr_from_tan_delta_ohm(0.10, 1000e-6, 100.0), 0.15915, rtol=1e-4)  # [C]


# --- refs §5: Palmgren-Miner ------------------------------------------------

def test_miner_worked_example_refs_s5():
    # [C] refs §5: 2000 h/105 C part, 50 % at 45 C, 30 % at 65 C, 20 % at 85 C.
    lives = ph.life_hours_10k(2000, 105, np.array([45.0, 65.0, 85.0]))
    assert_allclose(lives, [128000.0, 32000.0, 8000.0], rtol=1e-12)
    fractions = np.array([0.5, 0.3, 0.2])
    damage_per_hour = ph.miner_damage(fractions, lives)
    assert_allclose(1.0 / damage_per_hour, 26122.4, rtol=2e-6)
    shares = (fractions / lives) / damage_per_hour
    assert_allclose(shares, [0.102, 0.245, 0.653], atol=5e-4)


def test_miner_damage_broadcasts_over_positions():
    hours = np.array([[100.0, 200.0], [300.0, 0.0]])
    life = np.array([1000.0, 2000.0])  # per condition, shared by both rows
    assert_allclose(ph.miner_damage(hours, life), [0.2, 0.3], rtol=1e-12)
    assert isinstance(ph.miner_damage(100.0, 1000.0), float)
    assert ph.miner_damage([10.0], np.inf) == 0.0


# --- design brief §3: histogram damage --------------------------------------

BINS = np.arange(-40.0, 151.0)  # the 191 bins of scheduling.histogram


def _direct_histogram_damage(hours, l0, t0, rise, ea=None):
    t = BINS + np.asarray(rise)[..., None]
    l0, t0 = np.asarray(l0)[..., None], np.asarray(t0)[..., None]
    life = ph.life_hours_10k(l0, t0, t) if ea is None else ph.life_hours_arrhenius(l0, t0, t, ea)
    return np.sum(hours / life, axis=-1)


def test_histogram_10k_factorisation_is_exact_computed_from_formula():
    rng = np.random.default_rng(1)
    hours = rng.gamma(0.3, 20.0, size=(500, BINS.size))
    l0 = rng.choice([1000.0, 2000.0, 5000.0], 500)
    t0 = rng.choice([85.0, 105.0], 500)
    rise = rng.uniform(0, 15, 500)
    got = ph.damage_from_histogram(hours, BINS, l0, t0, rise)
    assert got.shape == (500,)
    assert_allclose(got, _direct_histogram_damage(hours, l0, t0, rise), rtol=1e-12)


def test_histogram_single_bin_matches_10k_rule_refs_s1():
    hours = np.zeros(BINS.size)
    hours[BINS == 65.0] = 32000.0  # 2000 h @105 C lasts 32 000 h at 65 C (refs §1 [C])
    assert_allclose(ph.damage_from_histogram(hours, BINS, 2000, 105), 1.0, rtol=1e-12)
    hours_rise = np.zeros(BINS.size)
    hours_rise[BINS == 60.0] = 32000.0  # 60 C ambient + 5 K rise = 65 C core
    assert_allclose(ph.damage_from_histogram(hours_rise, BINS, 2000, 105, extra_rise_k=5.0), 1.0,
                    rtol=1e-12)


def test_histogram_arrhenius_paths_agree_with_direct_sum():
    rng = np.random.default_rng(2)
    n = 20000  # more than one block of the general path
    hours = rng.gamma(0.3, 20.0, size=(n, BINS.size))
    l0 = rng.choice([1000.0, 2000.0], n)
    t0 = rng.choice([85.0, 105.0], n)
    rise = rng.uniform(0, 15, n)
    # per-position rise and Ea: general blocked path
    got = ph.damage_from_histogram(hours, BINS, l0, t0, rise, law="arrhenius",
                                   activation_energy_ev=0.7)
    assert_allclose(got, _direct_histogram_damage(hours, l0, t0, rise, 0.7), rtol=1e-10)
    # a single rise and Ea: factorised path
    got1 = ph.damage_from_histogram(hours, BINS, l0, t0, 3.0, law="arrhenius",
                                    activation_energy_ev=0.7)
    assert_allclose(got1, _direct_histogram_damage(hours, l0, t0, 3.0, 0.7), rtol=1e-10)
    # one history, many positions (hours broadcast over the leading axis)
    got2 = ph.damage_from_histogram(hours[0], BINS, 2000.0, 105.0, rise[:5], law="arrhenius",
                                    activation_energy_ev=0.7)
    assert got2.shape == (5,)
    assert_allclose(got2, _direct_histogram_damage(hours[0], 2000.0, 105.0, rise[:5], 0.7),
                    rtol=1e-10)


def test_histogram_needs_activation_energy_for_arrhenius():
    with pytest.raises(ValueError, match="activation_energy_ev"):
        ph.damage_from_histogram(np.ones(BINS.size), BINS, 2000, 105, law="arrhenius")
    with pytest.raises(ValueError, match="law"):
        ph.damage_from_histogram(np.ones(BINS.size), BINS, 2000, 105, law="eyring")
    with pytest.raises(ValueError, match="bin_temps_c"):
        ph.damage_from_histogram(np.ones(BINS.size), BINS[:-1], 2000, 105)


# --- refs §2 / design §4: drift and bench findings ---------------------------

def test_drift_end_of_life_limits_iec_60384_4_as_quoted_refs_s2():
    # [V, secondary] refs §2: endurance limits ESR about 2x, capacitance -20 %.
    assert_allclose(ph.esr_at_damage(0.1, 1.0), 0.2, rtol=1e-12)
    assert_allclose(ph.capacitance_at_damage(100e-6, 1.0), 80e-6, rtol=1e-12)
    assert_allclose(ph.esr_at_damage(0.1, 0.0), 0.1, rtol=1e-12)
    assert_allclose(ph.esr_at_damage(0.1, 2.0), 0.4, rtol=1e-12)


def test_capacitance_floor_numerical_guard():
    # Documented floor: 0.1 % of C0 once 1 - 0.2 D would reach zero (D = 5).
    assert_allclose(ph.capacitance_at_damage(100e-6, [5.0, 10.0]), 0.1e-6, rtol=1e-12)


def test_bench_findings_invert_drift_design_s9():
    d = np.array([0.0, 0.3, 1.0, 2.5])
    assert_allclose(ph.damage_from_esr(0.1, ph.esr_at_damage(0.1, d)), d, atol=1e-12)
    assert_allclose(ph.damage_from_capacitance(1e-4, ph.capacitance_at_damage(1e-4, d)), d,
                    atol=1e-12)
    # design §9: D = log2(ESR_meas/ESR0)
    assert_allclose(ph.damage_from_esr(0.5, 1.0), 1.0, rtol=1e-12)
    # better than new reads as no damage
    assert ph.damage_from_esr(0.5, 0.4) == 0.0
    assert ph.damage_from_capacitance(100e-6, 110e-6) == 0.0


# --- design §4: ESR feedback ODE vs scipy.integrate.solve_ivp -----------------

def _solve_ivp_feedback(hours, amb, l0, t0, i, esr0, d, length, ea=None):
    rise0 = ph.ripple_rise_k(i, esr0, d, length)

    def rhs(_t, y):
        core = amb + rise0 * 2.0 ** y[0]
        return [1.0 / (ph.life_hours_10k(l0, t0, core) if ea is None
                       else ph.life_hours_arrhenius(l0, t0, core, ea))]

    sol = integrate.solve_ivp(rhs, (0.0, hours), [0.0], method="DOP853", rtol=1e-12, atol=1e-14)
    assert sol.success
    return sol.y[0, -1]


def test_esr_feedback_rk4_matches_solve_ivp():
    amb = np.array([70.0, 80.0, 85.0])
    current = np.array([1.0, 1.5, 1.5])
    got = ph.damage_with_esr_feedback(5000.0, amb, 2000.0, 105.0, current, 0.1, 16, 35)
    ref = [_solve_ivp_feedback(5000.0, a, 2000.0, 105.0, i, 0.1, 16, 35)
           for a, i in zip(amb, current)]
    assert got.shape == (3,)
    assert_allclose(got, ref, rtol=1e-6)
    # feedback matters here: more damage than without it
    no_feedback = 5000.0 / ph.life_hours_10k(2000, 105, amb + ph.ripple_rise_k(current, 0.1, 16, 35))
    assert np.all(got > no_feedback * 1.01)


def test_esr_feedback_rk4_matches_solve_ivp_arrhenius():
    got = ph.damage_with_esr_feedback(4000.0, 80.0, 2000.0, 105.0, 1.5, 0.1, 16, 35,
                                      law="arrhenius", activation_energy_ev=0.7)
    ref = _solve_ivp_feedback(4000.0, 80.0, 2000.0, 105.0, 1.5, 0.1, 16, 35, ea=0.7)
    assert_allclose(got, ref, rtol=1e-6)


def test_esr_feedback_without_ripple_is_plain_miner():
    got = ph.damage_with_esr_feedback(3000.0, 65.0, 2000.0, 105.0, 0.0, 0.1, 10, 20, damage0=0.25)
    assert_allclose(got, 0.25 + 3000.0 / 32000.0, rtol=1e-12)


def test_esr_feedback_with_an_extra_even_rate_matches_solve_ivp():
    # Shelf damage spread evenly over the interval raises the ESR as it goes:
    # dD/dh = 1/L(Ta + rise0 2**D) + k, against scipy.integrate.solve_ivp.
    rise0 = ph.ripple_rise_k(1.5, 0.1, 16, 35)

    def rhs(_t, d):
        return [1.0 / ph.life_hours_10k(2000.0, 105.0, 80.0 + rise0 * 2.0 ** d[0]) + 2e-4]

    ref = integrate.solve_ivp(rhs, (0.0, 4000.0), [0.0], method="DOP853", rtol=1e-12, atol=1e-14).y[0, -1]
    got = ph.damage_with_esr_feedback(4000.0, 80.0, 2000.0, 105.0, 1.5, 0.1, 16, 35, extra_rate_per_h=2e-4)
    assert_allclose(got, ref, rtol=1e-6)
    # without ripple the extra rate simply adds (Miner's rule)
    plain = ph.damage_with_esr_feedback(3000.0, 65.0, 2000.0, 105.0, 0.0, 0.1, 10, 20, extra_rate_per_h=1e-5)
    assert_allclose(plain, 3000.0 / 32000.0 + 0.03, rtol=1e-12)


def test_esr_feedback_runaway_is_capped():
    got = ph.damage_with_esr_feedback(1e6, 100.0, 1000.0, 105.0, 5.0, 1.0, 5, 11)
    assert got == P.DAMAGE_MAX


# --- refs §5: Weibull scatter and unit risk ------------------------------------

def test_weibull_reliability_check_value_refs_s5():
    # [C] refs §5: eta 10 000 h, beta 3 -> R(5000 h) = 0.88250.
    assert_allclose(stats.weibull_min.sf(5000.0, 3.0, scale=10000.0), 0.88250, atol=5e-6)
    # the same distribution through our median parameterisation: D* = eta (ln 2)**(1/beta)
    d_star = 10000.0 * np.log(2.0) ** (1.0 / 3.0)
    assert_allclose(1.0 - ph.failure_probability(5000.0, d_star, 3.0), 0.88250, atol=5e-6)


def test_failure_probability_median_at_threshold():
    d_star = np.array([0.3, 1.0, 4.0])
    for beta in (1.0, 2.0, 3.0, 6.0):
        assert_allclose(ph.failure_probability(d_star, d_star, beta), 0.5, rtol=1e-14)


# Whole shapes of 1-4 are raised by multiplication, the others by pow: both checked.
@pytest.mark.parametrize("beta", [1.0, 1.5, 2.0, 3.0, 4.0, 5.0])
def test_failure_probability_is_scipy_weibull_min(beta):
    d = np.linspace(0.0, 3.0, 31)
    d_star = 1.2
    eta = d_star / np.log(2.0) ** (1.0 / beta)  # documented scale
    assert_allclose(ph.failure_probability(d, d_star, beta),
                    stats.weibull_min.cdf(d, beta, scale=eta), rtol=1e-12, atol=1e-15)


def test_failure_probability_edge_thresholds():
    assert ph.failure_probability(0.7, np.inf, 3.0) == 0.0  # requirement never violated
    assert ph.failure_probability(0.0, 0.0, 3.0) == 1.0  # violated already at D = 0


def test_conditional_failure_probability_from_reliabilities():
    now, later, d_star, beta = 0.6, np.array([0.6, 0.8, 1.2]), 1.0, 3.0
    f_now = ph.failure_probability(now, d_star, beta)
    f_later = ph.failure_probability(later, d_star, beta)
    expected = 1.0 - (1.0 - f_later) / (1.0 - f_now)
    assert_allclose(ph.conditional_failure_probability(now, later, d_star, beta), expected,
                    rtol=1e-12, atol=1e-16)
    # from new, it is the plain failure probability
    assert_allclose(ph.conditional_failure_probability(0.0, later, d_star, beta), f_later,
                    rtol=1e-12)
    assert ph.conditional_failure_probability(0.5, 0.6, 0.0, 3.0) == 1.0
    with pytest.raises(ValueError, match="damage_later"):
        ph.conditional_failure_probability(0.8, 0.6, 1.0, 3.0)


def test_unit_failure_probability_series_system_design_s6():
    p = np.array([[0.1, 0.2, 0.0], [1.0, 0.5, 0.5]])
    assert_allclose(ph.unit_failure_probability(p), [1 - 0.9 * 0.8, 1.0], rtol=1e-14)
    assert_allclose(ph.unit_failure_probability(p.T, axis=0), [1 - 0.9 * 0.8, 1.0], rtol=1e-14)
    # log1p keeps tiny risks: 1000 positions at 1e-12 each
    assert_allclose(ph.unit_failure_probability(np.full(1000, 1e-12)), 1e-9, rtol=1e-9)


# --- refs §6: switched-capacitor inverter ------------------------------------------

def test_inverter_output_resistance_data_sheet_instance_refs_s6():
    # [V] refs §6, classic converter data sheet: f_osc 10 kHz (pump 5 kHz),
    # C1 = C2 = 10 uF, switches 46 ohm -> "46 + 20 + 5 (ESR_C)": about 66.5 ohm
    # with 0.1 ohm ESRs and about 116 ohm with 10 ohm ESRs.  The data sheet's 5 is
    # 4*ESR1 + ESR2 with equal ESRs, so the formula's factor 4 gives both exactly.
    r = ph.inverter_output_resistance_ohm(5e3, 10e-6, [0.1, 10.0], [0.1, 10.0], 46.0)
    assert_allclose(r, [66.5, 116.0], rtol=1e-12)
    # the flying factor is a parameter; 5 on C1 alone would not match the data sheet
    assert_allclose(ph.inverter_output_resistance_ohm(5e3, 10e-6, 10.0, 10.0, 46.0,
                                                      flying_esr_factor=5.0), 126.0, rtol=1e-12)


def test_inverter_output_voltage_refs_s6():
    v = ph.inverter_output_v(5.0, np.array([0.0, 0.01, 0.02]), 5e3, 10e-6, 10e-6, 0.1, 0.1, 46.0)
    assert_allclose(v, [-5.0, -(5.0 - 0.665), -(5.0 - 1.33)], rtol=1e-12)  # [C] refs §6
    # a collapsed rail is clipped at 0 V, never positive
    assert ph.inverter_output_v(5.0, 1.0, 5e3, 10e-6, 10e-6, 0.1, 0.1, 46.0) == 0.0


def test_inverter_ripple_refs_s6():
    assert_allclose(ph.inverter_ripple_vpp(0.01, 5e3, 10e-6, 0.1), 0.102, rtol=1e-12)  # [C] refs §6


def test_charge_sharing_equal_caps_refs_s6():
    # [C] refs §6, also a fact of the trade: 1/2, 3/4, 7/8, ...
    n = np.arange(1, 6)
    assert_allclose(ph.charge_share_fraction(n, 10e-6, 10e-6),
                    [0.5, 0.75, 0.875, 0.9375, 0.96875], rtol=1e-14)
    # 99 % after 7 cycles (and not after 6)
    assert ph.charge_share_fraction(7, 1e-6, 1e-6) >= 0.99 > ph.charge_share_fraction(6, 1e-6, 1e-6)


def test_charge_sharing_small_flying_cap_refs_s6():
    # [C] refs §6: C1 = 1 uF, C2 = 10 uF.
    n = np.array([1, 2, 3, 10, 25])
    assert_allclose(ph.charge_share_fraction(n, 1e-6, 10e-6),
                    [0.0909, 0.1736, 0.2487, 0.6145, 0.9077], atol=5e-5)


# --- design §5: coupling, reservoir ripple --------------------------------------

def test_coupling_corner_computed_from_formula():
    assert_allclose(ph.coupling_corner_hz(10e3, 1e-6), 15.915, rtol=1e-4)  # [C]


def test_threshold_coupling_round_trip():
    r = np.array([10e3, 47e3, 100e3])
    c0 = np.array([1e-6, 0.22e-6, 0.1e-6])
    d = ph.threshold_coupling(r, c0, 20.0)
    assert np.all((d > 0) & np.isfinite(d))
    assert_allclose(ph.coupling_corner_hz(r, ph.capacitance_at_damage(c0, d)), 20.0, rtol=1e-12)
    # already above the limit -> 0; no capacitance loss modelled -> inf
    assert ph.threshold_coupling(10e3, 0.1e-6, 20.0) == 0.0
    assert ph.threshold_coupling(10e3, 1e-6, 20.0, capacitance_loss_at_end=0.0) == np.inf
    # the corner can only rise 1000x before the capacitance floor: never reaches 1 MHz
    assert ph.threshold_coupling(10e3, 1e-6, 1e6) == np.inf


def test_reservoir_ripple_common_practice_peak_current():
    # [CP] default peak charging current = 5 x load.
    assert_allclose(ph.reservoir_ripple_vpp(0.1, 100.0, 1000e-6, 0.1), 1.0 + 0.5 * 0.1, rtol=1e-12)
    assert_allclose(ph.reservoir_ripple_vpp(0.1, 100.0, 1000e-6, 0.1, peak_current_a=1.0), 1.1,
                    rtol=1e-12)


# --- the shared frailty (given that the unit works now) ----------------------

def _lognormal_laplace_by_quad(hazard, sigma):
    """ln E[exp(-Y H)], Y lognormal of median 1 and log-sd sigma, by
    scipy.integrate.quad over scipy.stats.lognorm (small H without cancellation)."""
    if hazard < 1.0:
        lost = integrate.quad(lambda y: stats.lognorm.pdf(y, sigma) * -np.expm1(-hazard * y), 0, np.inf,
                              epsabs=0, epsrel=1e-12, limit=1000)[0]
        return np.log1p(-lost)
    peak = -scipy.special.lambertw(hazard * sigma**2).real / sigma  # only where to look
    top = -0.5 * peak**2 - hazard * np.exp(sigma * peak)
    value = integrate.quad(lambda u: np.exp(-0.5 * u * u - hazard * np.exp(sigma * u) - top), peak - 15,
                           peak + 15, points=[peak], epsabs=0, epsrel=1e-13, limit=1000)[0]
    # In u = ln(Y)/sigma the lognormal density is the standard normal one.
    assert stats.lognorm.pdf(2.0, sigma) * 2.0 * sigma == pytest.approx(stats.norm.pdf(np.log(2.0) / sigma))
    return np.log(value / np.sqrt(2.0 * np.pi)) + top


@pytest.mark.parametrize("sigma", [0.3, 1.2, 2.0, 3.0])
def test_frailty_laplace_transform_matches_scipy_quad(sigma):
    hazards = np.logspace(-12, 12, 25)
    got = ph.frailty_log_laplace(hazards, sigma)
    expected = [_lognormal_laplace_by_quad(h, sigma) for h in hazards]
    assert_allclose(got, expected, rtol=1e-7)


def test_frailty_laplace_transform_limits():
    # sigma 0: no spread, survival exp(-H) exactly; tiny H: first order E[Y] H
    # with E[Y] = exp(sigma**2/2) (the lognormal mean, scipy.stats.lognorm).
    assert_allclose(ph.frailty_log_laplace([0.0, 0.5, 7.0], 0.0), [0.0, -0.5, -7.0], rtol=1e-15)
    assert_allclose(ph.frailty_log_laplace(1e-20, 1.2), -stats.lognorm.mean(1.2) * 1e-20, rtol=1e-12)
    assert ph.frailty_log_laplace(np.inf, 1.2) == -np.inf


def test_conditional_hazard_without_spread_is_the_plain_difference():
    # Weibull series system: survival ratio exp(-(H1 - H0)) (refs §5).
    assert_allclose(ph.unit_conditional_hazard([0.0, 2.0], [1.0, 5.0], 3.0, 0.0), [1.0, 3.0], rtol=1e-14)
    assert_allclose(ph.unit_conditional_risk(0.0, np.log(2.0), 3.0, 0.0), 0.5, rtol=1e-14)


def test_surviving_far_past_the_prediction_keeps_the_conditional_risk_moderate():
    # A unit whose nominal hazard is 1e4 (certain failure by the plain
    # model) still works: with a spread its next-interval risk is modest,
    # and it matches the ratio of two quadratures of the mixture (scipy).
    h0, h1, beta, sz = 1.0e4, 1.02e4, 3.0, 0.4
    plain = ph.unit_conditional_risk(h0, h1, beta, 0.0)
    mixed = ph.unit_conditional_risk(h0, h1, beta, sz)
    ref = -np.expm1(_lognormal_laplace_by_quad(h1, beta * sz) - _lognormal_laplace_by_quad(h0, beta * sz))
    assert plain == pytest.approx(1.0)
    assert mixed == pytest.approx(ref, rel=1e-6)
    assert mixed < 0.1


# --- refs §7: safety -------------------------------------------------------------

def test_stored_energy_and_discharge_refs_s7():
    assert_allclose(ph.stored_energy_j(100e-6, 400.0), 8.0, rtol=1e-12)  # [C] refs §7
    assert_allclose(ph.discharge_time_s(100e-6, 10e3, 400.0, 60.0), 1.897, rtol=2e-4)  # [C]
    assert_allclose(ph.discharge_time_s(220e-6, 2e3, 350.0, 60.0), 0.776, rtol=5e-4)  # [C]
    assert_allclose(ph.discharge_time_s(100e-6, 10e3, [60.0, 30.0], 60.0), [0.0, 0.0])
    assert P.SAFE_VOLTAGE_V == 60.0  # [V] SELV 60 V d.c., refs §7


# --- design §5: role-aware thresholds (round trips) --------------------------------

PUMP = dict(vin_v=5.0, load_a=0.01, pump_hz=5e3, c_fly_f=10e-6, c_res_f=10e-6,
            esr_fly0_ohm=0.1, esr_res0_ohm=0.1, switch_ohm=46.0)


def _pump_rail(d_fly, d_res):
    return ph.inverter_output_v(
        PUMP["vin_v"], PUMP["load_a"], PUMP["pump_hz"],
        ph.capacitance_at_damage(PUMP["c_fly_f"], d_fly),
        ph.capacitance_at_damage(PUMP["c_res_f"], d_res),
        ph.esr_at_damage(PUMP["esr_fly0_ohm"], d_fly),
        ph.esr_at_damage(PUMP["esr_res0_ohm"], d_res), PUMP["switch_ohm"])


def test_threshold_pump_round_trip_flying_and_reservoir():
    min_rail = np.array([3.5, 4.0, 4.2])
    d_fly = ph.threshold_pump(**PUMP, min_rail_v=min_rail, which="flying")
    d_res = ph.threshold_pump(**PUMP, min_rail_v=min_rail, which="reservoir", other_damage=0.5)
    assert np.all(np.isfinite(d_fly)) and np.all(np.isfinite(d_res))
    assert_allclose(_pump_rail(d_fly, 0.0), -min_rail, rtol=1e-6)
    assert_allclose(_pump_rail(0.5, d_res), -min_rail, rtol=1e-6)
    # a boolean array picks the role per element
    mixed = ph.threshold_pump(**PUMP, min_rail_v=min_rail, which=[True, False, True],
                              other_damage=[0.0, 0.5, 0.0])
    assert_allclose(mixed, [d_fly[0], d_res[1], d_fly[2]], rtol=1e-12)


def test_threshold_pump_edges():
    assert ph.threshold_pump(**PUMP, min_rail_v=4.99) == 0.0  # 4.335 V already
    no_load = dict(PUMP, load_a=0.0)
    assert ph.threshold_pump(**no_load, min_rail_v=4.5) == np.inf  # unloaded rail never sags
    with pytest.raises(ValueError, match="which"):
        ph.threshold_pump(**PUMP, min_rail_v=4.0, which="bucket")


def test_threshold_reservoir_round_trip():
    limit = np.array([1.2, 1.5, 2.0])
    d = ph.threshold_reservoir(0.1, 100.0, 1000e-6, 0.1, limit)
    assert d.shape == (3,) and np.all(np.diff(d) > 0)
    vpp = ph.reservoir_ripple_vpp(0.1, 100.0, ph.capacitance_at_damage(1000e-6, d),
                                  ph.esr_at_damage(0.1, d))
    assert_allclose(vpp, limit, rtol=1e-6)
    assert ph.threshold_reservoir(0.1, 100.0, 1000e-6, 0.1, 0.5) == 0.0
    assert ph.threshold_reservoir(0.0, 100.0, 1000e-6, 0.1, 0.5) == np.inf


def test_threshold_reservoir_remembered_answers_equal_fresh_ones():
    """A desk-sized call answers from the process's memory of earlier calls:
    bit for bit what solving again gives, whatever the batch; each answer
    also checked against scipy.optimize.brentq on the ripple equation
    (Vpp = I/(f C(D)) + Ipk ESR(D), design brief §5, common practice)."""
    from scipy import optimize

    from scheduling.physics import circuits

    rng = np.random.default_rng(60062)
    n = 40
    load, hz = rng.uniform(0.02, 0.5, n), rng.choice([100.0, 120.0], n)
    c0, e0 = rng.uniform(220e-6, 4700e-6, n), rng.uniform(0.02, 0.4, n)
    limit = rng.uniform(0.3, 3.0, n)
    inputs = tuple(np.asarray(a, dtype=float) for a in (load, hz, c0, e0, limit))
    ipk = P.PEAK_TO_LOAD_CURRENT_RATIO * load
    fresh = circuits._solve_reservoir((*inputs, ipk, np.float64(P.ESR_RATIO_AT_END),
                                       np.float64(P.CAPACITANCE_LOSS_AT_END)), (n,))
    circuits._reservoir_memo.clear()
    first = ph.threshold_reservoir(*(a[: n // 2] for a in inputs))      # solved, remembered
    assert len(circuits._reservoir_memo) == n // 2
    again = ph.threshold_reservoir(*(a[::-1] for a in inputs))           # half remembered, half new
    alone = [ph.threshold_reservoir(*(a[k] for a in inputs)) for k in range(n)]  # all remembered
    assert np.array_equal(first, fresh[: n // 2])
    assert np.array_equal(again, fresh[::-1])
    assert np.array_equal(np.array(alone), fresh)
    # A call larger than the desk's solves afresh and leaves the memory alone.
    circuits._reservoir_memo.clear()
    big = ph.threshold_reservoir(*(np.tile(a, 2) for a in inputs))
    assert np.array_equal(big, np.tile(fresh, 2)) and not circuits._reservoir_memo
    for k in np.flatnonzero(np.isfinite(fresh) & (fresh > 0))[:10]:
        def excess(d, k=k):
            c = ph.capacitance_at_damage(c0[k], d)
            return ph.reservoir_ripple_vpp(load[k], hz[k], c, ph.esr_at_damage(e0[k], d)) - limit[k]
        assert fresh[k] == pytest.approx(optimize.brentq(excess, 0.0, P.DAMAGE_MAX, xtol=1e-13), abs=1e-9)


# --- broadcasting and return types ---------------------------------------------------

def test_scalars_return_float_arrays_broadcast():
    assert isinstance(ph.life_hours_10k(2000, 105, 65), float)
    life = ph.life_hours_10k(np.array([[1000.0], [2000.0]]), 105, np.array([45.0, 65.0, 85.0]))
    assert life.shape == (2, 3)
    assert ph.life_hours_arrhenius([1000, 2000], 105, 65, 0.7).shape == (2,)
    assert ph.ripple_rise_k([0.5, 1.0], 0.1, [[10], [16]], 35).shape == (2, 2)
    assert ph.failure_probability([[0.5], [1.0]], [1.0, 2.0], 3.0).shape == (2, 2)
    assert ph.threshold_coupling([10e3, 20e3], 1e-6, 20.0).shape == (2,)
    assert isinstance(ph.threshold_pump(**PUMP, min_rail_v=4.0), float)


# --- invalid arguments -------------------------------------------------------------

@pytest.mark.parametrize(
    "call, name",
    [
        (lambda: ph.life_hours_10k(0.0, 105, 65), "rated_life_h"),
        (lambda: ph.life_hours_10k(-2000, 105, 65), "rated_life_h"),
        (lambda: ph.life_hours_10k(2000, 105, np.nan), "core_temp_c"),
        (lambda: ph.life_hours_10k(2000, 105, -300.0), "core_temp_c"),
        (lambda: ph.life_hours_arrhenius(2000, -274.0, 65, 0.7), "rated_temp_c"),
        (lambda: ph.life_hours_arrhenius(2000, 105, 65, np.nan), "activation_energy_ev"),
        (lambda: ph.can_area_cm2(0.0, 20), "diameter_mm"),
        (lambda: ph.ripple_rise_k(-1.0, 0.1, 10, 20), "ripple_current_a"),
        (lambda: ph.ripple_rise_k(1.0, 0.1, 10, 20, h_w_per_cm2_k=0.0), "h_w_per_cm2_k"),
        (lambda: ph.esr_from_tan_delta_ohm(0.1, 0.0), "capacitance_f"),
        (lambda: ph.miner_damage([-1.0, 2.0], 100.0), "hours"),
        (lambda: ph.miner_damage([1.0, 2.0], [100.0, 0.0]), "life_h"),
        (lambda: ph.damage_from_histogram([[1.0, np.nan]], [20.0, 30.0], 2000, 105), "hours_per_bin"),
        (lambda: ph.esr_at_damage(0.1, -0.5), "damage"),
        (lambda: ph.capacitance_at_damage(-1e-6, 0.5), "c0_f"),
        (lambda: ph.capacitance_at_damage(1e-6, 0.5, 1.5), "capacitance_loss_at_end"),
        (lambda: ph.damage_from_esr(0.1, 0.0), "esr_ohm"),
        (lambda: ph.damage_from_esr(0.1, 0.2, esr_ratio_at_end=1.0), "esr_ratio_at_end"),
        (lambda: ph.damage_from_capacitance(1e-6, -1e-6), "c_f"),
        (lambda: ph.damage_with_esr_feedback(-1.0, 60, 2000, 105, 1, 0.1, 10, 20), "hours"),
        (lambda: ph.damage_with_esr_feedback(1.0, 60, 2000, 105, 1, 0.1, 10, 20, steps=0), "steps"),
        (lambda: ph.inverter_output_v(5, 0.01, 0.0, 1e-5, 1e-5, 0.1, 0.1, 46), "pump_hz"),
        (lambda: ph.inverter_output_v(5, 0.01, 5e3, 1e-5, 0.0, 0.1, 0.1, 46), "c_res_f"),
        (lambda: ph.inverter_output_v(5, -0.01, 5e3, 1e-5, 1e-5, 0.1, 0.1, 46), "load_a"),
        (lambda: ph.inverter_output_v(5, 0.01, 5e3, 1e-5, 1e-5, 0.1, 0.1, -46), "switch_ohm"),
        (lambda: ph.inverter_ripple_vpp(0.01, 5e3, 1e-5, -0.1), "esr_res_ohm"),
        (lambda: ph.charge_share_fraction(-1, 1e-6, 1e-6), "cycles"),
        (lambda: ph.coupling_corner_hz(-10e3, 1e-6), "resistance_ohm"),
        (lambda: ph.reservoir_ripple_vpp(0.1, 0.0, 1e-3, 0.1), "ripple_hz"),
        (lambda: ph.stored_energy_j(0.0, 400.0), "capacitance_f"),
        (lambda: ph.discharge_time_s(1e-4, 0.0, 400.0, 60.0), "resistance_ohm"),
        (lambda: ph.failure_probability(-0.1, 1.0, 3.0), "damage"),
        (lambda: ph.failure_probability(0.5, 1.0, 0.0), "weibull_shape"),
        (lambda: ph.failure_probability(0.5, -1.0, 3.0), "damage_threshold"),
        (lambda: ph.unit_failure_probability([0.2, 1.2]), "position_probabilities"),
        (lambda: ph.frailty_log_laplace(-1.0, 1.0), "hazard"),
        (lambda: ph.frailty_log_laplace(1.0, -0.1), "hazard_sigma"),
        (lambda: ph.frailty_log_laplace(1.0, 5.0), "hazard_sigma"),
        (lambda: ph.unit_conditional_hazard(2.0, 1.0, 3.0, 0.4), "hazard_later"),
        (lambda: ph.unit_conditional_hazard(1.0, 2.0, 3.0, np.nan), "frailty_sigma"),
        (lambda: ph.unit_conditional_risk(1.0, 2.0, 0.0, 0.4), "weibull_shape"),
        (lambda: ph.threshold_pump(**PUMP, min_rail_v=0.0), "min_rail_v"),
        (lambda: ph.threshold_pump(**dict(PUMP, c_fly_f=0.0), min_rail_v=4.0), "c_fly_f"),
        (lambda: ph.threshold_coupling(10e3, 1e-6, -20.0), "max_corner_hz"),
        (lambda: ph.threshold_reservoir(0.1, 100.0, 1e-3, 0.1, 0.0), "ripple_limit_v"),
    ],
)
def test_invalid_arguments_raise_value_error_naming_them(call, name):
    with pytest.raises(ValueError, match=name):
        call()
