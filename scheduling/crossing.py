"""When a unit's risk reaches the policy limit: the due-date solver (pure numpy).

The risk over the horizon, given that the unit works, is evaluated by a
function the forecast builds; this module decides where it must be solved and
finds the crossing with :func:`scheduling.roots.first_crossing`.
"""

import numpy as np

from . import roots
from .grouping import _per_unit

#: Search range of the due-date solver, days from today.
SEARCH_PAST_DAYS = 21915.0  # 60 years
SEARCH_FUTURE_DAYS = 36525.0
#: The risk-crossing solver (numerical): stop when the bracket is under half
#: a day; halve the bracket this many times before the secant steps start;
#: give up after this many steps (bisection alone needs 17 for 60 + 100 years).
DUE_DATE_TOLERANCE_DAYS = 0.5
#: Days ahead at which the risk is looked at before the crossing is solved
#: (the risk given survival can peak and fall back).  Our choice.
RISK_LOOKAHEAD_DAYS = (90.0, 365.0, 1095.0, 3652.0, 10957.0)
DUE_DATE_BISECTIONS = 3
DUE_DATE_MAX_STEPS = 40


def _risk_crossing_day(risk_function, risk_at, risk_now, fa, today_day, policy, other_day, threshold_failed):
    """Day the unit's risk over the horizon reaches the policy limit, where it
    matters: before ``other_day`` (the earliest other due date) for the due
    date, or within the watch window for the reasons.

    Units whose crossing cannot matter are not solved: a crossing already
    passed but after ``other_day`` is given as today (it only says "now" in
    the reasons), one beyond both ``other_day`` and the watch window as NaN.
    A unit with a part that fails its requirement even when new is at risk
    from its oldest part's fitting.
    """
    nu, ui = fa.n_units, fa.unit_index
    limit = policy.risk_limit
    oldest = _per_unit(np.minimum, ui, fa.installed_day, nu, today_day)
    lo = np.maximum(oldest - today_day, -SEARCH_PAST_DAYS)
    # Before its oldest part went in every x is 0 and so is the risk, unless a
    # part fails its requirement even when new (threshold 0: risk 1 always).
    dead = np.bincount(ui, weights=threshold_failed.astype(float), minlength=nu) > 0
    now_above = risk_now >= limit
    other = other_day - today_day  # NaN: no other date
    window = max(policy.watch_days, policy.horizon_days)
    # The far end of the bracket that matters: the other date when the
    # crossing is already past; later of the other date and the watch window ahead.
    ahead = np.clip(np.where(np.isnan(other), SEARCH_FUTURE_DAYS, np.fmax(other, window)), 0.0, SEARCH_FUTURE_DAYS)
    t_end = np.where(now_above, np.where(other < 0, np.maximum(other, lo), 0.0), ahead)
    t_start = np.where(now_above, lo, 0.0)
    # Given that the unit works, the risk need not rise for ever (a unit far
    # past its predicted life is evidence that it ages slower): it can rise
    # through the limit and fall back.  Look ahead at a few dates first, so
    # that a crossing before the end of the bracket is not missed.
    all_rows = np.arange(fa.n_caps)
    ahead_units = np.flatnonzero(~now_above & ~dead)
    for t_look in RISK_LOOKAHEAD_DAYS:
        ahead_units = ahead_units[t_end[ahead_units] > t_look]
        if not ahead_units.size:
            break
        above = risk_function(all_rows, ui, nu, subset=ahead_units)(
            np.full(ahead_units.size, t_look)) >= limit
        t_end[ahead_units[above]] = t_look
        ahead_units = ahead_units[~above]
    r_end = risk_at(t_end)
    solve = ~dead & (r_end >= limit) & (t_end > t_start)
    day = np.where(dead, today_day + lo, np.where(now_above, today_day, np.nan))
    day[solve] = today_day + t_end[solve]
    open_units = np.flatnonzero(solve & (t_end - t_start > DUE_DATE_TOLERANCE_DAYS))
    if not open_units.size:
        return day
    r_start = np.where(now_above, 0.0, risk_now)  # at lo the risk is 0 (not dead)

    def log_h(r):
        # The risk reaches the limit where the summed hazard reaches -ln(1 - limit).
        with np.errstate(divide="ignore"):
            return np.log(np.maximum(-np.log1p(-np.minimum(r, 1.0)), 1e-300))

    crossing = _first_crossing(
        _Shrinking(lambda subset: risk_function(all_rows, ui, nu, subset=open_units[subset], log_hazard=True)),
        t_start[open_units], t_end[open_units], log_h(r_start[open_units]), log_h(r_end[open_units]),
        np.log(-np.log1p(-limit)))
    day[open_units] = today_day + crossing
    return day


class _Shrinking:
    """``value_of(units, t)`` for :func:`_first_crossing` from a factory of
    evaluators over a subset of units; the evaluator is rebuilt on the smaller
    subset only when the units asked for fall to half of those it holds."""

    def __init__(self, factory):
        self.factory, self.units, self.evaluate = factory, None, None

    def __call__(self, units, t):
        if self.units is None or units.size * 2 <= self.units.size:
            self.units, self.evaluate = units, self.factory(units)
        if units.size == self.units.size:
            return self.evaluate(t)
        t_all = np.zeros(self.units.size)
        where = np.searchsorted(self.units, units)
        t_all[where] = t
        return self.evaluate(t_all)[where]


def _first_crossing(value_of, lo, hi, value_lo, value_hi, limit, tol_days=DUE_DATE_TOLERANCE_DAYS):
    """Per unit, the time t in (lo, hi] [days] where an increasing
    ``value_of(units, t)`` reaches ``limit`` (``roots.first_crossing``, to within
    ``tol_days``); returns the upper end of each final bracket."""
    return roots.first_crossing(value_of, lo, hi, value_lo, value_hi, limit, tol=tol_days,
                                bisections=DUE_DATE_BISECTIONS, max_steps=DUE_DATE_MAX_STEPS)[1]
