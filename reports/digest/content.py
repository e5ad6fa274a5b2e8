"""What a period's digest says, worked out once from the database in a fixed
number of queries (whatever the fleet's size) and kept as JSON on the
``Digest`` row, so that every subscriber and every retry gets the same.

- counts of units by forecast state and by unit status;
- what changed since the last digest: units newly held, released from hold or
  the bench, newly due or overdue (from the last digest's snapshot of each
  unit), recaps recorded and bench readings taken (each with who did it: a
  readable name, else the username), check-outs made against the forecast;
- the top of the triage list and how many units need work;
- the parts to order for the top of the list (``reports.duelist.parts_list``);
- a small chart: units by act-by month, this month ("now") and the next 11.
"""

import datetime as dt

from django.db.models import Count
from django.utils import timezone

from fleet.models import CheckoutOverride, Reading, ServiceRecord, Unit
from scheduling.models import UnitForecast

from .. import formatting as fmt
from ..duelist import due_list, parts_list

#: Rows of the triage list the digest shows, and units its parts list covers.
TOP_ROWS = 10
PARTS_UNITS = 20
#: Longest list of units under one heading of "what changed".
CHANGE_ROWS = 15
#: Kinds of part the digest lists (the most needed first); the rest are counted.
PART_LINES = 12
CHART_MONTHS = 12
HELD = (Unit.Status.HOLD,)
IN_WORKSHOP = (Unit.Status.HOLD, Unit.Status.BENCH)
BACK_IN_USE = (Unit.Status.AVAILABLE, Unit.Status.OUT)
DUE = (UnitForecast.Status.DUE, UnitForecast.Status.OVERDUE)


def fleet_snapshot():
    """{unit id (text): [asset tag, unit status, forecast status or ""]} of every unit."""
    rows = Unit.objects.values_list("pk", "asset_tag", "status", "forecast__status")
    return {str(pk): [tag, status, fstatus or ""] for pk, tag, status, fstatus in rows}


def _counts(snapshot):
    by_status, by_forecast, not_forecast = {}, {}, 0
    for _, status, fstatus in snapshot.values():
        by_status[status] = by_status.get(status, 0) + 1
        if status == Unit.Status.RETIRED:
            continue
        if fstatus:
            by_forecast[fstatus] = by_forecast.get(fstatus, 0) + 1
        else:
            not_forecast += 1
    return {
        "forecast": [[v, label, by_forecast.get(v, 0)] for v, label in UnitForecast.Status.choices],
        "not_forecast": not_forecast,
        "units": [[v, label, by_status.get(v, 0)] for v, label in Unit.Status.choices],
        "total": len(snapshot),
    }


def _capped(items):
    return {"items": items[:CHANGE_ROWS], "more": max(len(items) - CHANGE_ROWS, 0), "count": len(items)}


def person(user, typed=""):
    """Who did it, as people read it: the login's full name, else the name typed on the
    record, else the username ("" when no one is recorded)."""
    if user is not None and user.get_full_name():
        return user.get_full_name()
    return typed or (user.get_username() if user is not None else "")


def _readings(since):
    """Bench readings taken since ``since``, one item per unit, day and technician:
    [asset tag, date, who, what was read ("C1, C2, rail B+")], oldest first."""
    qs = (Reading.objects.filter(taken_at__gte=since).select_related("unit", "position", "taken_by")
          .order_by("taken_at", "id"))
    groups = {}
    for r in qs:
        day = timezone.localtime(r.taken_at).date()
        key = (r.unit.asset_tag, day, person(r.taken_by))
        what = (r.position.designator if r.kind == Reading.Kind.CAPACITOR and r.position_id
                else f"rail {r.rail_name}".strip())
        if r.part_removed:
            what += " (removed part)"
        items = groups.setdefault(key, [])
        if what not in items:
            items.append(what)
    return [[tag, fmt.date(day), who, ", ".join(sorted(what, key=fmt.designator_key))]
            for (tag, day, who), what in groups.items()]


def _overrides(since):
    """Check-outs the desk recorded against the forecast since ``since``:
    [asset tag, date, who, why]."""
    qs = CheckoutOverride.objects.select_related("unit", "decided_by").filter(decided_at__gte=since)
    return [[o.unit.asset_tag, fmt.date(timezone.localtime(o.decided_at)),
             person(o.decided_by),
             o.reason[:160]] for o in qs.order_by("decided_at")]


def _changes(snapshot, previous, today):
    before = previous.snapshot if previous is not None else {}
    since = previous.created_at if previous is not None else None
    held, released, newly_due = [], [], []
    for pk, (tag, status, fstatus) in sorted(snapshot.items(), key=lambda kv: kv[1][0]):
        old = before.get(pk)
        old_status, old_f = (old[1], old[2]) if old else (None, "")
        if status in HELD and old_status not in HELD and previous is not None:
            held.append(tag)
        if status in BACK_IN_USE and old_status in IN_WORKSHOP:
            released.append(tag)
        if fstatus in DUE and old_f not in DUE and previous is not None:
            newly_due.append([tag, fstatus])
    recaps = ServiceRecord.objects.filter(kind=ServiceRecord.Kind.RECAP).select_related("unit")
    recaps = recaps.filter(performed_on__gte=timezone.localtime(since).date() if since else today - dt.timedelta(7))
    recapped = [[r.unit.asset_tag, fmt.date(r.performed_on), person(r.technician, r.technician_name)]
                for r in recaps.select_related("technician").order_by("performed_on", "unit__asset_tag")]
    overrides = _overrides(since if since else timezone.now() - dt.timedelta(days=7))
    readings = _readings(since if since else timezone.now() - dt.timedelta(days=7))
    held_all = sorted(tag for tag, status, _ in snapshot.values() if status in HELD)
    reasons = dict(Unit.objects.filter(asset_tag__in=held[:CHANGE_ROWS] + held_all[:CHANGE_ROWS])
                   .values_list("asset_tag", "hold_reason"))
    held = [[tag, reasons.get(tag, "")] for tag in held]
    return {
        "since": fmt.moment(timezone.localtime(since)) if since else None,
        "first": previous is None,
        "newly_held": _capped(held),
        "held_now": len(held_all),
        "held_list": _capped([[tag, reasons.get(tag, "")] for tag in held_all]),
        "released": _capped(released),
        "newly_due": _capped(newly_due),
        "recapped": _capped(recapped),
        "readings": _capped(readings),
        "overrides": _capped(overrides),
    }


def _chart(today):
    """Units by act-by month: this month (work already due counts as now)
    and the next ``CHART_MONTHS - 1``; later ones in one last bar."""
    first = today.replace(day=1)
    months = [first]
    for _ in range(CHART_MONTHS - 1):
        months.append(fmt.first_of_next_month(months[-1]))
    counts = [0] * (CHART_MONTHS + 1)
    rows = (UnitForecast.objects.exclude(unit__status=Unit.Status.RETIRED).filter(act_by__isnull=False)
            .values("act_by").annotate(n=Count("id")))
    for row in rows:
        d = row["act_by"]
        k = (d.year - first.year) * 12 + d.month - first.month
        counts[min(max(k, 0), CHART_MONTHS)] += row["n"]
    bars = [{"label": "this month" if k == 0 else fmt.month(m), "count": counts[k]} for k, m in enumerate(months)]
    bars.append({"label": "later", "count": counts[-1]})
    return bars


def digest_content(*, period, previous=None, today=None):
    """(content, snapshot) of the digest for ``period``; ``previous`` is the
    last digest before it (None for the first)."""
    today = today or timezone.localdate()
    snapshot = fleet_snapshot()
    dl = due_list(limit=TOP_ROWS, today=today)
    pl = parts_list(units=PARTS_UNITS, today=today)
    top = [{"priority": r.priority, "tag": r.asset_tag, "model": r.model, "location": r.location,
            "unit_status": r.unit_status, "status": r.status_label, "act_by": fmt.today_or_date(r.act_by, today),
            "hire_risk": fmt.percent(r.hire_risk), "risk": fmt.percent(r.risk), "replace": r.replace,
            "measure": r.measure, "reason": r.reason} for r in dl.rows]
    parts = [{"part": ln.describe(), "to_fit": ln.to_fit, "spares": ln.spares, "order": ln.order,
              "units": len(ln.units)} for ln in sorted(pl.lines, key=lambda ln: -ln.order) if ln.to_fit]
    need_work = UnitForecast.objects.exclude(unit__status=Unit.Status.RETIRED).filter(priority__isnull=False).count()
    content = {
        "period": period, "today": today.isoformat(), "today_words": fmt.date(today),
        "made_at": fmt.moment(timezone.localtime()), "horizon_days": dl.within_days,
        "counts": _counts(snapshot), "changes": _changes(snapshot, previous, today),
        "top": top, "need_work": need_work, "due_list_total": dl.total,
        "parts": {"units": len(pl.unit_tags), "lines": parts[:PART_LINES],
                  "more_lines": max(len(parts) - PART_LINES, 0), "to_fit": pl.to_fit, "to_order": pl.to_order},
        "chart": _chart(today),
    }
    return content, snapshot
