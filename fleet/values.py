"""Values written by people: capacitances, temperatures, plain quantities.

Parsers take text as a technician or a spreadsheet writes it and return a
float in the project's stored unit (see ``fleet/models.py``): capacitance in
microfarads (uF), temperature in degrees Celsius, everything else in the unit
the caller names.  Each raises ``ValueError`` with a message meant for the user
(it says what was written and how to write it instead).

Capacitance
-----------
Two notations are accepted:

* the IEC 60062 letter-and-digit code (also called the RKM code): the letter
  stands where the decimal point would be and gives the multiplier:
  ``p`` 1e-12 F, ``n`` 1e-9 F, ``u`` (or the Greek mu) 1e-6 F, ``m`` 1e-3 F,
  ``F`` 1 F.  So ``4u7`` is 4.7 uF, ``n47`` is 470 pF, ``2p2`` is 2.2 pF,
  ``4n7`` is 4.7 nF, ``1m5`` is 1.5 mF, ``2F2`` is 2.2 F, and ``47u`` or
  ``100n`` (letter last) are 47 uF and 100 nF.
* engineering notation: a number, an optional prefix and an optional ``F``:
  ``470uF``, ``470 µF``, ``0.47 uF``, ``100nF``, ``2200 pF``, ``1 mF``,
  ``0.001F``, ``4.7e-6 F``.

Notes on the letters:

* ``m`` is **milli**, as in IEC 60062 and SI: ``1m5`` and ``1.5 mF`` are
  1500 uF.  Old parts and schematics write ``MF``, ``MFD`` or ``mfd`` for
  *micro*farads; those spellings (and a capital ``M`` alone, which is mega in
  SI) are refused as ambiguous rather than guessed.
* ``p``, ``n`` and ``u`` may be written in capitals (``4N7``, ``470UF``);
  ``m`` and ``F`` may not (``M`` means mega, ``f`` femto).
* A number with no letter at all has no unit and is refused, unless the caller
  says which unit bare numbers are in (``bare_unit="uF"``, for a form field or
  column labelled in microfarads).

Arithmetic is decimal, so ``n47`` gives exactly the float ``0.00047`` and
``format_rkm`` / ``format_capacitance`` read back to the same float.
"""

from __future__ import annotations

import math
import re
from decimal import ROUND_HALF_EVEN, Context, Decimal, InvalidOperation

__all__ = [
    "parse_capacitance_uf",
    "parse_temperature_c",
    "parse_number",
    "parse_whole_number",
    "parse_bool",
    "excerpt",
    "format_capacitance",
    "format_rkm",
]

# Multiplier of each letter, in microfarads (the stored unit).
_CAP_SCALE_UF = {
    "p": Decimal("1e-6"),
    "n": Decimal("1e-3"),
    "u": Decimal(1),
    "m": Decimal("1e3"),
    "F": Decimal("1e6"),
}
_BARE_UNITS = {"pF": "p", "nF": "n", "uF": "u", "mF": "m", "F": "F"}
_MICRO_SIGNS = ("\u00b5", "\u03bc")  # MICRO SIGN, GREEK SMALL LETTER MU
_CAP_HINT = "write 47u, 4u7, 470n or 47 uF"

_NUMBER = r"(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"

#: Longest text read as a number, and the largest power of ten it may reach
#: (either way).  Guards, not physics: a float reaches about 1e308, and an
#: exponent such as 1e999999999 would otherwise be expanded digit by digit.
MAX_NUMBER_CHARS = 100
MAX_DECIMAL_EXPONENT = 400
MAX_WHOLE_DIGITS = 15
_ENG_RE = re.compile(rf"(?P<sign>[+-]?)(?P<num>{_NUMBER})\s*(?P<suffix>[A-Za-z]*)")
_RKM_CAP_RE = re.compile(r"(?P<sign>[+-]?)(?P<int>\d*)(?P<letter>[pPnNuUmF])(?P<frac>\d+)")


def _too_long(raw) -> bool:
    return len(raw) > MAX_NUMBER_CHARS


def _bounded(number: Decimal, message: str) -> Decimal:
    """``number`` unchanged, or ``ValueError(message)`` when its power of ten
    is beyond any float (so no later step expands or overflows it)."""
    if number.is_finite() and number and abs(number.adjusted()) > MAX_DECIMAL_EXPONENT:
        raise ValueError(message)
    return number


def excerpt(raw) -> str:
    """What was written, shortened for a message."""
    raw = str(raw)
    return raw if len(raw) <= 40 else raw[:37] + "..."


def _normalise_micro(text: str) -> str:
    for sign in _MICRO_SIGNS:
        text = text.replace(sign, "u")
    return text


def _finite_positive_uf(value: Decimal, text) -> float:
    if value <= 0:
        raise ValueError(f"Capacitance must be above zero (got '{text}').")
    result = float(value)
    if not math.isfinite(result) or result == 0.0:
        raise ValueError(f"'{text}' is out of range for a capacitance.")
    return result


def parse_capacitance_uf(text, *, bare_unit: str | None = None) -> float:
    """Read a capacitance written by a person and return it in microfarads [uF].

    Parameters
    ----------
    text : str
        An IEC 60062 letter-and-digit code (``4u7``, ``n47``, ``1m5``, ``2F2``)
        or engineering notation (``470uF``, ``0.47 uF``, ``100n``, ``2200 pF``).
    bare_unit : {"pF", "nF", "uF", "mF", "F"}, optional
        The unit of a number written without one.  Without it a bare number is
        refused.

    Returns
    -------
    float
        Capacitance [uF], above zero.

    Raises
    ------
    ValueError
        For anything else; the message says how to write it.

    Examples
    --------
    >>> parse_capacitance_uf("4u7")
    4.7
    >>> parse_capacitance_uf("n47")
    0.00047
    >>> parse_capacitance_uf("47", bare_unit="uF")
    47.0
    """
    if bare_unit is not None and bare_unit not in _BARE_UNITS:
        raise ValueError(f"bare_unit must be one of {', '.join(_BARE_UNITS)}, not {bare_unit!r}.")
    if isinstance(text, bool):
        raise ValueError(f"'{text}' is not a capacitance: {_CAP_HINT}.")
    if isinstance(text, (int, float)):
        text = repr(text)
    raw = str(text)
    s = _normalise_micro(raw.strip())
    if not s:
        raise ValueError(f"No capacitance given: {_CAP_HINT}.")
    if _too_long(s):
        raise ValueError(f"'{excerpt(raw)}' is too long to be a capacitance: {_CAP_HINT}.")

    if re.fullmatch(r"[+-]?\d*M\d+", s):
        raise ValueError(
            f"'{raw}' is ambiguous: M is mega in SI, and on old parts MF means microfarads; "
            f"write 4u7 for microfarads or 4m7 for millifarads."
        )
    match = _RKM_CAP_RE.fullmatch(s)
    if match:
        digits = f"{match['int'] or '0'}.{match['frac']}"
        letter = match["letter"] if match["letter"] in "mF" else match["letter"].lower()
        value = Decimal(digits) * _CAP_SCALE_UF[letter]
        if match["sign"] == "-":
            value = -value
        return _finite_positive_uf(value, raw)

    match = _ENG_RE.fullmatch(s)
    if not match:
        raise ValueError(f"'{raw}' is not a capacitance: {_CAP_HINT}.")
    number = _bounded(Decimal(match["num"]), f"'{raw}' is out of range for a capacitance.")
    if match["sign"] == "-":
        number = -number
    suffix = match["suffix"]
    if suffix == "":
        if bare_unit is None:
            raise ValueError(f"'{raw}' has no unit: {_CAP_HINT}.")
        letter = _BARE_UNITS[bare_unit]
    elif suffix in ("F", "mF", "m"):
        letter = "F" if suffix == "F" else "m"
    elif suffix[0] == "M" or suffix.lower() in ("mf", "mfd"):
        raise ValueError(
            f"'{raw}' is ambiguous: on old parts MF and MFD mean microfarads, but in SI M is mega and "
            f"mF millifarads; write 47u or 47 uF for microfarads, 1m5 or 1.5 mF for millifarads."
        )
    elif suffix[0].lower() in "pnu" and suffix[1:] in ("", "F", "f"):
        letter = suffix[0].lower()
    else:
        raise ValueError(f"'{raw}' is not a capacitance: {_CAP_HINT}.")
    return _finite_positive_uf(number * _CAP_SCALE_UF[letter], raw)


def _exact_decimal(uf) -> Decimal:
    """The shortest decimal that reads back as the float ``uf`` (its repr)."""
    if isinstance(uf, bool):
        raise ValueError(f"{uf!r} is not a capacitance.")
    try:
        value = float(uf)
    except (TypeError, ValueError):
        raise ValueError(f"{uf!r} is not a capacitance.") from None
    if not math.isfinite(value) or value <= 0:
        raise ValueError(f"Capacitance must be above zero and finite (got {uf!r}).")
    return Decimal(repr(value))


def _plain(d: Decimal) -> str:
    """Decimal without exponent or trailing zeros: 4.70 -> '4.7', 4.7E+2 -> '470'."""
    text = format(d.normalize(), "f")
    return text


def format_rkm(uf, *, milli: bool = True) -> str:
    """The IEC 60062 letter-and-digit code of a capacitance given in uF.

    The letter is chosen so that one to three digits stand before it:
    ``p`` below 100 pF, then ``n`` (``n47`` for 470 pF, as in the standard's
    example, and ``4n7``, ``100n`` up to 1 uF), ``u`` up to 1000 uF, ``m`` up to
    1 F, ``F`` above.  With ``milli=False`` the letter ``m`` is not used and
    values from 1000 uF to 1 F keep ``u`` (``2200u`` rather than ``2m2``), as
    electrolytic capacitors are marked; the CSV export writes that form.  All
    the digits of the float are kept, so ``parse_capacitance_uf(format_rkm(x))
    == x`` exactly.

    Examples
    --------
    >>> format_rkm(4.7), format_rkm(0.00047), format_rkm(2.2e-6), format_rkm(1500)
    ('4u7', 'n47', '2p2', '1m5')
    """
    d = _exact_decimal(uf)
    if d < Decimal("1e-4"):
        letter, shift = "p", 6
    elif d < 1:  # from 100 pF (n1, n47) to 1 uF (100n, 470n)
        letter, shift = "n", 3
    elif d < Decimal("1e3") or (not milli and d < Decimal("1e6")):
        letter, shift = "u", 0
    elif d < Decimal("1e6"):
        letter, shift = "m", -3
    else:
        letter, shift = "F", -6
    text = _plain(d.scaleb(shift))
    whole, _, frac = text.partition(".")
    if whole == "0":
        whole = ""
    return f"{whole}{letter}{frac}"


def format_capacitance(uf, *, significant: int = 6) -> str:
    """Human text for a capacitance given in uF: ``4.7 uF``, ``470 nF``, ``2.2 pF``.

    Units follow common practice for the parts rather than strict engineering
    steps: pF below 1 nF, nF below 1 uF, uF from 1 uF up to (not including)
    1 F (``2200 uF``, not ``2.2 mF``), F from 1 F.  The value is rounded to
    ``significant`` figures (6 by default), so any value with that many figures
    or fewer reads back exactly with ``parse_capacitance_uf``.
    """
    d = _exact_decimal(uf)
    d = Context(prec=significant, rounding=ROUND_HALF_EVEN).plus(d)
    if d < Decimal("1e-3"):
        unit, shift = "pF", 6
    elif d < 1:
        unit, shift = "nF", 3
    elif d < Decimal("1e6"):
        unit, shift = "uF", 0
    else:
        unit, shift = "F", -6
    return f"{_plain(d.scaleb(shift))} {unit}"


# --- temperature ----------------------------------------------------------------

_TEMP_RE = re.compile(rf"(?P<num>[+-]?{_NUMBER})\s*(?P<unit>.*)")
_CELSIUS = {"", "c", "°c", "° c", "ºc", "º c", "degc", "deg c", "deg. c", "\u2103"}
_OTHER_SCALES = {
    "k": "kelvin", "°k": "kelvin", "kelvin": "kelvin",
    "f": "Fahrenheit", "°f": "Fahrenheit", "° f": "Fahrenheit", "ºf": "Fahrenheit", "degf": "Fahrenheit",
    "deg f": "Fahrenheit", "\u2109": "Fahrenheit",
}
_TEMP_HINT = "write 85, 85C, 85 °C or 85 degC"


def parse_temperature_c(text) -> float:
    """A temperature in degrees Celsius [degC] from ``85``, ``85C``, ``85 °C``, ``85 degC``.

    Only Celsius is accepted: kelvin and Fahrenheit are refused with a message
    rather than converted, so a mistyped unit never becomes a plausible number.
    """
    if isinstance(text, bool):
        raise ValueError(f"'{text}' is not a temperature: {_TEMP_HINT}.")
    if isinstance(text, (int, float)):
        value = float(text)
        raw = repr(text)
    else:
        raw = str(text)
        s = raw.strip()
        if not s:
            raise ValueError(f"No temperature given: {_TEMP_HINT}.")
        if _too_long(s):
            raise ValueError(f"'{excerpt(raw)}' is too long to be a temperature: {_TEMP_HINT}.")
        match = _TEMP_RE.fullmatch(s)
        if not match:
            raise ValueError(f"'{raw}' is not a temperature: {_TEMP_HINT}.")
        unit = match["unit"].strip().lower()
        if unit in _OTHER_SCALES:
            raise ValueError(
                f"'{raw}' is in {_OTHER_SCALES[unit]}: temperatures are in degrees Celsius ({_TEMP_HINT})."
            )
        if unit not in _CELSIUS:
            raise ValueError(f"'{raw}' is not a temperature: {_TEMP_HINT}.")
        value = float(_bounded(Decimal(match["num"]), f"'{raw}' is out of range for a temperature."))
    if not math.isfinite(value):
        raise ValueError(f"'{raw}' is not a temperature: {_TEMP_HINT}.")
    if value < -273.15:
        raise ValueError(f"'{raw}' is below absolute zero (-273.15 degC).")
    return value


# --- plain quantities -----------------------------------------------------------

# Accepted spellings of each unit symbol (compared without regard to case).
UNIT_SPELLINGS = {
    "V": ("v",),
    "A": ("a",),
    "Hz": ("hz",),
    "ohm": ("ohm", "ohms", "\u03a9", "\u2126"),
    "h": ("h", "hr", "hrs", "hour", "hours"),
    "mm": ("mm",),
    "K": ("k",),
}
# Units that take SI prefixes by default.
PREFIXED_UNITS = ("V", "A", "Hz", "ohm")
_PREFIXES = {"k": Decimal("1e3"), "K": Decimal("1e3"), "M": Decimal("1e6"), "m": Decimal("1e-3"), "u": Decimal("1e-6")}
_QTY_RE = re.compile(rf"(?P<sign>[+-]?)(?P<num>{_NUMBER})\s*(?P<suffix>\S*(?:\s\S+)?)")
_RKM_QTY_RE = re.compile(r"(?P<sign>[+-]?)(?P<int>\d*)(?P<letter>[kKMmuR])(?P<frac>\d+)")


def _unit_matches(text: str, unit: str | None) -> bool:
    if unit is None:
        return False
    spellings = UNIT_SPELLINGS.get(unit, (unit,))
    return text.lower() in {s.lower() for s in spellings}


def parse_number(text, field: str, unit: str | None = None, allow_negative: bool = False,
                 *, si_prefixes: bool | None = None) -> float:
    """A plain quantity: ``12``, ``-3.5``, ``1e3``, ``12 V``, ``2.2k``, ``500 mA``.

    Parameters
    ----------
    text : str or number
        What was written.
    field : str
        Name of the quantity, used in messages (``"rated voltage"``).
    unit : str, optional
        The unit the value is in: ``"V"``, ``"A"``, ``"Hz"``, ``"ohm"``, ``"h"``,
        ``"mm"``, ``"K"`` (or any other symbol, matched literally).  The symbol
        may follow the number (case does not matter; ``ohm``, ``ohms`` and
        the ohm sign are all accepted); a different unit is refused.
    allow_negative : bool
        Negative values are refused unless this is true.
    si_prefixes : bool, optional
        Accept the multipliers ``k`` (or ``K``) 1e3, ``M`` 1e6, ``m`` 1e-3 and
        ``u`` (or mu) 1e-6 before the unit, or in place of the decimal point
        as in ``4k7``; for ohms also ``R`` as the decimal point (``4R7``,
        ``R47``).  Defaults to true for V, A, Hz and ohm and false otherwise
        (so ``10mm`` or ``5 h`` are never read as prefixes).

    Returns
    -------
    float
        The value in ``unit``.
    """
    if si_prefixes is None:
        si_prefixes = unit in PREFIXED_UNITS
    hint = "write a number such as 12 or 0.5"
    if unit:
        hint += f", optionally followed by {unit}"
    if si_prefixes:
        hint += ", with k, M, m or u for multiples (2.2k, 4k7, 500m)"
    if isinstance(text, bool):
        raise ValueError(f"{field}: '{text}' is not a number; {hint}.")
    if isinstance(text, (int, float)):
        raw = repr(text)
        value = Decimal(repr(float(text))) if math.isfinite(float(text)) else None
        if value is None:
            raise ValueError(f"{field}: '{raw}' is not a number; {hint}.")
    else:
        raw = str(text)
        s = _normalise_micro(raw.strip())
        if not s:
            raise ValueError(f"{field}: no value given; {hint}.")
        if _too_long(s):
            raise ValueError(f"{field}: '{excerpt(raw)}' is too long to be a number; {hint}.")
        value = None
        rkm = _RKM_QTY_RE.fullmatch(s) if si_prefixes else None
        if rkm and (rkm["letter"] != "R" or unit == "ohm"):
            mult = Decimal(1) if rkm["letter"] == "R" else _PREFIXES[rkm["letter"]]
            value = Decimal(f"{rkm['int'] or '0'}.{rkm['frac']}") * mult
            if rkm["sign"] == "-":
                value = -value
        else:
            match = _QTY_RE.fullmatch(s)
            if not match:
                raise ValueError(f"{field}: '{raw}' is not a number; {hint}.")
            value = _bounded(Decimal(match["num"]), f"{field}: '{raw}' is out of range.")
            if match["sign"] == "-":
                value = -value
            suffix = match["suffix"].strip()
            if suffix and not _unit_matches(suffix, unit):
                rest = suffix[1:].strip()
                if si_prefixes and suffix[0] in _PREFIXES and (rest == "" or _unit_matches(rest, unit)):
                    value *= _PREFIXES[suffix[0]]
                elif unit is None:
                    raise ValueError(f"{field}: '{raw}' is not a number; {hint}.")
                else:
                    raise ValueError(f"{field}: '{raw}' is not in {unit}; {hint}.")
    result = float(value)
    if not math.isfinite(result):
        raise ValueError(f"{field}: '{raw}' is out of range.")
    if result < 0 and not allow_negative:
        raise ValueError(f"{field} cannot be negative (got '{raw}').")
    return result


def parse_whole_number(text, field: str, *, allow_negative: bool = False) -> int:
    """A whole number such as a year: ``1978`` (``1978.0`` from a spreadsheet is accepted).

    Numbers beyond 1e15 are refused as out of range before they are expanded
    (``1e999999999`` would otherwise be written out digit by digit).
    """
    raw = str(text).strip()
    if _too_long(raw):
        raise ValueError(f"{field}: '{excerpt(raw)}' is too long to be a whole number.")
    try:
        value = Decimal(raw)
    except InvalidOperation:
        value = None
    if value is None or not value.is_finite():
        raise ValueError(f"{field}: '{raw}' is not a whole number.")
    if value and value.adjusted() > MAX_WHOLE_DIGITS:
        raise ValueError(f"{field}: '{raw}' is out of range.")
    if value != value.to_integral_value():
        raise ValueError(f"{field}: '{raw}' is not a whole number.")
    if value < 0 and not allow_negative:
        raise ValueError(f"{field} cannot be negative (got '{raw}').")
    return int(value)


_TRUE = ("yes", "true", "1")
_FALSE = ("no", "false", "0")


def parse_bool(text, field: str) -> bool:
    """``yes``/``no``, ``true``/``false`` or ``1``/``0`` (case does not matter)."""
    if isinstance(text, bool):
        return text
    s = str(text).strip().lower()
    if s in _TRUE:
        return True
    if s in _FALSE:
        return False
    raise ValueError(f"{field}: '{text}' is not yes or no; write yes/no, true/false or 1/0.")
