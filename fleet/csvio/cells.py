"""Reading and writing single cells: IEC 60062 values, numbers with units,
dates, times, choices."""

import datetime as dt

from django.utils import timezone

from .. import values as V
from ..models import EARLIEST_DATE, LATEST_DATE, RATED_TEMP_MAX_C, RATED_TEMP_MIN_C

_YEARS = f"{EARLIEST_DATE.year}-{LATEST_DATE.year}"


def _parse_choice(choices, text):
    wanted = text.strip().lower()
    for value, label in choices.choices:
        if wanted in (value.lower(), str(label).lower()):
            return value
    raise ValueError(f"'{text}' is not one of: {', '.join(v for v, _ in choices.choices)}.")


# Spreadsheets run a cell that begins with one of these as a formula (OWASP,
# "CSV Injection"): an exported name or note could then run a command on the
# manager's machine.  Export puts a single quote before such a cell (the
# spreadsheet shows it as text) and import takes it off again; a cell that
# already begins with quotes before such a character gets one more, so export
# then import gives back exactly what was stored.
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
FORMULA_GUARD = "'"


def guard_formula(text: str) -> str:
    """``text`` as a spreadsheet must not run it: a leading ``'`` before a
    formula start (``=cmd()`` -> ``'=cmd()``)."""
    if text and text.lstrip(FORMULA_GUARD).startswith(FORMULA_STARTS):
        return FORMULA_GUARD + text
    return text


def unguard_formula(text: str) -> str:
    """The inverse of :func:`guard_formula`."""
    if text.startswith(FORMULA_GUARD) and text.lstrip(FORMULA_GUARD).startswith(FORMULA_STARTS):
        return text[len(FORMULA_GUARD):]
    return text


def _in_range(day, text):
    if not EARLIEST_DATE <= day <= LATEST_DATE:
        raise ValueError(f"'{text}' is outside the years {_YEARS} the register keeps.")


def _parse_datetime(text):
    s = text.strip()
    if len(s) < 16 or len(s) > 40 or s[10] not in "Tt ":
        raise ValueError(f"'{V.excerpt(text)}' is not a date and time: write ISO 8601, e.g. 2024-07-15T08:00:00Z "
                         f"or 2024-07-15 09:00 (local time).")
    try:
        value = dt.datetime.fromisoformat(s)
    except ValueError:
        raise ValueError(f"'{text}' is not a date and time: write ISO 8601, e.g. 2024-07-15T08:00:00Z "
                         f"or 2024-07-15 09:00 (local time).") from None
    # Checked before any time-zone arithmetic, which overflows at the ends of the calendar.
    _in_range(value.date(), text)
    if value.tzinfo is None:
        tz = timezone.get_current_timezone()
        first, second = value.replace(tzinfo=tz, fold=0), value.replace(tzinfo=tz, fold=1)
        if first.utcoffset() != second.utcoffset():
            raise ValueError(f"'{text}' falls in a clock change in {tz}: add the UTC offset, "
                             f"e.g. {s}+01:00 or {s}Z.")
        value = first
    return value.astimezone(dt.timezone.utc)


def _parse_date(text):
    try:
        day = dt.date.fromisoformat(text.strip()) if len(text) <= 40 else None
    except ValueError:
        day = None
    if day is None:
        raise ValueError(f"'{V.excerpt(text)}' is not a date: write YYYY-MM-DD, e.g. 2019-03-01.")
    _in_range(day, text)
    return day


def _parse_monthly(text):
    parts = text.split(";")
    if len(parts) != 12:
        raise ValueError(f"give twelve monthly means in degC separated by ';', January first "
                         f"(found {len(parts)}).")
    temps = []
    for month, part in enumerate(parts, start=1):
        try:
            temps.append(V.parse_temperature_c(part))
        except ValueError as exc:
            raise ValueError(f"month {month}: {exc}") from None
    return temps


def _parse_rated_temp(text):
    value = V.parse_temperature_c(text)
    if not RATED_TEMP_MIN_C <= value <= RATED_TEMP_MAX_C:
        raise ValueError(f"Rated temperature must lie in {RATED_TEMP_MIN_C:g}..{RATED_TEMP_MAX_C:g} degC "
                         f"(got '{text}').")
    return value


def _parse_cell(column, label, text):
    text = unguard_formula(text)
    t = column.type
    if t == "key":
        return text.strip()
    if t == "notes":
        return text
    if t == "choice":
        return _parse_choice(column.choices, text)
    if t == "temp":
        return V.parse_temperature_c(text)
    if t == "rated_temp":
        return _parse_rated_temp(text)
    if t == "number":
        return V.parse_number(text, label, column.unit)
    if t == "whole":
        return V.parse_whole_number(text, label)
    if t == "bool":
        return V.parse_bool(text, label)
    if t == "date":
        return _parse_date(text)
    if t == "datetime":
        return _parse_datetime(text)
    if t == "capacitance":
        return V.parse_capacitance_uf(text)
    if t == "monthly":
        return _parse_monthly(text)
    raise AssertionError(f"unknown column type {t}")


def _format_float(value):
    """Shortest text that reads back as the same float (whole numbers without '.0')."""
    if value is None:
        return ""
    value = float(value)
    if value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    return repr(value)


def _format_cell(column, value):
    if value is None:
        return ""
    t = column.type
    if t in ("temp", "rated_temp", "number"):
        return _format_float(value)
    if t == "whole":
        return str(int(value))
    if t == "bool":
        return "yes" if value else "no"
    if t == "date":
        return value.isoformat()
    if t == "datetime":
        return value.astimezone(dt.timezone.utc).isoformat()
    if t == "capacitance":
        return V.format_rkm(value, milli=False)  # 2200u, not 2m2: as the cans are marked
    if t == "monthly":
        return guard_formula(";".join(_format_float(v) for v in value))
    return guard_formula(str(value))
