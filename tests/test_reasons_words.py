"""The words of a forecast's reasons, for a small fleet built by hand: which
sentences a unit gives, their wording, and their order."""

import datetime as dt
from types import SimpleNamespace

import numpy as np

from scheduling.days import date_to_day
from scheduling.forecast import Policy
from scheduling.reasons import _reasons
from scheduling.thresholds import ROLE_CODES

TODAY = date_to_day(dt.date(2026, 12, 1))
NAN = np.nan


def small_fleet():
    """Four units over three positions: unit 0 has rows 0-2, unit 1 none,
    unit 2 rows 3-4, unit 3 none."""
    return SimpleNamespace(
        n_units=4, n_caps=5,
        unit_index=np.array([0, 0, 0, 2, 2]), position_index=np.array([0, 1, 2, 2, 0]),
        pos_designator=["C1", "C2", "C3"],
        pos_role=np.array([ROLE_CODES["supply_reservoir"], ROLE_CODES["pump_flying"], ROLE_CODES["general"]]),
        pos_circuit={"pump_min_rail_v": np.array([NAN, 4.1, NAN]),
                     "reservoir_ripple_limit_v": np.array([0.5, NAN, NAN]),
                     "coupling_max_corner_hz": np.array([NAN, NAN, NAN])})


def test_each_unit_gives_its_sentences_in_the_order_of_their_days():
    fa = small_fleet()
    reasons = _reasons(
        fa, Policy(), TODAY,
        damage=np.zeros(5), threshold=np.array([1.0, 1.0, 1.0, 0.0, 1.0]),
        reaches=TODAY + np.array([-1000.0, 10.0, 60.0, -200.0, NAN]),
        risk=np.array([0.004, 0.0, 0.2, 0.0]), risk_day=TODAY + np.array([-5.0, NAN, 45.0, NAN]),
        age_day=TODAY + np.array([400.0, NAN, 45.0, -100.0]), has_original=np.array([True, False, True, True]),
        storage_reform=np.array([True, False, False, False]), unpowered_months=np.array([30.2, 1.0, 1.0, 1.0]),
        drivers=np.array([[1, -1], [-1, -1], [3, 4], [-1, -1]]))
    assert reasons == [
        # the two positions first to reach their limit (the third is left
        # out), one long past (its year), one to come; the reform last
        ["C1 supply reservoir: supply ripple exceeds 0.5 V p-p since about 2024",
         "If it works today, chance of a fault within 90 days: under 1 % (house limit 10 %), "
         "mostly from C2 (pump flying)",
         "C2 pump flying: negative rail would sag below 4.1 V by Dec 2026",
         "Unpowered for 30 months: reform the capacitors (bring the unit up slowly on a current-limited supply) "
         "before it goes out"],
        [],
        # a position a new part fails; the risk and the age on the same day
        # keep that order
        ["C3 general: the circuit requirement is not met even by a new part; check this position's circuit figures",
         "If it works today, chance of a fault within 90 days: 20 %, reaching the house limit of 10 % by Jan 2027, "
         "mostly from C3 (general) and C1 (supply reservoir)",
         "Original capacitors reach 30 years of age by Jan 2027"],
        # a past date less than two years back: its month
        ["Original capacitors over 30 years old since about Aug 2026"],
    ]


def test_a_fleet_without_units_gives_no_reasons():
    fa = SimpleNamespace(n_units=0, n_caps=0, unit_index=np.zeros(0, dtype=np.int64),
                         position_index=np.zeros(0, dtype=np.int64), pos_designator=[], pos_role=np.zeros(0),
                         pos_circuit={})
    empty = np.zeros(0)
    assert _reasons(fa, Policy(), TODAY, empty, empty, empty, empty, empty, empty, np.zeros(0, dtype=bool),
                    np.zeros(0, dtype=bool), empty, np.zeros((0, 2), dtype=np.int64)) == []
