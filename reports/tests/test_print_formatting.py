"""The formatting the printed output adds to reports.formatting: frequencies,
can sizes, designators in board order, chart years."""

import datetime as dt

from reports import formatting as fmt


def test_frequencies_and_can_sizes():
    assert fmt.frequency(120) == "120 Hz"
    assert fmt.frequency(5000) == "5 kHz"
    assert fmt.can_size(6.3, 11) == "6.3 × 11 mm"
    assert fmt.can_size(10, None) == "10 mm dia."
    assert fmt.millimetres(31.5) == "31.5 mm"


def test_designators_sort_in_board_order():
    assert sorted(["C10", "C2", "C1a", "C1", "VC3"], key=fmt.designator_key) == ["C1", "C1a", "C2", "C10", "VC3"]


def test_chart_years():
    assert fmt.decimal_year(dt.date(2026, 1, 1)) == 2026.0
    assert abs(fmt.decimal_year(dt.date(2026, 7, 2)) - (2026 + 182 / 365)) < 1e-12
