"""Numbers, values, dates and words as the pages and sheets write them (reports.formatting)."""

import datetime as dt

import pytest

from reports import formatting as fmt


@pytest.mark.parametrize("uf, text", [
    (4.7, "4.7 µF"), (0.47, "470 nF"), (0.1, "100 nF"), (0.0022, "2.2 nF"), (0.000047, "47 pF"),
    (2200, "2200 µF"), (10000, "10000 µF"), (1, "1 µF"), (22.0, "22 µF"), (99.4321, "99.4 µF"),
])
def test_capacitance_is_written_the_way_parts_are_marked(uf, text):
    assert fmt.capacitance(uf) == text


@pytest.mark.parametrize("ohm, text", [(0.378, "0.378 Ω"), (3.5, "3.5 Ω"), (16.24, "16.2 Ω"), (10e3, "10 kΩ"),
                                       (2.2e6, "2.2 MΩ")])
def test_resistance_uses_the_ohm_sign(ohm, text):
    assert fmt.resistance(ohm) == text


def test_temperature_voltage_hours_energy_and_time():
    assert fmt.temperature(85) == "85 °C"
    assert fmt.volts(450) == "450 V"
    assert fmt.hours(2000) == "2,000 h" and fmt.hours(9.5) == "9.5 h" and fmt.hours(12345.6) == "12,346 h"
    assert fmt.energy(12.5) == "12.5 J" and fmt.energy(0.0823) == "0.082 J"
    assert fmt.seconds(1.897) == "1.9 s" and fmt.seconds(0.05) == "under 0.1 s" and fmt.seconds(125) == "2 min 5 s"


@pytest.mark.parametrize("p, text", [(0.074, "7.4 %"), (0.07, "7 %"), (0.23, "23 %"), (0.0004, "under 0.1 %"),
                                     (0.003, "0.3 %"), (0.9971, "over 99 %"), (1.0, "100 %"), (0.0, "0 %")])
def test_a_chance_keeps_its_small_figures_readable(p, text):
    assert fmt.percent(p) == text


def test_one_date_format_everywhere():
    assert fmt.date(dt.date(2026, 12, 2)) == "2 Dec 2026"
    assert fmt.moment(dt.datetime(2026, 12, 2, 14, 30)) == "2 Dec 2026 14:30"
    assert fmt.month(dt.date(2027, 4, 1)) == "Apr 2027"


def test_far_future_dates_are_words():
    today = dt.date(2026, 12, 2)
    assert fmt.date_ahead(dt.date(2136, 5, 13), today) == "not within 20 years"
    assert fmt.date_ahead(None, today) == "not within 20 years"
    assert fmt.date_ahead(dt.date(2030, 1, 5), today) == "5 Jan 2030"
    assert fmt.today_or_date(today, today) == "now"


def test_estimates_long_past_give_only_the_year():
    today = dt.date(2026, 12, 2)
    assert fmt.estimated_past(dt.date(1993, 2, 11), today) == "about 1993"
    assert fmt.estimated_past(dt.date(2026, 3, 1), today) == "about Mar 2026"


@pytest.mark.parametrize("damage, limit, text", [
    (0.45, 1.0, "45 %"), (1.3, 1.0, "130 %"), (0.9, 0.38, "over 2x its limit"), (4.0, 0.38, "over 2x rated life"),
    (0.5, 0.0, "no margin"),
])
def test_life_used_is_capped_and_in_words_past_the_model(damage, limit, text):
    assert fmt.life_used(damage, limit) == text


def test_the_risk_says_what_it_assumes():
    assert fmt.risk_sentence(0.074, 90) == "if it works today, chance of a fault within 90 days: 7.4 %"


@pytest.mark.parametrize("hours, text", [(0.5, "30 min"), (5.2, "5 h"), (76, "3 days 4 h"), (48, "2 days"),
                                         (300, "12 days"), (24 * 50, "about 7 weeks")])
def test_how_long_a_unit_was_out(hours, text):
    assert fmt.duration(hours) == text


def test_a_meter_reading_keeps_its_tenth():
    assert fmt.meter(1234.5) == "1,234.5 h" and fmt.meter(4711) == "4,711 h"
