"""The reads behind the workshop page and the manager's start page: the
triage list, the units held or on the bench with why, and the parts the top
of the list needs.

Each function runs a fixed number of queries whatever the size of the fleet,
and no list returns more than one page of rows.
"""

import functools
from collections import defaultdict

import numpy as np

from django.db.models import F, OuterRef, Subquery

from fleet.models import Rental, Role, Unit, UnitCapacitor
from scheduling import parameters as P
from scheduling.hazards import charged_parts
from scheduling.models import UnitForecast
from scheduling.replacement import group_parts, recommend
from scheduling.services import stored_positions
from scheduling.thresholds import ROLE_CODES
from scheduling.triage import LEAVE, REPLACE

from .display import by_action, designator_key, position_why, safety_line, todo_line

TRIAGE_PER_PAGE = 25
#: Units held or on the bench shown at once (the rest are counted and linked).
HELD_SHOWN = 25
#: The parts list covers this many units from the top of the triage list.
PARTS_TOP_UNITS = 10

ROLE_FILTERS = [(value, label) for value, label in Role.choices]


def triage_forecasts(*, gear_model=None, location=None, role=""):
    """The units that need work, by priority (1 first), with unit, model and
    location joined; filtered by gear model, home location and the role of a
    position to replace or measure."""
    qs = (UnitForecast.objects.filter(priority__isnull=False)
          .exclude(unit__status=Unit.Status.RETIRED)
          .select_related("unit", "unit__gear_model", "unit__home_location"))
    if gear_model:
        qs = qs.filter(unit__gear_model=gear_model)
    if location:
        qs = qs.filter(unit__home_location=location)
    if role:
        bit = 1 << ROLE_CODES[role]
        qs = qs.annotate(_role_bit=F("action_roles").bitand(bit)).filter(_role_bit__gt=0)
    return qs.order_by("priority", "unit__asset_tag")


def unforecastable():
    """The units the engine cannot forecast (their figures need correcting),
    at most ``HELD_SHOWN``, with unit and model joined; and how many there are."""
    qs = (UnitForecast.objects.filter(status=UnitForecast.Status.INVALID)
          .exclude(unit__status=Unit.Status.RETIRED)
          .select_related("unit", "unit__gear_model", "unit__home_location")
          .order_by("unit__asset_tag"))
    return list(qs[:HELD_SHOWN]), qs.count()


def needing_work_count():
    return UnitForecast.objects.filter(priority__isnull=False).exclude(unit__status=Unit.Status.RETIRED).count()


def plans(forecasts, *, policy, today):
    """{unit id: (what to do in one line, parts to replace, parts to measure)}
    for a page of forecasts, from their stored actions: one light query for
    the designators and roles of the positions to act on, one for the first
    position of each unit (whose reason is worded)."""
    acted = {}
    for f in forecasts:
        rec = stored_positions(f)
        rec = rec[rec["action"] != LEAVE]
        limit = policy.damage_limit * rec["threshold"].astype(float)
        share = np.divide(rec["damage"].astype(float), limit, out=np.full(rec.size, np.inf), where=limit > 0)
        acted[f.unit_id] = [{"id": int(i), "action": int(a), "why_code": int(w), "share": float(x)}
                            for i, a, w, x in zip(rec["capacitor_id"], rec["action"], rec["why"], share)]
    ids = [row["id"] for rows in acted.values() for row in rows]
    names = {}
    if ids:
        names = {pk: (designator, role) for pk, designator, role in UnitCapacitor.objects.filter(pk__in=ids)
                 .values_list("pk", "position__designator", "position__role")}
    firsts = {}
    for unit_id, rows in acted.items():
        for row in rows:
            row["designator"], row["role"] = names.get(row["id"], ("?", "general"))
        ordered = by_action(rows)
        if ordered:
            firsts[ordered[0]["id"]] = ordered[0]
    caps = {c.pk: c for c in UnitCapacitor.objects.filter(pk__in=list(firsts)).select_related("position")} \
        if firsts else {}

    def why_of(row):
        cap = caps.get(row["id"])
        if cap is None:
            return ""
        return position_why(row["action"], row["why_code"], cap, row["share"], today, policy.calendar_age_years)

    out = {}
    for unit_id, rows in acted.items():
        replace = sum(1 for r in rows if r["action"] == REPLACE)
        out[unit_id] = (todo_line(rows, why_of=why_of), replace, len(rows) - replace)
    return out


def charged_by_unit(unit_ids):
    """{unit id: its parts rated above the safe voltage}: one query."""
    caps = defaultdict(list)
    rows = (UnitCapacitor.objects.filter(unit_id__in=list(unit_ids), rated_voltage_v__gt=P.SAFE_VOLTAGE_V)
            .values_list("unit_id", "position__designator", "capacitance_uf", "rated_voltage_v"))
    for unit_id, designator, uf, volts in rows:
        caps[unit_id].append((designator, uf, volts))
    out = {}
    for unit_id in unit_ids:
        parts = caps.get(unit_id, [])
        out[unit_id] = charged_parts(designators=[p[0] for p in parts], capacitance_uf=[p[1] for p in parts],
                                     rated_voltage_v=[p[2] for p in parts])
    return out


def triage_rows(forecasts, *, policy, today):
    """One row per unit for the triage list: its plan in one line and its safety in one line."""
    forecasts = list(forecasts)
    plan = plans(forecasts, policy=policy, today=today)
    charged = charged_by_unit([f.unit_id for f in forecasts])
    rows = []
    for f in forecasts:
        todo, replace, measure = plan.get(f.unit_id, ("", 0, 0))
        rows.append({
            "forecast": f,
            "unit": f.unit,
            "todo": todo or (f.reasons[0] if f.reasons else ""),
            "replace": replace,
            "measure": measure,
            "safety": safety_line(f.unit.gear_model, charged[f.unit_id]),
            "plain": _plain(f.unit.gear_model, charged[f.unit_id]),
        })
    return rows


# --- held and on the bench -----------------------------------------------------------------


def workshop_units(limit=HELD_SHOWN):
    """Units on the bench, then held ones, at most ``limit``, with model,
    location, forecast and their last return (time and faults) joined."""
    last = Rental.objects.filter(unit=OuterRef("pk"), in_at__isnull=False).order_by("-in_at")
    return list(
        Unit.objects.filter(status__in=[Unit.Status.BENCH, Unit.Status.HOLD])
        .select_related("gear_model", "home_location", "forecast")
        .annotate(last_in_at=Subquery(last.values("in_at")[:1]),
                  last_faults=Subquery(last.values("reported_faults")[:1]))
        .order_by("status", "asset_tag")[:limit]
    )


def workshop_counts():
    """{status: count} of the units on the bench and held."""
    counts = {Unit.Status.BENCH: 0, Unit.Status.HOLD: 0}
    for status in (Unit.Status.BENCH, Unit.Status.HOLD):
        counts[status] = Unit.objects.filter(status=status).count()
    return counts


def why_held(unit):
    """Why a unit is held or on the bench, in words the desk can read."""
    forecast = getattr(unit, "forecast", None) if _has_forecast(unit) else None
    if unit.hold_reason and unit.status == "hold":
        return unit.hold_reason
    if unit.last_faults:
        return f"Fault reported on return: {unit.last_faults}"
    if forecast is not None and forecast.status in (UnitForecast.Status.DUE, UnitForecast.Status.OVERDUE):
        first = forecast.reasons[0] if forecast.reasons else ""
        return f"Recap {forecast.get_status_display().lower()}" + (f": {first}" if first else "")
    if unit.notes:
        return unit.notes.splitlines()[0]
    return "No reason recorded"


def _has_forecast(unit):
    try:
        unit.forecast
    except UnitForecast.DoesNotExist:
        return False
    return True


def workshop_rows(units):
    charged = charged_by_unit([u.pk for u in units])
    return [{"unit": u, "why": why_held(u), "forecast": u.forecast if _has_forecast(u) else None,
             "safety": safety_line(u.gear_model, charged[u.pk]), "plain": _plain(u.gear_model, charged[u.pk])}
            for u in units]


def _plain(gear_model, parts):
    """Nothing above the everyday mains hazard: shown quieter in lists."""
    return not (gear_model.hazard_tube_hv or gear_model.hazard_smps or parts)


# --- parts for the top of the list ------------------------------------------------------------


def parts_for_top(forecasts):
    """The replacement parts (common practice, ``scheduling.replacement``) for
    the positions to replace in ``forecasts``, grouped with quantities and
    where each goes.  One query for the capacitors."""
    forecasts = list(forecasts)
    ids = []
    for f in forecasts:
        rec = stored_positions(f)
        ids.extend(int(i) for i in rec["capacitor_id"][rec["action"] == REPLACE])
    if not ids:
        return []
    tags = {f.unit_id: f.unit.asset_tag for f in forecasts}
    items = []
    rows = UnitCapacitor.objects.filter(pk__in=ids).values_list(
        "unit_id", "position__designator", "capacitance_uf", "rated_voltage_v", "rated_life_h", "diameter_mm",
        "mount", "position__role", "position__operating_voltage_v")
    for unit_id, designator, *part in sorted(rows, key=lambda r: (r[0], designator_key(r[1]))):
        items.append((_recommend(*part), (tags[unit_id], designator)))
    return [{"part": part, "qty": qty, "where": _where(where), "mount": MOUNT_WORDS.get(part.mount, part.mount)}
            for part, qty, where in group_parts(items)]


@functools.lru_cache(maxsize=4096)
def _recommend(capacitance_uf, rated_voltage_v, rated_life_h, diameter_mm, mount, role, operating_voltage_v):
    """``scheduling.replacement.recommend``, once per kind of fitted part."""
    return recommend(capacitance_uf=capacitance_uf, rated_voltage_v=rated_voltage_v, rated_life_h=rated_life_h,
                     diameter_mm=diameter_mm, mount=mount, role=role, operating_voltage_v=operating_voltage_v)


MOUNT_WORDS = {"radial": "radial", "axial": "axial", "smd": "surface mount"}


def _where(places):
    """``CB-0001: C32, C37; CB-0008: C4`` from (tag, designator) pairs in order."""
    by_tag = {}
    for tag, designator in places:
        by_tag.setdefault(tag, []).append(designator)
    return "; ".join(f"{tag}: {', '.join(ds)}" for tag, ds in by_tag.items())
