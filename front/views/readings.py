"""Bench readings as the pages show them: predicted against measured."""

from fleet.models import Reading
from scheduling import physics

from .display import format_capacitance


def _ohm(x):
    return f"{x:.3g} Ω"


def _ratio(measured, predicted):
    if predicted is None or not predicted:
        return ""
    return f"×{measured / predicted:.2g}"


def reading_rows(readings):
    """One row per quantity read: when, who, what, predicted, measured, how far apart."""
    rows = []
    for r in readings:
        base = {"when": r.taken_at, "who": r.taken_by.get_full_name() or r.taken_by.get_username()
                if r.taken_by else "", "removed": r.part_removed, "notes": r.notes}
        if r.kind == Reading.Kind.CAPACITOR:
            des = r.position.designator
            if r.esr_ohm is not None:
                rows.append({**base, "what": f"{des} ESR at {r.esr_freq_hz:g} Hz", "measured": _ohm(r.esr_ohm),
                             "predicted": _ohm(r.predicted_esr_ohm) if r.predicted_esr_ohm else "",
                             "ratio": _ratio(r.esr_ohm, r.predicted_esr_ohm)})
            if r.capacitance_uf is not None:
                rows.append({**base, "what": f"{des} capacitance", "measured": format_capacitance(r.capacitance_uf),
                             "predicted": format_capacitance(float(f"{r.predicted_capacitance_uf:.3g}"))
                             if r.predicted_capacitance_uf else "",
                             "ratio": _ratio(r.capacitance_uf, r.predicted_capacitance_uf)})
            if r.leakage_ua is not None:
                limit = physics.leakage_limit_ua(r.position.capacitance_uf, r.position.rated_voltage_v)
                rows.append({**base, "what": f"{des} leakage", "measured": f"{r.leakage_ua:g} µA",
                             "predicted": f"limit {limit:.3g} µA", "ratio": "over the limit"
                             if r.leakage_ua > limit else ""})
        else:
            load = f" at {r.rail_load_ma:g} mA" if r.rail_load_ma is not None else ""
            pump = f" (pump {r.pump_position.designator})" if r.pump_position_id else ""
            predicted = r.predicted_rail_v if r.predicted_rail_v is not None else r.rail_expected_v
            rows.append({**base, "what": f"{r.rail_name} rail{load}{pump}", "measured": f"{r.rail_measured_v:+.2f} V",
                         "predicted": "" if predicted is None else f"{predicted:+.2f} V"
                         + ("" if r.predicted_rail_v is not None else " expected"),
                         "ratio": ""})
    return rows


def reading_summary(outcome):
    """One line for the technician: what was read, what the forecast expected,
    how the damage and the unit's forecast moved."""
    r = outcome.reading
    parts = []
    if r.kind == Reading.Kind.CAPACITOR:
        des = r.position.designator
        if r.esr_ohm is not None and r.predicted_esr_ohm:
            parts.append(f"{des}: ESR {r.esr_ohm:g} Ω measured, {r.predicted_esr_ohm:.3g} Ω predicted")
        elif r.capacitance_uf is not None and r.predicted_capacitance_uf:
            parts.append(f"{des}: {format_capacitance(r.capacitance_uf)} measured, "
                         f"{format_capacitance(float(f'{r.predicted_capacitance_uf:.3g}'))} predicted")
        else:
            parts.append(f"{des}: reading recorded")
    else:
        parts.append(f"{r.rail_name} rail {r.rail_measured_v:+.2f} V" + (
            f", {r.predicted_rail_v:+.2f} V predicted" if r.predicted_rail_v is not None else "")
            + ("" if r.pump_position_id else " (recorded; it does not come from a charge pump the forecast knows)"))
    moved = outcome.moved()
    if moved:
        parts.append("damage " + ", ".join(f"{d} {a:.2f} → {b:.2f}" for d, (a, b) in moved.items()))
    b, a = outcome.before, outcome.after
    if b is not None and a is not None:
        parts.append(f"unit {b.status} → {a.status}, chance of a fault within {a.horizon_days} days "
                     f"{b.risk:.0%} → {a.risk:.0%}")
    return "; ".join(parts) + "."
