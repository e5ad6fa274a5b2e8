"""A unit's damage and risk over time, behind and ahead of today (pure numpy).

The same model as the forecast (:mod:`scheduling.forecast`), written out as
curves for a chart:

- **Ahead** of today each position's damage grows at its projected rate:
  ``D(t) = D_now + rate * (t - today)``.
- **Behind** today each part is taken to have aged evenly since it went in
  (the README's "dates already passed" assumption):
  ``D(t) = D_now * (t - installed) / (today - installed)``, and nothing
  before it went in.  Parts fitted earlier and since replaced are not shown.
- The unit's **risk** at time t is the chance of a fault within the horizon
  given that it works at t: ``1 - exp(-H)``, H the summed Weibull hazard of
  the horizon conditioned on survival through the shared frailty
  (``physics.cumulative_hazard``, ``physics.unit_conditional_hazard``), each
  position's damage taken as a share of its threshold (Weibull median at 1).
  A position whose threshold is 0 (even a new part falls short) makes it 1.

Times are float days since 1970-01-01; damage in units of rated life.
"""

from dataclasses import dataclass

import numpy as np

from . import parameters as P
from . import physics


@dataclass
class Trajectory:
    days: np.ndarray        # (n_times,) float days since 1970-01-01
    damage: np.ndarray      # (n_positions, n_times); NaN before the part went in
    limit: np.ndarray       # (n_positions,) damage at which each position is due
    risk: np.ndarray        # (n_times,) P(fault within the horizon | works at t)
    today_day: float


def damage_at(days, *, damage_now, rate_per_day, installed_day, today_day):
    """Damage of each position at each of ``days`` (positions x days): even
    ageing since install behind today, the projected rate ahead of it; NaN
    before the part went in."""
    t = np.asarray(days, dtype=float)[None, :]
    d0 = np.asarray(damage_now, dtype=float)[:, None]
    rate = np.asarray(rate_per_day, dtype=float)[:, None]
    installed = np.asarray(installed_day, dtype=float)[:, None]
    age = np.maximum(today_day - installed, 1.0)
    behind = d0 * (t - installed) / age
    ahead = d0 + rate * (t - today_day)
    out = np.where(t < today_day, behind, ahead)
    return np.where(t < installed, np.nan, np.maximum(out, 0.0))


def risk_at(days, *, damage_now, rate_per_day, threshold, installed_day, today_day, horizon_days,
            weibull_shape=P.WEIBULL_SHAPE, frailty_sigma=P.FRAILTY_SIGMA):
    """The unit's chance of a fault within ``horizon_days`` of each of
    ``days``, given that it works then (one unit: all positions together)."""
    days = np.asarray(days, dtype=float)
    threshold = np.asarray(threshold, dtype=float)
    if threshold.size == 0:
        return np.zeros(days.size)
    failed = threshold <= 0
    safe = np.where(failed, 1.0, threshold)[:, None]
    common = dict(damage_now=damage_now, rate_per_day=rate_per_day, installed_day=installed_day,
                  today_day=today_day)
    x0 = np.nan_to_num(damage_at(days, **common)) / safe
    x1 = np.nan_to_num(damage_at(days + horizon_days, **common)) / safe
    h0 = physics.cumulative_hazard(x0, 1.0, weibull_shape).sum(axis=0)
    h1 = physics.cumulative_hazard(x1, 1.0, weibull_shape).sum(axis=0)
    total = np.asarray(physics.unit_conditional_hazard(h0, h1, weibull_shape, frailty_sigma), dtype=float)
    risk = -np.expm1(-total)
    return np.where(failed.any(), 1.0, risk)


def trajectory(*, damage_now, rate_per_day, threshold, installed_day, today_day, damage_limit, horizon_days,
               start_day, end_day, points=121, weibull_shape=P.WEIBULL_SHAPE, frailty_sigma=P.FRAILTY_SIGMA):
    """Damage of each position and the unit's risk from ``start_day`` to
    ``end_day`` at ``points`` evenly spaced times (today among them)."""
    if not end_day > start_day:
        raise ValueError("end_day must come after start_day")
    days = np.linspace(start_day, end_day, points)
    if start_day < today_day < end_day:
        days = np.unique(np.append(days, today_day))
    common = dict(damage_now=damage_now, rate_per_day=rate_per_day, installed_day=installed_day,
                  today_day=today_day)
    damage = damage_at(days, **common)
    risk = risk_at(days, threshold=threshold, horizon_days=horizon_days, weibull_shape=weibull_shape,
                   frailty_sigma=frailty_sigma, **common)
    limit = damage_limit * np.asarray(threshold, dtype=float)
    return Trajectory(days=days, damage=damage, limit=limit, risk=risk, today_day=float(today_day))
