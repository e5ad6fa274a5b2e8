"""Bench readings as the pages show them: predicted against measured."""

from fleet.models import Reading
from reports import formatting as fmt
from scheduling import physics
from scheduling.models import UnitForecast

from .display import format_capacitance

#: A rail within this share of the figure it is held against reads "as expected" (our choice; a bench
#: meter and an unregulated rail under load easily differ by a few per cent).
RAIL_TOLERANCE = 0.10
#: End-of-life capacitance drift (the drift law's C0 (1 - 0.2 D) at D = 1; IEC 60384-4 limits as quoted).
CAPACITANCE_END_OF_LIFE = 0.80
MINUS = "\u2212"


def signed_volts(v):
    """A rail as a meter shows it: ``−9 V``, ``−6.1 V``, ``+15 V`` (a true minus sign)."""
    text = fmt.volts(abs(v))
    return (MINUS if v < 0 else "+" if v > 0 else "") + text


def _share(ratio):
    return f"{round(ratio * 100):.0f} %"


def rail_words(*, measured_v, expected_v=None, predicted_v=None, load_ma=None):
    """A rail reading in plain words: "expected −9 V, measured −6.1 V under
    10 mA: low, 68 % of expected".  Held against the schematic's figure when
    given, else the forecast's prediction for the pump at this load; "" when
    there is neither."""
    against, word = (expected_v, "expected") if expected_v else (predicted_v, "predicted")
    load = f" under {fmt.plain_number(load_ma)} mA" if load_ma else ""
    if not against:
        return f"measured {signed_volts(measured_v)}{load}"
    if (measured_v < 0) != (against < 0):
        verdict = "wrong sign"
    else:
        ratio = abs(measured_v) / abs(against)
        if ratio < 1 - RAIL_TOLERANCE:
            verdict = f"low, {_share(ratio)} of {word}"
        elif ratio > 1 + RAIL_TOLERANCE:
            verdict = f"high, {_share(ratio)} of {word}"
        else:
            verdict = f"as {word} ({_share(ratio)})"
    return f"{word} {signed_volts(against)}, measured {signed_volts(measured_v)}{load}: {verdict}"


def capacitance_words(measured_uf, rated_uf):
    """"measured 38 µF against 47 µF rated: 81 %", with what that means
    against the end-of-life drift (down 20 %)."""
    if not rated_uf:
        return f"measured {fmt.capacitance(measured_uf)}"
    ratio = measured_uf / rated_uf
    note = ("below 80 %: past end-of-life drift" if ratio < CAPACITANCE_END_OF_LIFE
            else "within the 20 % end-of-life drift")
    return (f"measured {fmt.capacitance(measured_uf)} against {fmt.capacitance(rated_uf)} rated: "
            f"{_share(ratio)} ({note})")


def esr_words(measured_ohm, freq_hz, new_ohm):
    """"measured 4.1 Ω at 100 Hz against 1.6 Ω new: 2.6× (end of life 2×)"."""
    at = f" at {fmt.plain_number(freq_hz)} Hz" if freq_hz else ""
    if not new_ohm:
        return f"measured {fmt.resistance(measured_ohm)}{at}"
    ratio = measured_ohm / new_ohm
    return (f"measured {fmt.resistance(measured_ohm)}{at} against {fmt.resistance(new_ohm)} new: "
            f"{fmt.plain_number(ratio, 2)}× (end of life 2×)")


def leakage_words(measured_ua, limit_ua):
    state = "over the limit" if measured_ua > limit_ua else "within it"
    return f"measured {fmt.plain_number(measured_ua)} µA against the {fmt.plain_number(limit_ua)} µA limit: {state}"


def _ohm(x):
    return fmt.resistance(x)


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
                             "words": esr_words(r.esr_ohm, r.esr_freq_hz, r.position.initial_esr_ohm),
                             "predicted": _ohm(r.predicted_esr_ohm) if r.predicted_esr_ohm else "",
                             "ratio": _ratio(r.esr_ohm, r.predicted_esr_ohm)})
            if r.capacitance_uf is not None:
                rows.append({**base, "what": f"{des} capacitance", "measured": format_capacitance(r.capacitance_uf),
                             "words": capacitance_words(r.capacitance_uf, r.position.capacitance_uf),
                             "predicted": format_capacitance(float(f"{r.predicted_capacitance_uf:.3g}"))
                             if r.predicted_capacitance_uf else "",
                             "ratio": _ratio(r.capacitance_uf, r.predicted_capacitance_uf)})
            if r.leakage_ua is not None:
                limit = physics.leakage_limit_ua(r.position.capacitance_uf, r.position.rated_voltage_v)
                rows.append({**base, "what": f"{des} leakage", "measured": f"{fmt.plain_number(r.leakage_ua)} µA",
                             "words": leakage_words(r.leakage_ua, limit),
                             "predicted": f"limit {fmt.plain_number(limit)} µA", "ratio": "over the limit"
                             if r.leakage_ua > limit else ""})
        else:
            load = f" at {r.rail_load_ma:g} mA" if r.rail_load_ma is not None else ""
            pump = f" (pump {r.pump_position.designator})" if r.pump_position_id else ""
            predicted = r.predicted_rail_v if r.predicted_rail_v is not None else r.rail_expected_v
            rows.append({**base, "what": f"{r.rail_name} rail{load}{pump}", "measured": signed_volts(r.rail_measured_v),
                         "words": rail_words(measured_v=r.rail_measured_v, expected_v=r.rail_expected_v,
                                             predicted_v=r.predicted_rail_v, load_ma=r.rail_load_ma),
                         "predicted": "" if predicted is None else signed_volts(predicted)
                         + ("" if r.predicted_rail_v is not None else " expected"),
                         "ratio": ""})
    return rows


def _status(code):
    try:
        return UnitForecast.Status(code).label.lower()
    except ValueError:
        return code


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
        if r.capacitance_uf is not None:
            parts.append(f"{des} capacitance {capacitance_words(r.capacitance_uf, r.position.capacitance_uf)}")
    else:
        parts.append(f"{r.rail_name} rail: " + rail_words(
            measured_v=r.rail_measured_v, expected_v=r.rail_expected_v, predicted_v=r.predicted_rail_v,
            load_ma=r.rail_load_ma)
            + (f" (the forecast predicted {signed_volts(r.predicted_rail_v)})"
               if r.predicted_rail_v is not None and r.rail_expected_v else "")
            + ("" if r.pump_position_id else " (recorded; it does not come from a charge pump the forecast knows)"))
    moved = outcome.moved()
    if moved:
        parts.append("damage " + ", ".join(f"{d} {a:.2f} → {b:.2f}" for d, (a, b) in moved.items()))
    b, a = outcome.before, outcome.after
    if b is not None and a is not None:
        parts.append(f"unit {_status(b.status)} → {_status(a.status)}, chance of a fault within "
                     f"{a.horizon_days} days {fmt.percent(b.risk)} → {fmt.percent(a.risk)}")
    return "; ".join(parts) + "." + _why_risk_rose(moved, b, a)


#: A rise of the unit's chance of a fault by at least this much (absolute)
#: after a reading that found no more wear than predicted gets a sentence
#: saying why; a reading within this share of the predicted damage counts as
#: "as predicted".  Our choice.
EXPLAIN_RISE_AT_LEAST = 0.05
AS_PREDICTED_WITHIN = 0.10


def _why_risk_rose(moved, before, after):
    """A sentence for a reading that confirmed (or bettered) the predicted
    wear and still raised the unit's chance of a fault: before it the
    forecast allowed that the unit, still working, aged slower than predicted
    (the frailty conditioned on survival); a measured part's wear is known,
    so that allowance no longer covers it (scheduling/readings.py)."""
    if not moved or before is None or after is None or after.risk - before.risk < EXPLAIN_RISE_AT_LEAST:
        return ""
    if any(a > b * (1 + AS_PREDICTED_WITHIN) for b, a in moved.values()):
        return ""  # the reading found more wear than predicted: the rise explains itself
    names = " and ".join(moved)
    return (f" Why the chance rose: until now the forecast allowed that {names}, still working, had aged slower "
            f"than predicted; the reading shows the predicted wear, so that allowance is gone.")
