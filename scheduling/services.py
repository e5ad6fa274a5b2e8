"""Life-engine services: load the fleet, forecast it, store the results.

``forecast_refresh`` is the one entry point (commands, tasks and the
workflows in ``front.workflows`` call it).  It reads each table once, computes with
:mod:`scheduling.forecast` and upserts one ``UnitForecast`` per unit, so running
it twice leaves the same rows.  A unit whose figures the engine cannot use
(:mod:`scheduling.checks`) is stored with the status "cannot forecast" and the
reason in words, and every other unit is forecast as usual.
"""

import datetime as dt
import logging
import time

import numpy as np
from django.db import connection, transaction
from django.utils import timezone

from fleet.models import Unit

from .checks import compute_sound
from .days import day_to_date
from .forecast import EngineOptions, Policy
from .gcpause import with_collector_paused
from .heap import keep_freed_memory
from .loader import active_policy, load_fleet
from .forecast import model_use_means, model_use_sums
from .models import ModelUse, ThermalHistory, UnitForecast
from .thresholds import ROLE_NAMES
from .triage import ACTION_NAMES
# The stored rows' format and the store, used here and, through this module,
# by the pages and reports (services.pack_positions and the rest).
from .store import (OLD_POSITION_LAYOUT, POSITION_DTYPE, POSITION_LAYOUT, _day_dates, _json_words,  # noqa: F401
                    _store, _store_unforecastable, action_role_masks, pack_positions, rows_as_stored,
                    stored_positions)

log = logging.getLogger(__name__)


def _options_from(law=None, activation_energy_ev=None, esr_feedback=False, weibull_shape=None, frailty_sigma=None):
    kw = {"esr_feedback": esr_feedback}
    if law:
        kw["law"] = law
    if activation_energy_ev is not None:
        kw["activation_energy_ev"] = activation_energy_ev
    if weibull_shape is not None:
        kw["weibull_shape"] = weibull_shape
    if frailty_sigma is not None:
        kw["frailty_sigma"] = frailty_sigma
    return EngineOptions(**kw)


class ForecastRun:
    """The arrays and results of one forecast, with ways to read them.

    ``fleet`` and ``result`` hold the units forecast; ``unforecastable`` the
    units that could not be (``checks.Unforecastable``: id, tag, reasons).
    """

    def __init__(self, fleet, result, policy, today, unforecastable=()):
        self.fleet, self.result, self.policy, self.today = fleet, result, policy, today
        self.unforecastable = list(unforecastable)
        self.seconds = {}  # wall time of the stages: load, compute, store
        self.model_sums = None  # the gear models' use sums of the whole fleet, when it is one
        order = np.argsort(fleet.unit_index, kind="stable")
        self._starts = np.searchsorted(fleet.unit_index[order], np.arange(fleet.n_units), "left")
        self._ends = np.searchsorted(fleet.unit_index[order], np.arange(fleet.n_units), "right")
        self._order = order

    def rows_of(self, u):
        return self._order[self._starts[u]:self._ends[u]]

    def unit_dict(self, u, with_positions=True):
        fa, r = self.fleet, self.result
        due = r.due_day[u]
        out = {
            "asset_tag": fa.asset_tag[u],
            "status": r.status[u],
            "due_date": None if np.isnan(due) else day_to_date(due).isoformat(),
            "risk": round(float(r.risk[u]), 6),
            "horizon_days": int(self.policy.horizon_days),
            "storage_reform": bool(r.storage_reform[u]),
            "act_by": None if np.isnan(r.act_by_day[u]) else day_to_date(r.act_by_day[u]).isoformat(),
            "priority": int(r.priority[u]) or None,
            "hire_risk": round(float(r.hire_risk[u]), 6),
            "reasons": r.reasons[u],
        }
        if with_positions:
            out["positions"] = [self._position_dict(i) for i in self.rows_of(u)]
        return out

    def _position_dict(self, i):
        fa, r = self.fleet, self.result
        pos = fa.position_index[i]
        reach = r.reaches_day[i]
        return {
            "designator": fa.pos_designator[pos],
            "role": ROLE_NAMES[int(fa.pos_role[pos])],
            "damage": round(float(r.damage[i]), 6),
            "esr_ohm": round(float(r.esr_ohm[i]), 6),
            "capacitance_f": float(f"{r.capacitance_f[i]:.6g}"),
            "damage_threshold": round(float(r.threshold[i]), 6),
            "reaches_threshold_on": None if np.isnan(reach) else day_to_date(reach).isoformat(),
            "action": ACTION_NAMES[int(r.action[i])],
            **self._measured(i),
        }

    def _measured(self, i):
        """The latest bench reading of the part (null when none)."""
        found = self.result.readings
        esr, cap, on = (np.nan, np.nan, np.nan) if found is None else (
            found.measured_esr_ohm[i], found.measured_capacitance_f[i], found.measured_on_day[i])
        return {
            "measured_esr_ohm": None if np.isnan(esr) else round(float(esr), 6),
            "measured_capacitance_f": None if np.isnan(cap) else float(f"{cap:.6g}"),
            "measured_on": None if np.isnan(on) else day_to_date(on).isoformat(),
        }

    def urgency_order(self):
        """Unit rows in triage order: the units that need work by priority (1
        first), then the rest by status (watch before ok), due date and risk."""
        rank = {"overdue": 0, "due": 1, "watch": 2, "ok": 3}
        r = self.result
        due = np.where(np.isnan(r.due_day), np.inf, r.due_day)
        return sorted(range(self.fleet.n_units),
                      key=lambda u: (r.priority[u] == 0, r.priority[u], rank[r.status[u]], due[u], -r.risk[u]))


def forecast_compute(*, unit_ids=None, today=None, law=None, activation_energy_ev=None, esr_feedback=False,
                     weibull_shape=None, frailty_sigma=None, policy=None, id_range=None, model_means="stored",
                     use=None, known=None, sync=False):
    """Compute forecasts without storing them; returns a ForecastRun.

    The whole fleet (no ``unit_ids``, no ``id_range``) fills units without
    history from the means of every unit loaded; a few units use the means
    the last fleet refresh kept (``ModelUse``), so that they come out as they
    would in the fleet refresh; a batch is given the fleet's means."""
    today = today or timezone.localdate()
    options = _options_from(law, activation_energy_ev, esr_feedback, weibull_shape, frailty_sigma)
    policy_row = policy or active_policy()
    started = time.perf_counter()
    fleet = load_fleet(unit_ids=unit_ids, today=today, min_history_days=options.min_history_days,
                       id_range=id_range, model_means=model_means, use=use, known=known, sync=sync)
    sums = None
    if unit_ids is None and id_range is None:
        sums = fleet_use_sums(fleet)
        fleet.model_means = model_use_means(sums)
    loaded = time.perf_counter()
    pol = Policy.from_model(policy_row)
    sound, result, unforecastable = compute_sound(fleet, today=today, policy=pol, options=options)
    run = ForecastRun(sound, result, pol, today, unforecastable)
    run.model_sums = sums  # the whole fleet's, kept by forecast_refresh
    run.seconds = {"load": loaded - started, "compute": time.perf_counter() - loaded}
    return run


def fleet_use_sums(fleet):
    """The sums behind the gear models' mean use over the units of ``fleet``."""
    return model_use_sums(fleet.unit_model, fleet.model_id.size, fleet.use_powered_h_per_year,
                          fleet.use_out_h_per_year, fleet.use_ambient_c, fleet.use_hires_per_year)


def model_use_store(model_ids, sums, today):
    """Keep the gear models' means (``ModelUse``) for forecasts of a few units."""
    means = model_use_means(sums)

    def num(x):
        return None if np.isnan(x) else float(x)

    rows = [ModelUse(gear_model_id=int(m), as_of=today, units=int(sums["units"][k]),
                     powered_h_per_year=num(means["powered_h_per_year"][k]), out_h_per_year=num(means["out_h_per_year"][k]),
                     ambient_c=num(means["ambient_c"][k]), hire_units=int(sums["hire_units"][k]),
                     hire_powered_h=num(means["hire_powered_h"][k]), hire_out_h=num(means["hire_out_h"][k]))
            for k, m in enumerate(np.asarray(model_ids).tolist())]
    with transaction.atomic(savepoint=False):
        ModelUse.objects.exclude(gear_model_id__in=[r.gear_model_id for r in rows]).delete()
        ModelUse.objects.bulk_create(rows, update_conflicts=True, unique_fields=["gear_model"],
                                     update_fields=["as_of", "units", "powered_h_per_year", "out_h_per_year",
                                                    "ambient_c", "hire_units", "hire_powered_h", "hire_out_h"])
    return means


def priorities_rank():
    """Number the units that need work 1, 2, 3 ... across the whole fleet, by
    score (highest first), then act-by date (earliest first, none last),
    then unit id: the order ``triage.triage`` gives a whole fleet.  A unit
    needs work when its stored priority is set (a refresh of any part of the
    fleet stores a place-holder); only rows whose number changes are written.
    One statement; on PostgreSQL concurrent refreshes take turns (an advisory
    lock held to the end of the transaction)."""
    qn = connection.ops.quote_name
    t = qn(UnitForecast._meta.db_table)
    with transaction.atomic(savepoint=False), connection.cursor() as cursor:
        if connection.vendor == "postgresql":
            cursor.execute("SELECT pg_advisory_xact_lock(%s)", [RANK_LOCK_KEY])
        cursor.execute(
            f"UPDATE {t} SET {qn('priority')} = r.rn FROM (SELECT {qn('id')} AS fid, ROW_NUMBER() OVER ("
            f"ORDER BY {qn('score')} DESC, {qn('act_by')} ASC NULLS LAST, {qn('unit_id')} ASC) AS rn FROM {t} "
            f"WHERE {qn('priority')} IS NOT NULL) AS r WHERE {t}.{qn('id')} = r.fid AND {t}.{qn('priority')} <> r.rn")
        return cursor.rowcount


#: Key of the advisory lock that serialises priorities_rank on PostgreSQL.
RANK_LOCK_KEY = 7_301_001
#: A refresh of at most this many units places them among the fleet's
#: priorities at once and leaves the renumbering of the rest to a background
#: job; a larger one renumbers the fleet itself.
PLACE_AT_MOST = 20


def priorities_place(run):
    """Give each unit of a refresh of a few units that needs work its place
    among the fleet's priorities now (1 + the units that need work ranked
    before it, by the order of ``priorities_rank``: one statement per unit,
    the count inside the write), and queue ``scheduling.rank_priorities`` to
    renumber the rest once the transaction commits.  Until that job runs,
    two units may share a number; the order they are listed in is right at
    once."""
    ids = run.fleet.unit_id.tolist()
    if not ids:
        return
    r = run.result
    # The units that need work with the score and act-by date ``_store`` just
    # wrote for them (a priority is stored where ``r.priority`` is set): read
    # from the run, not back from the table.
    rows = [(unit_id, score, act_by) for unit_id, needs, score, act_by
            in zip(ids, r.priority.tolist(), r.score.astype(float).tolist(), _day_dates(r.act_by_day)) if needs]
    qn = connection.ops.quote_name
    t = qn(UnitForecast._meta.db_table)
    unit, score_, act = (f"o.{qn(c)}" for c in ("unit_id", "score", "act_by"))
    run.places = {}
    with connection.cursor() as cursor:
        for unit_id, score, act_by in rows:
            # Ranked before it: a higher score (an index-only range of the
            # partial index on score), or the same score and an act-by date
            # earlier than its own (none last), then a lower unit id.
            if act_by is None:
                tied, tied_params = f"({act} IS NOT NULL OR {unit} < %s)", [unit_id]
            else:
                tied = f"({act} < %s OR ({act} = %s AND {unit} < %s))"
                day = connection.ops.adapt_datefield_value(act_by)
                tied_params = [day, day, unit_id]
            needs = f"SELECT COUNT(*) FROM {t} AS o WHERE o.{qn('priority')} IS NOT NULL AND {score_}"
            cursor.execute(
                f"UPDATE {t} SET {qn('priority')} = 1 + ({needs} > %s) + ({needs} = %s AND {tied} AND {unit} <> %s) "
                f"WHERE {qn('unit_id')} = %s RETURNING {qn('priority')}",
                [score, score, *tied_params, unit_id, unit_id])
            placed = cursor.fetchone()  # the place given, for ``rows_as_stored``
            if placed is not None:
                run.places[unit_id] = placed[0]
    transaction.on_commit(_queue_ranking)


#: Vacuum a table when its dead row versions pass this share of its live
#: rows plus ``VACUUM_BASE`` (PostgreSQL's own autovacuum defaults).
VACUUM_SCALE = 0.2
VACUUM_BASE = 50


def forecast_tables_vacuum(*, rewritten=False):
    """On PostgreSQL without autovacuum: ``VACUUM (ANALYZE)`` the forecast
    table and the thermal histories, both when the caller has just
    ``rewritten`` every row (a refresh of the whole fleet), else those whose
    dead row versions pass autovacuum's own default threshold (a fifth of
    the live rows, plus 50; the statistics lag the writes by up to a second).

    A refresh of the whole fleet writes a new version of every row of both
    tables, and each renumbering of the priorities one of every unit whose
    number moved; a server without autovacuum keeps the old versions for
    ever, and the desk's check-in (its place among the priorities counts the
    units that need work) reads through them all.  Called after those writes
    (``batches.fleet_finish``; the commands ``forecast`` and ``due_list``
    after a refresh of the whole fleet); does nothing when the server vacuums itself,
    inside a transaction (VACUUM cannot run in one) or on another database.
    Returns the tables vacuumed."""
    if connection.vendor != "postgresql" or connection.in_atomic_block:
        return []
    names = [m._meta.db_table for m in (UnitForecast, ThermalHistory)]
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_stat_clear_snapshot()")
        cursor.execute(
            "SELECT relname FROM pg_stat_user_tables WHERE relname = ANY(%s) "
            "AND current_setting('autovacuum') = 'off' AND (%s OR n_dead_tup > %s * n_live_tup + %s) "
            "ORDER BY relname", [names, bool(rewritten), VACUUM_SCALE, VACUUM_BASE])
        due = [row[0] for row in cursor.fetchall()]
        if due:
            cursor.execute(f"VACUUM (ANALYZE) {', '.join(connection.ops.quote_name(t) for t in due)}")
    return due


def _queue_ranking():
    from .tasks import rank_priorities  # the tasks call the services, not the other way round

    try:
        rank_priorities.delay()
    except Exception:  # noqa: BLE001 - a broker that is down must not fail a desk's check-in
        log.exception("Could not queue the renumbering of priorities; the nightly refresh will do it.")


@with_collector_paused
def forecast_refresh(*, unit_ids=None, today=None, sync=True, **options):
    """Recompute and store the forecast of the given units (all when None).

    First (unless ``sync=False``: the caller just did) brings the thermal
    history and packs of any of them whose records changed up to date
    (``thermal.thermal_sync``), as the rows the load reads anyway tell: no
    query of its own when none changed.  Idempotent: the stored row of each unit is
    overwritten, and the priorities of the whole fleet renumbered
    (``priorities_rank``).  Retired units are not forecast and their old
    results are removed.  The whole fleet also keeps its gear models' means
    for later forecasts of a few units.  Returns the ForecastRun.
    """
    if unit_ids is None or len(unit_ids) > PLACE_AT_MOST:
        keep_freed_memory()  # a refresh of many units: large freed arrays kept for the next (heap.py)
    run = forecast_compute(unit_ids=unit_ids, today=today, sync=sync, **options)
    # No savepoint: inside a caller's transaction (check-in) a failure here
    # fails the whole of it, and it saves two round trips per refresh.
    started = time.perf_counter()
    with transaction.atomic(savepoint=False):
        _store(run)
        _store_unforecastable(run)
        # Units asked for but not forecast are retired (or gone): drop their old results.
        if unit_ids is None:
            UnitForecast.objects.filter(unit__status=Unit.Status.RETIRED).delete()
            model_use_store(run.fleet.model_id, run.model_sums, run.today)
        else:
            missing = set(unit_ids) - set(run.fleet.unit_id.tolist()) - {u.unit_id for u in run.unforecastable}
            if missing:
                UnitForecast.objects.filter(unit_id__in=missing).delete()
        if unit_ids is None:
            # The whole fleet: triage numbered every unit that needs work in
            # the order priorities_rank gives the stored rows, and every other
            # row is stored without a number or removed: nothing to renumber
            # (a test holds them equal; the count alone costs 40-70 ms at
            # 10,000 units).
            pass
        elif len(unit_ids) > PLACE_AT_MOST:
            priorities_rank()
        else:
            priorities_place(run)
    run.seconds["store"] = time.perf_counter() - started  # for the benchmark's breakdown
    for unit in run.unforecastable:
        log.warning("Cannot forecast %s: %s", unit.asset_tag, "; ".join(unit.reasons))
    log.info("Forecast %d units as of %s; %d could not be forecast.", run.fleet.n_units, run.today,
             len(run.unforecastable))
    return run


#: The life chart: how far ahead of today it looks [years], and how many of a
#: unit's positions it draws (those nearest their limits).
TRAJECTORY_YEARS_AHEAD = 10
TRAJECTORY_POSITIONS = 4


def unit_trajectory(*, forecast, installed_on, damage_limit, positions=TRAJECTORY_POSITIONS,
                    years_ahead=TRAJECTORY_YEARS_AHEAD):
    """Damage of a unit's worst positions and its risk over time, from the
    earliest of their install dates to ``years_ahead`` after the day of its
    stored ``forecast`` (``scheduling.trajectory``).

    ``installed_on`` maps capacitor id to install date and ``damage_limit``
    is the policy's (the page has both already; nothing is read here).  Returns ``(trajectory,
    capacitor ids of the drawn positions)``, or ``None`` without a stored
    forecast in the current layout.
    """
    from .trajectory import risk_at, trajectory

    if forecast is None:
        return None
    rec = stored_positions(forecast)
    keep = np.array([int(c) in installed_on for c in rec["capacitor_id"]], dtype=bool)
    rec = rec[keep]
    if rec.size == 0:
        return None
    today = timezone.localdate(forecast.computed_at)
    today_day = float((today - dt.date(1970, 1, 1)).days)
    installed = np.array([float((installed_on[int(c)] - dt.date(1970, 1, 1)).days) for c in rec["capacitor_id"]])
    damage, rate = rec["damage"].astype(float), rec["rate_per_day"].astype(float)
    threshold = rec["threshold"].astype(float)
    limit = damage_limit * threshold
    share = np.divide(damage, limit, out=np.full(damage.size, np.inf), where=limit > 0)
    worst = np.lexsort((-rate, -share))[:positions]
    start = float(installed[worst].min())
    end = today_day + years_ahead * 365.25
    curves = trajectory(damage_now=damage[worst], rate_per_day=rate[worst], threshold=threshold[worst],
                        installed_day=installed[worst], today_day=today_day, damage_limit=damage_limit,
                        horizon_days=forecast.horizon_days, start_day=start, end_day=end)
    # The unit's risk counts every position, not only the ones drawn.
    curves.risk = risk_at(curves.days, damage_now=damage, rate_per_day=rate, threshold=threshold,
                          installed_day=installed, today_day=today_day, horizon_days=forecast.horizon_days)
    return curves, [int(c) for c in rec["capacitor_id"][worst]]
