"""Numbers, values and words as the pages show them."""

import math
import re

from fleet import values
from scheduling.days import day_to_date
from scheduling.models import UnitForecast
from scheduling.services import stored_positions
from scheduling.thresholds import DAMAGE_THRESHOLD_CAP as DRIFT_MODEL_MAX_DAMAGE


def _plain_number(value, significant=3):
    """A number to ``significant`` figures without an exponent or trailing zeros."""
    if value == 0:
        return "0"
    digits = significant - 1 - math.floor(math.log10(abs(value)))
    rounded = round(value, digits)
    text = f"{rounded:.{max(digits, 0)}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return text


def format_capacitance(uf):
    """Capacitance stored in uF, written the way parts are marked:
    4.7 -> "4.7 uF", 0.47 -> "470 nF", 4.7e-5 -> "47 pF", 2200 -> "2200 uF"."""
    if uf is None:
        return ""
    try:
        return values.format_capacitance(uf)
    except ValueError:
        return f"{uf:g} uF"


def format_number(value, unit=""):
    if value is None:
        return ""
    text = f"{value:,.1f}".rstrip("0").rstrip(".") if abs(value) < 1e6 else f"{value:,.0f}"
    return f"{text} {unit}".strip()


def hazard_words(gear_model):
    """What inside the unit can hurt, in words."""
    words = []
    if gear_model.hazard_mains:
        volts = f" ({gear_model.mains_voltage_v:g} V a.c.)" if gear_model.mains_voltage_v else ""
        words.append(f"Mains voltage inside{volts}")
    if gear_model.hazard_tube_hv:
        words.append("Tube high voltage: lethal even when switched off")
    if gear_model.hazard_smps:
        words.append("Switch-mode supply: primary side at rectified mains voltage")
    if not words:
        words.append("No mains inside (external low-voltage supply); charged capacitors can still hurt")
    return words


def designator_key(designator):
    """C2 before C10: letters, then the number, then any suffix."""
    match = re.match(r"([A-Za-z]*)(\d*)(.*)", designator)
    prefix, number, rest = match.groups()
    return (prefix.upper(), int(number) if number else -1, rest)


def _predicted_by_capacitor(forecast):
    """{capacitor id: predicted figures} from a stored forecast (empty without one)."""
    if forecast is None:
        return {}
    out = {}
    for rec in stored_positions(forecast):
        reach = float(rec["reaches_day"])
        out[int(rec["capacitor_id"])] = {
            "damage": float(rec["damage"]),
            "threshold": float(rec["threshold"]),
            "esr_ohm": float(rec["esr_ohm"]),
            "capacitance_uf": float(rec["capacitance_f"]) * 1e6,
            "reaches_on": None if reach != reach else day_to_date(reach),
        }
    return out


def capacitor_rows(capacitors, forecast=None):
    capacitors = sorted(capacitors, key=lambda c: designator_key(c.position.designator))
    predicted = _predicted_by_capacitor(forecast)
    return [
        {
            "predicted": _predicted_row(predicted.get(c.pk), forecast),
            "designator": c.position.designator,
            "role": c.position.get_role_display(),
            "capacitance": format_capacitance(c.capacitance_uf),
            "voltage": f"{c.rated_voltage_v:g} V",
            "temperature": f"{c.rated_temp_c:g} °C",
            "endurance": f"{format_number(c.rated_life_h)} h",
            "installed_on": c.installed_on,
            "original": c.is_original,
        }
        for c in capacitors
    ]


def _predicted_row(p, forecast):
    if p is None:
        return None
    share = p["damage"] / p["threshold"] if p["threshold"] > 0 else None
    return {
        "damage": f"{p['damage']:.2f}",
        "threshold": f"{p['threshold']:.2f}",
        "used_percent": None if share is None else f"{min(share, 9.99) * 100:.0f}%",
        "over": share is None or share >= 1,
        "esr": f"{p['esr_ohm']:.3g} Ω",
        "capacitance": format_capacitance(float(f"{p['capacitance_uf']:.3g}")),
        # the drift laws are calibrated at damage 1; far past it the figures mean little
        "beyond": p["damage"] > DRIFT_MODEL_MAX_DAMAGE,
        "reaches_on": p["reaches_on"],
        "past": p["reaches_on"] is not None and forecast is not None
                and p["reaches_on"] <= forecast.computed_at.date(),
    }


def forecast_display(forecast):
    if forecast is None:
        return None
    return {
        "status": forecast.status,
        "label": forecast.get_status_display(),
        "due_date": forecast.due_date,
        "risk_percent": _plain_number(forecast.risk * 100, 2) if forecast.risk is not None else "",
        "horizon_days": forecast.horizon_days,
        "reasons": list(forecast.reasons or []),
        "computed_at": forecast.computed_at,
        "storage_reform": forecast.storage_reform,
    }


def unit_forecast(unit):
    try:
        return unit.forecast
    except UnitForecast.DoesNotExist:
        return None
