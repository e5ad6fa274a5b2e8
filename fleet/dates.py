"""The dates the register keeps, and a date's rules in words.

Every date of the register falls in 1900-2100: before the oldest gear and
well past any plan, and far from the ends of the calendar, where time-zone
arithmetic overflows.  Nothing a unit went through can come before it was
made (or, for a hire, before it joined the fleet).
"""

import datetime as dt

EARLIEST_DATE = dt.date(1900, 1, 1)
LATEST_DATE = dt.date(2100, 12, 31)


def outside_register(day):
    """Words for a date (or a moment's date) outside 1900-2100, else None."""
    if day is None:
        return None
    if isinstance(day, dt.datetime):
        day = day.date()
    if EARLIEST_DATE <= day <= LATEST_DATE:
        return None
    return f"Give a date between {EARLIEST_DATE.year} and {LATEST_DATE.year}."


def before_unit(unit, day, *, happened, joined_too=False):
    """Words when ``day`` comes before ``unit`` was made (or, with
    ``joined_too``, before it joined the fleet), else None.  ``happened`` says
    what could not have happened: "gone out", "been serviced"."""
    if unit is None or day is None:
        return None
    if joined_too and unit.joined_on and day < unit.joined_on:
        return (f"{unit.asset_tag} joined the fleet on {unit.joined_on.day} {unit.joined_on:%b %Y}; it cannot have "
                f"{happened} before that.")
    if unit.year_made and day.year < unit.year_made:
        return f"{unit.asset_tag} was made in {unit.year_made}; it cannot have {happened} before that."
    return None
