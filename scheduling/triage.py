"""Triage: what to do first, when most parts are past their rated life (pure numpy).

In vintage gear nearly every original electrolytic is past its rated
endurance, so the date a limit was passed ("since 1984") does not order the
work.  What orders it here:

- **The chance of a fault during the unit's next hire, given that it works
  now.**  One typical hire adds a known amount of damage to each position (its
  powered hours at the venue, hot, and the rest of the hire off); the Weibull
  hazard that damage adds, summed over the positions and conditioned on the
  unit working today through the shared frailty, is the unit's hire risk
  (``physics.cumulative_hazard``, ``physics.unit_conditional_hazard``).
- **What the failing role does to a hire**: each position's share of that
  added hazard is weighted by ``parameters.ROLE_HIRE_IMPACT`` (a silent unit
  from a pump rail weighs most, drift of a timing part least; our assumption).
- The **score** is hire risk times the weighted impact; the **priority** ranks
  the units that need work (due or overdue, or with a part to replace) by it,
  1 first.  No bookings are recorded yet, so nothing raises a unit booked to go
  out soon.
- The **act-by date** is the due date, never before today: work already due is
  "now", ordered by priority.

Each position gets an **action** with a reason code:

- replace: past ``damage_limit x D*`` (its circuit's need or end-of-life
  drift), or an original part older than the policy's calendar-age limit;
- measure: at ``parameters.MEASURE_SHARE`` of its limit or more; or, in a unit
  due on its summed risk, one of the ``RISK_CARRIERS_MEASURED`` positions that
  carry most of the next hire's hazard; or when the circuit figures say even a
  new part falls short (check the figures);
- leave: otherwise.

Times are float days since 1970-01-01; damage in units of rated life.
"""

from dataclasses import dataclass

import numpy as np

from . import parameters as P
from . import physics
from .days import DAYS_PER_YEAR
from .grouping import _first_per_unit
from .thresholds import ROLE_NAMES

LEAVE, MEASURE, REPLACE = 0, 1, 2
ACTION_NAMES = {LEAVE: "leave", MEASURE: "measure", REPLACE: "replace"}

#: Why an action was chosen (stored per position with it).
WHY_FINE, WHY_NEW_FAILS, WHY_PAST_LIMIT, WHY_AGE, WHY_NEAR_LIMIT, WHY_RISK_SHARE = 0, 1, 2, 3, 4, 5
#: In a unit that is due or overdue, this many positions carrying most of the
#: hazard of the next hire are measured at least (our choice).
RISK_CARRIERS_MEASURED = 2


@dataclass
class Triage:
    # per unit
    hire_risk: np.ndarray     # P(fault during the next hire | works now)
    impact: np.ndarray        # hazard-weighted role impact, 0..1
    score: np.ndarray         # hire_risk * impact
    needs_work: np.ndarray    # bool
    priority: np.ndarray      # 1 = first among units that need work; 0 = none needed
    act_by_day: np.ndarray    # never before today; NaN: nothing due in the search range
    # per capacitor
    action: np.ndarray        # LEAVE, MEASURE, REPLACE
    why: np.ndarray           # WHY_* codes


def role_impact(role_codes):
    """Weight of each role code for a hire (``parameters.ROLE_HIRE_IMPACT``)."""
    table = np.array([P.ROLE_HIRE_IMPACT[ROLE_NAMES[k]] for k in range(len(ROLE_NAMES))])
    return table[np.asarray(role_codes, dtype=np.int64)]


def position_actions(*, damage, threshold, installed_day, is_original, today_day, damage_limit,
                     calendar_age_years, measure_share=P.MEASURE_SHARE):
    """(action, why) per position; see the module notes for the rules."""
    damage = np.asarray(damage, dtype=float)
    threshold = np.asarray(threshold, dtype=float)
    limit = damage_limit * threshold
    age_years = (today_day - np.asarray(installed_day, dtype=float)) / DAYS_PER_YEAR
    new_fails = threshold <= 0
    past = ~new_fails & (damage >= limit)
    old = ~new_fails & ~past & np.asarray(is_original, dtype=bool) & (age_years >= calendar_age_years)
    near = ~new_fails & ~past & ~old & (damage >= measure_share * limit)
    why = np.select([new_fails, past, old, near], [WHY_NEW_FAILS, WHY_PAST_LIMIT, WHY_AGE, WHY_NEAR_LIMIT],
                    WHY_FINE).astype(np.int8)
    action = np.select([past | old, new_fails | near], [REPLACE, MEASURE], LEAVE).astype(np.int8)
    return action, why


def hire_risk(*, x_now, x_hire, unit_index, n_units, dead, weibull_shape, frailty_sigma):
    """Per unit: P(a fault while ``x_hire`` is added to each position's damage
    share ``x_now`` | the unit works now), and each position's added nominal
    hazard.  ``x`` is damage over threshold (Weibull median at 1); ``dead``
    marks units with a position that fails even new (risk 1)."""
    h_now = physics.cumulative_hazard(x_now, 1.0, weibull_shape)
    h_then = physics.cumulative_hazard(x_now + x_hire, 1.0, weibull_shape)
    added = np.asarray(h_then - h_now, dtype=float)
    h0 = np.bincount(unit_index, weights=h_now, minlength=n_units)
    h1 = np.bincount(unit_index, weights=h_then, minlength=n_units)
    total = np.asarray(physics.unit_conditional_hazard(h0, h1, weibull_shape, frailty_sigma), dtype=float)
    return np.where(dead, 1.0, -np.expm1(-total)), added


def triage(*, unit_index, n_units, role_code, damage, threshold, hire_damage, installed_day, is_original,
           status, due_day, today_day, policy, weibull_shape, frailty_sigma):
    """The triage of a fleet: see :class:`Triage` and the module notes."""
    unit_index = np.asarray(unit_index, dtype=np.int64)
    failed = threshold <= 0
    safe = np.where(failed, 1.0, threshold)
    dead = np.bincount(unit_index, weights=failed.astype(float), minlength=n_units) > 0
    risk, added = hire_risk(
        x_now=np.where(failed, 0.0, damage / safe), x_hire=np.where(failed, 0.0, hire_damage / safe),
        unit_index=unit_index, n_units=n_units, dead=dead, weibull_shape=weibull_shape, frailty_sigma=frailty_sigma)
    weight = role_impact(role_code)
    share_sum = np.bincount(unit_index, weights=added, minlength=n_units)
    weighted = np.bincount(unit_index, weights=added * weight, minlength=n_units)
    # A unit whose parts add no hazard is weighed by its most important role; one
    # with a position that fails outright by at least that position's role.
    heaviest, heaviest_failed = np.zeros(n_units), np.zeros(n_units)
    if unit_index.size:
        np.maximum.at(heaviest, unit_index, weight)
        np.maximum.at(heaviest_failed, unit_index, np.where(failed, weight, 0.0))
    impact = np.where(share_sum > 0, weighted / np.where(share_sum > 0, share_sum, 1.0), heaviest)
    impact = np.where(dead, np.maximum(impact, heaviest_failed), impact)
    score = risk * impact

    action, why = position_actions(damage=damage, threshold=threshold, installed_day=installed_day,
                                   is_original=is_original, today_day=today_day,
                                   damage_limit=policy.damage_limit, calendar_age_years=policy.calendar_age_years)
    status = np.asarray(status)
    due = np.isin(status, ("due", "overdue"))
    # A unit due on its summed risk, with no single part near its limit, still
    # needs a next step: measure the positions that carry most of that risk.
    if unit_index.size:
        carriers = _first_per_unit(unit_index, -added, n_units, k=RISK_CARRIERS_MEASURED)
        rows = carriers[due][carriers[due] >= 0]
        rows = rows[(action[rows] == LEAVE) & (added[rows] > 0)]
        action[rows], why[rows] = MEASURE, WHY_RISK_SHARE
    replace = np.bincount(unit_index, weights=(action == REPLACE).astype(float), minlength=n_units) > 0
    needs = replace | due
    act_by = np.where(np.isnan(due_day), np.nan, np.maximum(due_day, today_day))
    priority = np.zeros(n_units, dtype=np.int64)
    ranked = np.flatnonzero(needs)
    if ranked.size:
        # by the act-by day as stored (a date), so the fleet's order is the one
        # services.priorities_rank gives the stored rows
        key_act = np.where(np.isnan(act_by[ranked]), np.inf, np.floor(act_by[ranked]))
        order = ranked[np.lexsort((ranked, key_act, -score[ranked]))]
        priority[order] = np.arange(1, order.size + 1)
    return Triage(hire_risk=risk, impact=impact, score=score, needs_work=needs, priority=priority,
                  act_by_day=act_by, action=action, why=why)
