"""Digest periods: ISO weeks of the local calendar (Monday to Sunday)."""

import datetime as dt
import re

PERIOD_RE = re.compile(r"^(\d{4})-W(\d{2})$")


def period_of(day):
    """The period holding ``day``: "2026-W49"."""
    year, week, _ = day.isocalendar()
    return f"{year}-W{week:02d}"


def period_start(period):
    """The Monday a period starts on; ``ValueError`` for anything else."""
    match = PERIOD_RE.match(period or "")
    if not match:
        raise ValueError(f"a period is an ISO week like 2026-W49, not {period!r}")
    year, week = int(match.group(1)), int(match.group(2))
    try:
        return dt.date.fromisocalendar(year, week, 1)
    except ValueError:
        raise ValueError(f"{period} is not a week of {year}") from None
