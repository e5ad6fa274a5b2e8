"""Bench readings move the forecast (pure numpy; step 2b of the forecast).

What a technician measured on a unit's fitted parts replaces what the model
predicted for them, and tells about the parts not measured:

1. Each reading gives a damage estimate of the part at the reading's date:
   ESR and capacitance through the drift laws' inverses, combined by inverse
   variance (``physics.damage_from_readings``); a negative rail under a known
   load through the inverter model, one factor on both pump parts
   (``physics.pump_damage_from_rail``).  The part's predicted damage at that
   date is its damage now less what it has taken since (its histograms since
   the snapshot of that date, plus the projection since they end).  Only the
   latest date of each part counts; estimates of one date are combined.
2. The part's damage now is the measured damage plus what it has taken since,
   times the rate factor ``clip(measured / predicted)``
   (``physics.rate_factor``): a part that aged faster than predicted keeps
   doing so; its future rate takes the same factor.
3. The unit's positions share one life multiplier Z: each reading gives
   ``y = ln(measured / predicted) = ln Z + e``; e has the reading's error in
   damage carried to the log (its sd over the predicted damage) and the
   part's own scatter (``parameters.READING_PART_LOG_SD``).  The conjugate
   update (``physics.frailty_posterior``) gives the unit's posterior mean and
   sd of ln Z; the risk of the positions not measured follows it, while a
   measured position's hazard no longer carries Z (its damage is known).
   With the frailty sigma 0 nothing but the measured positions moves.
"""

from dataclasses import dataclass

import numpy as np

from . import parameters as P
from . import physics
from .thresholds import pump_partner_rows


@dataclass
class ReadingsResult:
    damage: np.ndarray           # per capacitor, readings applied
    rate: np.ndarray             # per capacitor [1/day], readings applied
    measured: np.ndarray         # per capacitor: its damage comes from a reading
    measured_day: np.ndarray     # per capacitor: date of that reading (NaN: none)
    rate_factor: np.ndarray      # per capacitor (1 where not measured)
    measured_esr_ohm: np.ndarray         # latest capacitor reading per part (NaN: none)
    measured_capacitance_f: np.ndarray
    measured_on_day: np.ndarray          # date of that capacitor reading (NaN: none)
    frailty_mean: np.ndarray     # per unit: posterior mean of ln Z (0 without readings)
    frailty_sd: np.ndarray       # per unit: posterior sd of ln Z (the prior without readings)

    @property
    def any(self):
        return bool(self.measured.any())


def _unchanged(fa, damage, rate, sigma):
    nc, nu = fa.n_caps, fa.n_units
    nan = np.full(nc, np.nan)
    return ReadingsResult(damage=damage, rate=rate, measured=np.zeros(nc, dtype=bool), measured_day=nan,
                          rate_factor=np.ones(nc), measured_esr_ohm=nan, measured_capacitance_f=nan,
                          measured_on_day=nan, frailty_mean=np.zeros(nu), frailty_sd=np.full(nu, float(sigma)))


def apply_readings(fa, *, damage, rate, today_day, damage_since, frailty_sigma):
    """Readings applied to the forecast's damage and rate (see the module notes).

    ``damage_since(rows, snapshots)`` is the histogram damage of capacitor
    ``rows`` since the given snapshots (the forecast's step 1).
    """
    n_cap_readings = 0 if fa.reading_cap is None else fa.reading_cap.size
    n_rails = 0 if fa.rail_fly is None else fa.rail_fly.size
    if not (n_cap_readings or n_rails):
        return _unchanged(fa, damage, rate, frailty_sigma)
    ui = fa.unit_index

    # 1. damage estimates (row, day, snapshot, measured damage, its sd)
    rows, days, snaps, dm, sd = [], [], [], [], []
    if n_cap_readings:
        r = fa.reading_cap
        d, s = physics.damage_from_readings(fa.esr0_ohm[r], fa.reading_esr_ohm, fa.capacitance_f[r],
                                            fa.reading_capacitance_f)
        ok = ~np.isnan(d)
        rows.append(r[ok]), days.append(fa.reading_day[ok]), snaps.append(fa.reading_snap[ok])
        dm.append(d[ok]), sd.append(s[ok])
    predicted_at = {}
    if n_rails:
        fly = fa.rail_fly
        res = pump_partner_rows(fa, fly)
        ok = res >= 0
        fly, res = fly[ok], res[ok]
        day, snap = fa.rail_day[ok], fa.rail_snap[ok]
        if fly.size:
            pf = _predicted_at(fa, damage, rate, today_day, damage_since, fly, day, snap)
            pr = _predicted_at(fa, damage, rate, today_day, damage_since, res, day, snap)
            circuit = {k: fa.pos_circuit[k][fa.position_index[fly]] for k in
                       ("pump_input_v", "pump_freq_hz", "pump_switch_ohm")}
            vin = np.where(np.isnan(fa.rail_input_v[ok]), circuit["pump_input_v"], fa.rail_input_v[ok])
            rail = np.clip(fa.rail_measured_v[ok], -vin, 0.0)
            d_f, d_r = physics.pump_damage_from_rail(
                vin, rail, fa.rail_load_a[ok], circuit["pump_freq_hz"], fa.capacitance_f[fly], fa.capacitance_f[res],
                fa.esr0_ohm[fly], fa.esr0_ohm[res], np.nan_to_num(circuit["pump_switch_ohm"]), pf[0], pr[0])
            s_rail = np.full(fly.size, P.READING_RAIL_LOG_SD / np.log(P.ESR_RATIO_AT_END))
            rows += [fly, res]
            days += [day, day]
            snaps += [snap, snap]
            dm += [d_f, d_r]
            sd += [s_rail, s_rail]
    rows = np.concatenate(rows).astype(np.int64)
    if not rows.size:
        return _unchanged(fa, damage, rate, frailty_sigma)
    days, snaps, dm, sd = (np.concatenate(a) for a in (days, snaps, dm, sd))

    # Only each part's latest date counts; the estimates of that date combine.
    latest = np.full(fa.n_caps, -np.inf)
    np.maximum.at(latest, rows, days)
    keep = days == latest[rows]
    rows, days, snaps, dm, sd = rows[keep], days[keep], snaps[keep], dm[keep], sd[keep]
    w = 1.0 / sd**2
    wsum = np.bincount(rows, weights=w, minlength=fa.n_caps)
    measured = wsum > 0
    read = np.flatnonzero(measured)
    d_meas = np.bincount(rows, weights=w * dm, minlength=fa.n_caps)[read] / wsum[read]
    s_meas = 1.0 / np.sqrt(wsum[read])
    first = np.full(fa.n_caps, -1, dtype=np.int64)
    first[rows[::-1]] = np.arange(rows.size)[::-1]
    day_of, snap_of = days[first[read]], snaps[first[read]]
    d_pred, d_after = _predicted_at(fa, damage, rate, today_day, damage_since, read, day_of, snap_of)

    # 2. damage now and the rate from here on
    k = np.asarray(physics.rate_factor(d_meas, d_pred, s_meas), dtype=float).reshape(-1)
    new_damage, new_rate = damage.copy(), rate.copy()
    new_damage[read] = d_meas + k * d_after
    new_rate[read] = rate[read] * k
    factor = np.ones(fa.n_caps)
    factor[read] = k
    measured_day = np.full(fa.n_caps, np.nan)
    measured_day[read] = day_of

    # 3. the unit's shared multiplier
    informative = d_pred > 0
    y = np.log(np.maximum(d_meas, s_meas)[informative] / d_pred[informative])
    s_y = np.sqrt(P.READING_PART_LOG_SD**2 + (s_meas[informative] / d_pred[informative]) ** 2)
    mean, sd_u = physics.frailty_posterior(ui[read][informative], y, s_y, frailty_sigma, fa.n_units)

    esr_m, cap_m, on_m = (np.full(fa.n_caps, np.nan) for _ in range(3))
    if n_cap_readings:
        order = np.lexsort((fa.reading_day, fa.reading_cap))  # last of each part is its latest
        r = fa.reading_cap[order]
        last = np.r_[r[1:] != r[:-1], True]
        esr_m[r[last]] = fa.reading_esr_ohm[order][last]
        cap_m[r[last]] = fa.reading_capacitance_f[order][last]
        on_m[r[last]] = fa.reading_day[order][last]
    return ReadingsResult(damage=new_damage, rate=new_rate, measured=measured, measured_day=measured_day,
                          rate_factor=factor, measured_esr_ohm=esr_m, measured_capacitance_f=cap_m,
                          measured_on_day=on_m, frailty_mean=mean, frailty_sd=sd_u)


def _predicted_at(fa, damage, rate, today_day, damage_since, rows, day, snap):
    """(predicted damage at the reading, damage taken since) for capacitor
    ``rows`` read on ``day`` with the snapshot ``snap`` of that date (-1: not
    taken yet; the projected rate stands in)."""
    powered, unpowered = damage_since(rows, np.maximum(snap, 0))
    counted = np.where(snap >= 0, powered + unpowered, 0.0)
    since_counted = np.where(snap >= 0, np.maximum(fa.accounted_day[fa.unit_index[rows]], day), day)
    after = np.minimum(counted + rate[rows] * np.maximum(today_day - since_counted, 0.0), damage[rows])
    return np.maximum(damage[rows] - after, 0.0), after


def unit_hazard(h_now, h_later, unit_of_row, n, weibull_shape, frailty_sigma, found=None, units=None):
    """Each unit's cumulative hazard over an interval given that it works at
    its start, from its rows' nominal hazards ``h_now``/``h_later``.

    Without readings (``found`` None or empty): the shared frailty of
    ``physics.unit_conditional_hazard``.  With them: the rows not measured
    carry the unit's posterior frailty (their hazard scaled by
    ``exp(beta * mean)``, the log-sd the posterior sd); measured rows add their
    plain hazard.  ``units`` maps the local unit numbers to the fleet's (a
    subset), ``found`` is indexed by the fleet's capacitor rows via ``rows``.
    """
    if found is None:
        h0 = np.bincount(unit_of_row, weights=h_now, minlength=n)
        h1 = np.bincount(unit_of_row, weights=h_later, minlength=n)
        return physics.unit_conditional_hazard(h0, h1, weibull_shape, frailty_sigma)
    free, scale, sigma = found
    with np.errstate(invalid="ignore"):
        h0 = np.bincount(unit_of_row, weights=np.where(free, h_now, 0.0), minlength=n) * scale
        h1 = np.bincount(unit_of_row, weights=np.where(free, h_later, 0.0), minlength=n) * scale
        k0 = np.bincount(unit_of_row, weights=np.where(free, 0.0, h_now), minlength=n)
        k1 = np.bincount(unit_of_row, weights=np.where(free, 0.0, h_later), minlength=n)
        return physics.unit_conditional_hazard(h0, h1, weibull_shape, sigma) + np.maximum(k1 - k0, 0.0)
