"""Each unit's recent closed hires, packed beside its thermal history.

The forecast projects a unit's use from its last twelve months (powered
hours, hours out, venue ambient, number of hires).  Instead of grouping the
whole hire table on every refresh, ``thermal.thermal_sync`` keeps the hires
that closed within ``KEEP_DAYS`` of the moment it packs them
(``ThermalHistory.recent``); the pack is written again whenever the unit's
records change, so it is complete for any later day.  Its header says from
which day it is complete; a forecast for an earlier day reads the hires
table instead.
"""

import struct

import numpy as np

#: One closed hire: check-out and check-in as float days since 1970-01-01
#: (UTC), powered hours and venue ambient [degC] (NULL: NaN).
HIRE_ROW = np.dtype([("out_day", "<f8"), ("in_day", "<f8"), ("powered_h", "<f8"), ("ambient_c", "<f8")])
TAG = b"RH01"
#: Hires kept: those that closed within this many days of packing (a year and a margin).
KEEP_DAYS = 400
_HEAD = len(TAG) + 8  # tag, then the first day (float64) from which the pack is complete


def hire_row(out_at, in_at, powered_h, ambient_c):
    """One closed hire as a HIRE_ROW record (a tuple): its moments as float
    days since 1970-01-01, NULL figures as NaN."""
    return (out_at.timestamp() / 86400.0, in_at.timestamp() / 86400.0,
            np.nan if powered_h is None else powered_h, np.nan if ambient_c is None else ambient_c)


def pack(rows, complete_from_day):
    """Bytes of one unit's hires (HIRE_ROW array) complete from ``complete_from_day``."""
    return TAG + np.float64(complete_from_day).tobytes() + np.ascontiguousarray(rows, dtype=HIRE_ROW).tobytes()


def is_pack(blob):
    blob = bytes(blob or b"")
    return blob[:len(TAG)] == TAG and len(blob) >= _HEAD and (len(blob) - _HEAD) % HIRE_ROW.itemsize == 0


def rows_of(blob):
    """The hires of one pack, as a HIRE_ROW array (a copy)."""
    return np.frombuffer(bytes(blob)[_HEAD:], dtype=HIRE_ROW).copy()


def complete_from_many(blobs):
    """The day from which each pack is complete (float days; inf: not a pack)."""
    head = struct.Struct("<d")
    return np.array([head.unpack_from(b, len(TAG))[0] if is_pack(b) else np.inf for b in blobs], dtype=float)


def window_sums(blobs, since_day):
    """Per pack (unit), over the hires that closed at or after ``since_day``
    (float days since 1970-01-01): powered hours, hours out, the
    powered-hours-weighted venue ambient [degC] (NaN: none) and the number
    of hires.  The same figures ``loader.recent_use`` groups in SQL."""
    n = len(blobs)
    counts = np.fromiter(((len(b) - _HEAD) // HIRE_ROW.itemsize for b in blobs), dtype=np.int64, count=n)
    rows = np.frombuffer(b"".join(memoryview(b)[_HEAD:] for b in blobs), dtype=HIRE_ROW)
    unit = np.repeat(np.arange(n), counts)
    take = rows["in_day"] >= since_day
    rows, unit = rows[take], unit[take]
    p = rows["powered_h"]
    has_p = ~np.isnan(p)
    has_pa = has_p & ~np.isnan(rows["ambient_c"])
    powered = np.bincount(unit[has_p], weights=p[has_p], minlength=n)
    weighted = np.bincount(unit[has_pa], weights=(p * rows["ambient_c"])[has_pa], minlength=n)
    weight = np.bincount(unit[has_pa], weights=p[has_pa], minlength=n)
    out_h = np.bincount(unit, weights=(rows["in_day"] - rows["out_day"]) * 24.0, minlength=n)
    hires = np.bincount(unit, minlength=n).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        # as the SQL does: the weighted sum over all powered hours
        ambient = np.where((powered > 0) & (weight > 0), weighted / np.where(powered > 0, powered, 1.0), np.nan)
    return powered, out_h, ambient, hires
