"""How a unit's hours fill its temperature-time histograms (pure: no queries).

The model's moments (manufacture, joining the fleet, parts fitted), storage
between hires at the home's monthly temperature, a hire's powered and
unpowered hours, the prior-use assumption before the unit joined, and a
whole history built from the records alone.  ``scheduling.thermal`` keeps the
stored histories up to date with these; ``make_fleet`` generates with them.
"""

import datetime as dt

import numpy as np
from django.utils import timezone

from . import histogram as H

HOURS_PER_YEAR = 8766.0  # 365.25 days


def manufactured_at(year_made):
    """The moment the model takes as a unit's date of manufacture: 1 July, noon, UTC."""
    return dt.datetime(year_made, 7, 1, 12, 0, tzinfo=dt.timezone.utc)


def joined_at(joined_on):
    return dt.datetime.combine(joined_on, dt.time(0, 0), tzinfo=dt.timezone.utc)


def fitted_at(installed_on):
    """The moment taken as the install time of parts fitted on a date: noon, local time."""
    return timezone.make_aware(dt.datetime.combine(installed_on, dt.time(12, 0)))


def month_hours(start, end):
    """Hours of [start, end) falling in each calendar month: ndarray(12), January first."""
    out = np.zeros(12)
    if end <= start:
        return out
    cursor = start
    while cursor < end:
        nxt = (cursor.replace(year=cursor.year + 1, month=1, day=1, hour=0, minute=0, second=0, microsecond=0)
               if cursor.month == 12
               else cursor.replace(month=cursor.month + 1, day=1, hour=0, minute=0, second=0, microsecond=0))
        stop = min(nxt, end)
        out[cursor.month - 1] += (stop - cursor).total_seconds() / 3600.0
        cursor = stop
    return out


# --- the pure accumulation -------------------------------------------------

def add_storage(unpowered, start, end, monthly_temps_c):
    """Add storage from ``start`` to ``end`` at the month's temperature."""
    if end > start:
        H.add_hours(unpowered, monthly_temps_c, month_hours(start, end))


def add_rental(powered, unpowered, elapsed_h, powered_h, venue_ambient_c, internal_rise_k):
    H.add_hours(powered, venue_ambient_c + internal_rise_k, powered_h)
    H.add_hours(unpowered, venue_ambient_c, max(elapsed_h - powered_h, 0.0))


def add_prior_use(powered, unpowered, unit, internal_rise_k):
    """Before the unit joined the fleet: the unit's prior-use assumption."""
    start = manufactured_at(unit.year_made)
    end = joined_at(unit.joined_on)
    total_h = max((end - start).total_seconds() / 3600.0, 0.0)
    powered_h = min(unit.prior_powered_h_per_year * total_h / HOURS_PER_YEAR, total_h)
    H.add_hours(powered, unit.prior_ambient_c + internal_rise_k, powered_h)
    H.add_hours(unpowered, unit.prior_storage_c, total_h - powered_h)


def build_history(unit, internal_rise_k, rentals, monthly_temps_c, until, snapshot_times=()):
    """A unit's histograms from manufacture to ``until``, from its records alone.

    ``rentals`` are the unit's closed hires in order of check-out.  Returns
    ``(powered, unpowered, accounted_until, last_powered_at, snapshots)`` where
    ``snapshots`` maps each of ``snapshot_times`` to the (powered, unpowered)
    histograms at that moment.  The hires counted are those checked out before
    ``until`` (see :func:`counted_rentals`).
    """
    powered, unpowered = H.empty(), H.empty()
    add_prior_use(powered, unpowered, unit, internal_rise_k)
    cursor = joined_at(unit.joined_on)
    last_powered = None
    pending = sorted(snapshot_times)
    snaps = {}

    def take_until(moment):
        nonlocal cursor
        while pending and pending[0] <= moment:
            t = pending.pop(0)
            if t > cursor:
                add_storage(unpowered, cursor, t, monthly_temps_c)
                cursor = t
            snaps[t] = (powered.copy(), unpowered.copy())

    for r in rentals:
        if r.out_at >= until:
            break
        take_until(r.out_at)
        add_storage(unpowered, cursor, r.out_at, monthly_temps_c)
        elapsed = (r.in_at - r.out_at).total_seconds() / 3600.0
        add_rental(powered, unpowered, elapsed, r.powered_hours, r.venue_ambient_c, internal_rise_k)
        cursor = max(cursor, r.in_at)
        if r.powered_hours > 0:
            last_powered = r.in_at
    take_until(until)
    if until > cursor:
        add_storage(unpowered, cursor, until, monthly_temps_c)
        cursor = until
    for t in pending:  # snapshots before manufacture or in a hire: what was known then
        snaps[t] = (powered.copy(), unpowered.copy())
    return powered, unpowered, cursor, last_powered, snaps


def exposure_basis(unit, internal_rise_k):
    """The unit's own figures a history is built from, as text: a history built
    from other figures must be rebuilt, not extended."""
    return (f"{unit.year_made}|{unit.joined_on.isoformat()}|{float(unit.prior_powered_h_per_year)!r}|"
            f"{float(unit.prior_ambient_c)!r}|{float(unit.prior_storage_c)!r}|{float(internal_rise_k)!r}")


def counted_rentals(rentals, until):
    """(number, powered hours) of the closed hires a history built to ``until`` counts."""
    counted = [r for r in rentals if r.out_at < until]
    return len(counted), float(sum(r.powered_hours for r in counted))
