"""Parsing and formatting of values written by people (fleet/values.py).

Outside sources named beside the checks:
- IEC 60062 letter-and-digit (RKM) code: the examples of the public
  encyclopedia article on the RKM code, as recorded in
  /work/shared/docs/references.md section 8 [V] ("the letter replaces the
  decimal point"; 4u7, n47, 2p2, 4n7, 1m5, 2F2).
- SI prefixes (pico 1e-12 ... milli 1e-3, kilo 1e3, mega 1e6): the values in
  ``scipy.constants`` (which follow the BIPM SI Brochure).
- Absolute zero -273.15 degC: ``scipy.constants.zero_Celsius`` (273.15 K).
"""

import math
from decimal import Decimal

import pytest
import scipy.constants as si
from hypothesis import given
from hypothesis import strategies as st

from fleet.values import (
    format_capacitance,
    format_rkm,
    parse_bool,
    parse_capacitance_uf,
    parse_number,
    parse_temperature_c,
    parse_whole_number,
)

UF = si.micro  # one microfarad in farads, from scipy.constants


def farads_to_uf(farads):
    return farads / UF


# --- IEC 60062 (RKM) codes ---------------------------------------------------------

# (code, value in farads as the IEC 60062 examples state it, using scipy.constants prefixes)
IEC_60062_EXAMPLES = [
    ("4u7", 4.7 * si.micro),
    ("n47", 470 * si.pico),
    ("2p2", 2.2 * si.pico),
    ("4n7", 4.7 * si.nano),
    ("1m5", 1.5 * si.milli),
    ("2F2", 2.2),
]


@pytest.mark.parametrize("code, farads", IEC_60062_EXAMPLES)
def test_iec_60062_examples_parse_to_the_published_values(code, farads):
    # Source: IEC 60062 RKM code, public encyclopedia article (references.md section 8 [V]);
    # prefixes from scipy.constants.  rel 1e-12 only absorbs the float product in the oracle.
    assert parse_capacitance_uf(code) == pytest.approx(farads_to_uf(farads), rel=1e-12)


@pytest.mark.parametrize("code, uf", [("4u7", 4.7), ("n47", 0.00047), ("2p2", 2.2e-6), ("4n7", 0.0047),
                                      ("1m5", 1500.0), ("2F2", 2.2e6)])
def test_iec_60062_examples_parse_exactly_to_the_nearest_float(code, uf):
    # Source: IEC 60062 examples (references.md section 8); decimal arithmetic gives the float nearest
    # the stated value, with no rounding error from multiplying by a prefix.
    assert parse_capacitance_uf(code) == uf


@pytest.mark.parametrize("code, uf", [("4u7", 4.7), ("n47", 0.00047), ("2p2", 2.2e-6), ("4n7", 0.0047),
                                      ("1m5", 1500.0), ("2F2", 2.2e6)])
def test_iec_60062_examples_are_what_format_rkm_writes(code, uf):
    # Source: IEC 60062 examples (references.md section 8): the published codes are the ones we write.
    assert format_rkm(uf) == code


def test_micro_may_be_written_as_u_or_either_mu_character():
    # Source: IEC 60062 uses the Greek mu; 'u' is the common ASCII substitute (references.md section 8 [CP]).
    assert parse_capacitance_uf("4u7") == parse_capacitance_uf("4\u00b57") == parse_capacitance_uf("4\u03bc7") == 4.7


@pytest.mark.parametrize("code, uf", [("47u", 47.0), ("100n", 0.1), ("u1", 0.1), ("u47", 0.47), ("2F", 2e6),
                                      ("4N7", 0.0047), ("10P", 10e-6), ("4U7", 4.7)])
def test_letter_first_last_and_capital_forms(code, uf):
    # Source: IEC 60062 (references.md section 8): the letter stands for the decimal point, so
    # a letter last means a whole number and a letter first a fraction.
    assert parse_capacitance_uf(code) == uf


def test_m_is_milli_not_micro():
    # Source: IEC 60062 example 1m5 = 1.5 mF (references.md section 8); milli = 1e-3 (scipy.constants).
    assert parse_capacitance_uf("1m5") == pytest.approx(farads_to_uf(1.5 * si.milli))
    assert parse_capacitance_uf("10m") == pytest.approx(farads_to_uf(10 * si.milli))
    assert parse_capacitance_uf("1 mF") == 1000.0


# --- engineering notation ------------------------------------------------------------

@pytest.mark.parametrize("text, farads", [
    ("470uF", 470 * si.micro),
    ("470 \u00b5F", 470 * si.micro),
    ("0.47 uF", 0.47 * si.micro),
    ("100n", 100 * si.nano),
    ("100nF", 100 * si.nano),
    ("2200 pF", 2200 * si.pico),
    ("1 mF", 1 * si.milli),
    ("0.001F", 0.001),
    ("4.7e-6 F", 4.7e-6),
    ("47 pf", 47 * si.pico),
    (" 22uF ", 22 * si.micro),
    ("1e3 uF", 1000 * si.micro),
])
def test_engineering_notation(text, farads):
    # Source: SI prefixes from scipy.constants (BIPM SI Brochure).
    assert parse_capacitance_uf(text) == pytest.approx(farads_to_uf(farads), rel=1e-12)


def test_bare_number_needs_the_caller_to_name_the_unit():
    assert parse_capacitance_uf("47", bare_unit="uF") == 47.0
    assert parse_capacitance_uf("4.7", bare_unit="uF") == 4.7
    assert parse_capacitance_uf("100", bare_unit="nF") == 0.1
    assert parse_capacitance_uf(47.0, bare_unit="uF") == 47.0
    with pytest.raises(ValueError, match=r"^'47' has no unit: write 47u, 4u7, 470n or 47 uF\.$"):
        parse_capacitance_uf("47")
    with pytest.raises(ValueError, match="bare_unit must be one of"):
        parse_capacitance_uf("47", bare_unit="kF")


@pytest.mark.parametrize("text, message", [
    ("47x", r"^'47x' is not a capacitance: write 47u, 4u7, 470n or 47 uF\.$"),
    ("uF", r"^'uF' is not a capacitance: write 47u, 4u7, 470n or 47 uF\.$"),
    ("4u7F", r"is not a capacitance"),
    ("4,7u", r"is not a capacitance"),
    ("47 kF", r"is not a capacitance"),
    ("2f2", r"is not a capacitance"),
    ("", r"^No capacitance given: write 47u, 4u7, 470n or 47 uF\.$"),
    ("   ", r"^No capacitance given"),
    ("0u", r"^Capacitance must be above zero \(got '0u'\)\.$"),
    ("0 uF", r"must be above zero"),
    ("n", r"is not a capacitance"),
    ("-4u7", r"must be above zero"),
    ("-47 uF", r"must be above zero"),
    ("10 MFD", r"^'10 MFD' is ambiguous: on old parts MF and MFD mean microfarads"),
    ("10mfd", r"is ambiguous"),
    ("10 mf", r"is ambiguous"),
    ("4M7", r"^'4M7' is ambiguous: M is mega in SI"),
    ("1e999 F", r"out of range"),
])
def test_bad_capacitances_say_how_to_write_them(text, message):
    with pytest.raises(ValueError, match=message):
        parse_capacitance_uf(text)


# --- formatting -------------------------------------------------------------------------

@pytest.mark.parametrize("uf, text", [
    (4.7, "4.7 uF"), (0.00047, "470 pF"), (2.2e-6, "2.2 pF"), (0.0047, "4.7 nF"), (0.1, "100 nF"),
    (2200.0, "2200 uF"), (2.2e6, "2.2 F"), (47.0, "47 uF"), (0.30000000000000004, "300 nF"),
])
def test_format_capacitance(uf, text):
    assert format_capacitance(uf) == text


@pytest.mark.parametrize("uf, code", [
    (47.0, "47u"), (0.1, "100n"), (100.0, "100u"), (2200.0, "2m2"), (1e-4, "n1"), (47e-6, "47p"),
    (0.5e-6, "p5"), (1.0, "1u"), (4.75, "4u75"),
])
def test_format_rkm_places_the_letter_at_the_decimal_point(uf, code):
    # Source: IEC 60062 rule (references.md section 8): the letter replaces the decimal point.
    assert format_rkm(uf) == code


def test_format_rkm_without_milli_keeps_microfarads_up_to_one_farad():
    # Source: IEC 60062 rule (references.md section 8); 2200u and 2m2 are both valid codes for 2200 uF.
    assert [format_rkm(uf, milli=False) for uf in (2200.0, 47000.0, 999999.0, 1e6, 4.7, 0.1)] == [
        "2200u", "47000u", "999999u", "1F", "4u7", "100n"]
    assert parse_capacitance_uf("2200u") == parse_capacitance_uf("2m2") == 2200.0


@given(st.floats(min_value=1e-12, max_value=1e12, allow_nan=False, allow_infinity=False), st.booleans())
def test_format_rkm_reads_back_exactly(uf, milli):
    assert parse_capacitance_uf(format_rkm(uf, milli=milli)) == uf


@given(st.integers(min_value=1, max_value=999_999), st.integers(min_value=-14, max_value=8))
def test_format_capacitance_reads_back_exactly_up_to_six_figures(mantissa, exponent):
    uf = float(Decimal(mantissa).scaleb(exponent))
    assert parse_capacitance_uf(format_capacitance(uf)) == uf


@pytest.mark.parametrize("bad", [0, -1.0, math.inf, math.nan, "x", True])
def test_formatting_refuses_what_is_not_a_capacitance(bad):
    with pytest.raises(ValueError):
        format_rkm(bad)
    with pytest.raises(ValueError):
        format_capacitance(bad)


# --- temperature ------------------------------------------------------------------------

@pytest.mark.parametrize("text", ["85", "85C", "85 C", "85 \u00b0C", "85\u00b0C", "85 degC", "85 deg C",
                                  "85\u2103", "+85", "85.0", " 85 c "])
def test_temperature_forms(text):
    assert parse_temperature_c(text) == 85.0


def test_negative_and_fractional_temperatures():
    assert parse_temperature_c("-40") == -40.0
    assert parse_temperature_c("-12.5 \u00b0C") == -12.5
    assert parse_temperature_c(21) == 21.0


def test_absolute_zero_is_the_floor():
    # Source: scipy.constants.zero_Celsius = 273.15 K (0 degC in kelvin), so 0 K = -273.15 degC.
    assert parse_temperature_c(f"{-si.zero_Celsius}") == -273.15
    with pytest.raises(ValueError, match=r"below absolute zero \(-273.15 degC\)"):
        parse_temperature_c("-274")


@pytest.mark.parametrize("text, message", [
    ("358 K", r"^'358 K' is in kelvin: temperatures are in degrees Celsius \(write 85, 85C, 85 °C or 85 degC\)\.$"),
    ("185 \u00b0F", r"is in Fahrenheit: temperatures are in degrees Celsius"),
    ("185F", r"is in Fahrenheit"),
    ("185 degF", r"is in Fahrenheit"),
    ("hot", r"^'hot' is not a temperature: write 85, 85C, 85 °C or 85 degC\.$"),
    ("85 x", r"is not a temperature"),
    ("", r"^No temperature given"),
])
def test_temperatures_in_other_units_are_refused_not_converted(text, message):
    with pytest.raises(ValueError, match=message):
        parse_temperature_c(text)


# --- plain quantities -------------------------------------------------------------------

@pytest.mark.parametrize("text, unit, value", [
    ("12", "V", 12.0), ("12 V", "V", 12.0), ("12v", "V", 12.0), ("0.5", None, 0.5), ("1e3", None, 1000.0),
    ("10k", "ohm", 10 * si.kilo), ("10K", "ohm", 10 * si.kilo), ("2.2k", "ohm", 2.2 * si.kilo),
    ("4k7", "ohm", 4.7 * si.kilo), ("4M7", "ohm", 4.7 * si.mega), ("4R7", "ohm", 4.7), ("R47", "ohm", 0.47),
    ("10 k\u03a9", "ohm", 10 * si.kilo), ("10 \u2126", "ohm", 10.0), ("47 ohms", "ohm", 47.0),
    ("500mA", "A", 500 * si.milli), ("500 m", "A", 500 * si.milli), ("20 uA", "A", 20 * si.micro),
    ("1.5 kHz", "Hz", 1.5 * si.kilo), ("120Hz", "Hz", 120.0),
    ("10mm", "mm", 10.0), ("2000 h", "h", 2000.0), ("12 K", "K", 12.0),
])
def test_numbers_with_units_and_si_prefixes(text, unit, value):
    # Source: SI prefixes from scipy.constants; 4k7/R47 letter-for-decimal-point as in IEC 60062.
    assert parse_number(text, "value", unit) == pytest.approx(value, rel=1e-12)


def test_prefixes_only_where_they_make_sense():
    # 'mm' and 'h' take no prefixes, so 10m is not read as 0.01 mm and 4k7 is refused.
    with pytest.raises(ValueError, match=r"^can length: '4k7' is not in mm; write a number such as 12 or 0.5, "
                                         r"optionally followed by mm\.$"):
        parse_number("4k7", "can length", "mm")
    with pytest.raises(ValueError, match="is not in h"):
        parse_number("2k", "rated endurance", "h")
    assert parse_number("2k", "rated endurance", "h", si_prefixes=True) == 2000.0


@pytest.mark.parametrize("text, unit, message", [
    ("abc", None, r"^rated voltage: 'abc' is not a number; write a number such as 12 or 0.5\.$"),
    ("12 A", "V", r"^rated voltage: '12 A' is not in V"),
    ("-3", "V", r"^rated voltage cannot be negative \(got '-3'\)\.$"),
    ("", "V", r"^rated voltage: no value given"),
    ("R47", "V", r"is not a number"),
    ("1e999", "V", r"out of range"),
])
def test_bad_numbers(text, unit, message):
    with pytest.raises(ValueError, match=message):
        parse_number(text, "rated voltage", unit)


def test_negative_numbers_when_allowed():
    assert parse_number("-3.5", "offset", allow_negative=True) == -3.5


def test_whole_numbers_and_booleans():
    assert parse_whole_number("1978", "year") == 1978
    assert parse_whole_number("1978.0", "year") == 1978
    with pytest.raises(ValueError, match=r"^year: '1978.5' is not a whole number\.$"):
        parse_whole_number("1978.5", "year")
    with pytest.raises(ValueError, match="is not a whole number"):
        parse_whole_number("MCMLXXVIII", "year")
    for text in ("yes", "Yes", "TRUE", "1"):
        assert parse_bool(text, "mains") is True
    for text in ("no", "false", "0"):
        assert parse_bool(text, "mains") is False
    with pytest.raises(ValueError, match=r"^mains: 'maybe' is not yes or no; write yes/no, true/false or 1/0\.$"):
        parse_bool("maybe", "mains")
