"""What the pages show of a unit's forecast: each position's action and why,
its predicted state in plain numbers and words, the unit's hazards.

Formatting itself (µF, Ω, °C, dates, percentages, "over 2x rated life") is
``reports.formatting``, shared with the printed sheets.
"""

import re

from django.utils import timezone

from reports import formatting as fmt
from scheduling import parameters as P
from scheduling.days import day_to_date
from scheduling.hazards import charged_parts
from scheduling.models import UnitForecast
from scheduling.reasons import action_words
from scheduling.services import stored_positions
from scheduling.triage import ACTION_NAMES, LEAVE, MEASURE, REPLACE

from ..workflows import checkout_forecast_note, checkout_reason_needed

#: Order of the actions on the pages: what to do first at the top.
ACTION_ORDER = {REPLACE: 0, MEASURE: 1, LEAVE: 2}
ACTION_LABELS = {REPLACE: "Replace", MEASURE: "Measure", LEAVE: "Leave"}


def format_capacitance(uf):
    """Capacitance stored in µF, written the way parts are marked:
    4.7 -> "4.7 µF", 0.47 -> "470 nF", 4.7e-5 -> "47 pF", 2200 -> "2200 µF"."""
    return fmt.capacitance(uf)


def format_number(value, unit=""):
    if value is None:
        return ""
    return f"{fmt.plain_number(value, 4)} {unit}".strip()


def hazard_words(gear_model):
    """What inside the unit can hurt, in words: only what this model has."""
    words = []
    if gear_model.hazard_mains:
        volts = f" ({gear_model.mains_voltage_v:g} V a.c.)" if gear_model.mains_voltage_v else ""
        words.append(f"Mains voltage inside{volts}")
    if gear_model.hazard_tube_hv:
        words.append("Tube high voltage: lethal, and it stays charged after switching off and unplugging")
    if gear_model.hazard_smps:
        words.append("Switch-mode supply: its primary side sits at rectified mains voltage")
    if not words:
        words.append("No mains inside (external low-voltage supply); charged capacitors can still hurt")
    return words


def designator_key(designator):
    """C2 before C10: letters, then the number, then any suffix."""
    match = re.match(r"([A-Za-z]*)(\d*)(.*)", designator)
    prefix, number, rest = match.groups()
    return (prefix.upper(), int(number) if number else -1, rest)


def unit_forecast(unit):
    try:
        return unit.forecast
    except UnitForecast.DoesNotExist:
        return None


# --- positions ------------------------------------------------------------------------


def _circuit_figures(position):
    return dict(min_rail_v=position.pump_min_rail_v, ripple_limit_v=position.reservoir_ripple_limit_v,
                max_corner_hz=position.coupling_max_corner_hz)


def position_why(action, why, cap, share, today, calendar_age_years):
    """The reason of a fitted part's action, without its verb: "negative rail below 3.25 V …"."""
    return _why(action, why, cap.position.role, share, cap, today, calendar_age_years)


def _why(action, why, role, share, cap, today, calendar_age_years):
    """The reason of an action, without its verb: "negative rail below 3.25 V …"."""
    share = None if share is None or share == float("inf") else share
    line = action_words(action, why, role, share=share, age_years=fmt.age_years(cap.installed_on, today),
                        age_limit_years=calendar_age_years, **_circuit_figures(cap.position))
    why = line.split(": ", 1)[1] if ": " in line else ""
    # the table's note says what end-of-life drift is; one line per part is enough
    return why.replace(" (ESR doubled, capacitance down 20 %)", "")


def position_plan(capacitors, forecast, *, damage_limit, calendar_age_years, today=None):
    """One row per fitted capacitor: the part, its action and why, and its
    predicted state in words, in designator order (see :func:`by_action`).

    ``capacitors`` are ``UnitCapacitor`` rows with their positions; a
    capacitor the stored forecast does not know (no forecast yet, or fitted
    since) gets ``predicted = None``.
    """
    today = today or timezone.localdate()
    predicted = {}
    if forecast is not None:
        for rec in stored_positions(forecast):
            predicted[int(rec["capacitor_id"])] = rec
    rows = []
    for c in sorted(capacitors, key=lambda c: designator_key(c.position.designator)):
        rec = predicted.get(c.pk)
        row = {
            "id": c.pk,
            "designator": c.position.designator,
            "role": c.position.role,
            "role_label": c.position.get_role_display(),
            "part": f"{fmt.capacitance(c.capacitance_uf)} {fmt.volts(c.rated_voltage_v)} "
                    f"{fmt.temperature(c.rated_temp_c)}",
            "endurance": fmt.hours(c.rated_life_h),
            "installed_on": c.installed_on,
            "original": c.is_original,
            "rated_voltage_v": c.rated_voltage_v,
            "action": None,
        }
        if rec is not None:
            row.update(_predicted(rec, c, today, damage_limit, calendar_age_years, forecast))
        rows.append(row)
    return rows


def _predicted(rec, cap, today, damage_limit, calendar_age_years, forecast):
    damage, threshold = float(rec["damage"]), float(rec["threshold"])
    limit = damage_limit * threshold
    share = damage / limit if limit > 0 else None
    action, why = int(rec["action"]), int(rec["why"])
    reach = float(rec["reaches_day"])
    reaches_on = None if reach != reach else day_to_date(reach)
    beyond = damage > fmt.MODEL_RANGE_DAMAGE
    computed = timezone.localdate(forecast.computed_at)
    if reaches_on is None:
        reaches = "not within 20 years"
    elif reaches_on <= computed:
        reaches = f"since {fmt.estimated_past(reaches_on, today)}"
    else:
        reaches = fmt.date_ahead(reaches_on, today)
    return {
        "action": action,
        "action_name": ACTION_NAMES[action],
        "action_label": ACTION_LABELS[action],
        "why": _why(action, why, cap.position.role, share, cap, today, calendar_age_years),
        "share": share if share is not None else float("inf"),
        "life_used": fmt.life_used(damage, limit),
        "over": share is None or share >= 1,
        # past the range the drift laws are calibrated for, the figures mean little: say so
        "esr_now": "over 4x new" if beyond else fmt.resistance(float(f"{float(rec['esr_ohm']):.3g}")),
        "capacitance_now": "under 60 %" if beyond else fmt.capacitance(float(rec["capacitance_f"]) * 1e6),
        "beyond": beyond,
        "reaches": reaches,
        "reached": reaches_on is not None and reaches_on <= computed,
        "damage": damage,
        "limit": limit,
    }


def _impact(row):
    return P.ROLE_HIRE_IMPACT.get(row["role"], 0.0)


def by_action(rows):
    """Replace first, then measure, then leave; within each the roles that
    hurt a hire most (``parameters.ROLE_HIRE_IMPACT``), then the parts
    furthest past their limit."""
    def key(r):
        action = r["action"] if r["action"] is not None else LEAVE
        return (ACTION_ORDER[action], -_impact(r), r["role"], -r.get("share", 0.0),
                designator_key(r["designator"]))
    return sorted(rows, key=key)


def by_role(rows):
    """Groups ``[(role label, rows)]``, the roles that hurt a hire most first,
    each in action order."""
    groups = {}
    for row in by_action(rows):
        groups.setdefault((-_impact(row), row["role_label"]), []).append(row)
    return [(label, group) for (_, label), group in sorted(groups.items())]


def action_counts(rows):
    counts = {REPLACE: 0, MEASURE: 0, LEAVE: 0}
    for r in rows:
        if r["action"] is not None:
            counts[r["action"]] += 1
    return {"replace": counts[REPLACE], "measure": counts[MEASURE], "leave": counts[LEAVE]}


def todo_line(rows, *, shown=3, why_of=None):
    """What to do with a unit, in one line: "Replace C4, C5 and 23 more,
    measure 3: C4 negative rail below 3.25 V".  ``rows`` need designator,
    role, action and share; the reason is the first row's ``why``, or
    ``why_of(row)`` for it when given (only the first one is worded)."""
    ordered = [r for r in by_action(rows) if r["action"] in (REPLACE, MEASURE)]
    if not ordered:
        return ""
    replace = [r["designator"] for r in ordered if r["action"] == REPLACE]
    measure = [r["designator"] for r in ordered if r["action"] == MEASURE]
    parts = []
    for verb, names in (("replace", replace), ("measure", measure)):
        if not names:
            continue
        listed = ", ".join(names[:shown]) if not parts else ""
        more = len(names) - shown
        if parts:
            parts.append(f"{verb} {len(names)}")
        else:
            parts.append(f"{verb.capitalize()} {listed}" + (f" and {more} more" if more > 0 else ""))
    first = ordered[0]
    why = why_of(first) if why_of is not None else first.get("why", "")
    # the verb already says to take a reading; the unit page has the rest
    short = (why or "").split("; read its", 1)[0].split(" at today's predicted", 1)[0]
    return ", ".join(parts) + (f": {first['designator']} {short}" if short else "")


# --- safety -----------------------------------------------------------------------------------


def charged(capacitors):
    """The unit's parts rated above 60 V: energy and the time to fall below
    60 V through the stated discharge resistor, most energy first."""
    caps = sorted(capacitors, key=lambda c: designator_key(c.position.designator))
    parts = charged_parts(designators=[c.position.designator for c in caps],
                          capacitance_uf=[c.capacitance_uf for c in caps],
                          rated_voltage_v=[c.rated_voltage_v for c in caps])
    return [{
        "designator": p.designator,
        "part": f"{fmt.capacitance(p.capacitance_uf)} {fmt.volts(p.voltage_v)}",
        "energy": fmt.energy(p.energy_j),
        "energy_j": p.energy_j,
        "discharge": fmt.seconds(p.discharge_s),
    } for p in parts]


def safety(unit, capacitors):
    """Everything the safety box of a unit says, specific to its model and parts."""
    gm = unit.gear_model
    parts = charged(capacitors)
    return {
        "hazards": hazard_words(gm),
        "notes": gm.hazard_notes,
        "tube": gm.hazard_tube_hv,
        "mains": gm.hazard_mains,
        "charged": parts,
        "safe_v": fmt.volts(P.SAFE_VOLTAGE_V),
        "resistor": fmt.resistance(P.DISCHARGE_RESISTOR_OHM),
    }


def safety_line(gear_model, parts):
    """The safety of a unit in one line for a list: "Tube high voltage ·
    5 parts above 60 V, up to 12.5 J"."""
    words = []
    if gear_model.hazard_tube_hv:
        words.append("Tube high voltage")
    elif gear_model.hazard_smps:
        words.append("Switch-mode primary")
    elif gear_model.hazard_mains:
        words.append("Mains inside")
    else:
        words.append("Low-voltage supply")
    if parts:
        n = len(parts)
        words.append(f"{n} part{'s' if n != 1 else ''} above {fmt.volts(P.SAFE_VOLTAGE_V)}, "
                     f"up to {fmt.energy(max(p.energy_j for p in parts))}")
    return " · ".join(words)


# --- the forecast in words ---------------------------------------------------------------------------


def forecast_display(forecast, *, needing_work=None, today=None):
    """The unit's forecast as the pages say it; ``needing_work`` is how many
    units have a priority (for "priority 3 of 41")."""
    if forecast is None:
        return None
    today = today or timezone.localdate()
    due = forecast.due_date
    return {
        "status": forecast.status,
        "label": forecast.get_status_display(),
        "due_date": due,
        "past_limit": (f"past its limit since {fmt.estimated_past(due, today)}"
                       if due is not None and due < today else None),
        # None: no recap due within FAR_YEARS (or none at all)
        "due_words": None if due is None or fmt.is_far(due, today) else fmt.date(due),
        "act_by": forecast.act_by,
        "act_by_words": fmt.today_or_date(forecast.act_by, today),
        "priority": forecast.priority,
        "needing_work": needing_work,
        "risk": fmt.risk_sentence(forecast.risk, forecast.horizon_days),
        "risk_percent": fmt.percent(forecast.risk),
        "hire_risk": fmt.hire_risk_sentence(forecast.hire_risk),
        "horizon_days": forecast.horizon_days,
        "reasons": list(forecast.reasons or []),
        "computed_at": forecast.computed_at,
        "storage_reform": forecast.storage_reform,
    }


def desk_card(unit, forecast, rentals, today=None):
    """May the unit go out? The desk's answer in a word, a headline and details."""
    today = today or timezone.localdate()
    status = unit.status
    last_back = next((r for r in rentals if r.in_at is not None), None)
    open_hire = next((r for r in rentals if r.in_at is None), None)
    due = forecast is not None and forecast.status in (UnitForecast.Status.DUE, UnitForecast.Status.OVERDUE)
    if status == "out" and open_hire is not None:
        return {"go": True, "word": "Out on hire",
                "headline": f"Out on job {open_hire.job_ref} since {fmt.moment(timezone.localtime(open_hire.out_at))}",
                "details": [f"Out for {fmt.duration((timezone.now() - open_hire.out_at).total_seconds() / 3600)} so far."]}
    if status == "retired":
        return {"go": False, "word": "Retired", "headline": "Retired: not for hire", "details": []}
    if status in ("hold", "bench"):
        details = []
        if last_back is not None and last_back.reported_faults:
            details.append(f"Fault reported on return {fmt.date(timezone.localdate(last_back.in_at))}: "
                           f"{last_back.reported_faults}")
        if due:
            details.append(f"Recap {forecast.get_status_display().lower()}.")
        where = "on the bench" if status == "bench" else "held for the workshop"
        return {"go": False, "word": "Do not hire out", "headline": f"{unit.asset_tag} is {where}",
                "details": details or ["Ask the workshop when it will be ready."]}
    if forecast is not None and forecast.status == UnitForecast.Status.INVALID:
        return {"go": False, "word": "Check with the workshop",
                "headline": "Its forecast cannot be worked out: ask the workshop",
                "details": [*(forecast.reasons or []),
                            "Send it out only if the workshop agrees; the check-out asks for it."]}
    if due:
        why = checkout_reason_needed(forecast)
        if why:
            return {"go": False, "word": "Check with the workshop",
                    "headline": f"Recap {forecast.get_status_display().lower()}: it should stay in",
                    "details": [f"{why[0].upper()}{why[1:]}.",
                                "Send it out only if the workshop agrees; the check-out asks for a reason."]}
        return {"go": True, "word": "May go out",
                "headline": f"May go out; recap {forecast.get_status_display().lower()}",
                "details": [checkout_forecast_note(forecast, today=today)]}
    if forecast is not None and forecast.status == UnitForecast.Status.WATCH:
        return {"go": True, "word": "May go out",
                "headline": f"May go out; recap coming up by {fmt.date_ahead(forecast.due_date, today)}",
                "details": []}
    return {"go": True, "word": "May go out", "headline": f"{unit.asset_tag} may go out", "details": []}
