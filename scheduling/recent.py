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

import lz4.block
import numpy as np

#: One closed hire: check-out and check-in as float days since 1970-01-01
#: (UTC), powered hours and venue ambient [degC] (NULL: NaN).
HIRE_ROW = np.dtype([("out_day", "<f8"), ("in_day", "<f8"), ("powered_h", "<f8"), ("ambient_c", "<f8")])
#: A pack: this tag, the day it is complete from (float64), then its hires
#: compressed (an lz4 block with its size).  Another tag reads as no pack.
TAG = b"RH02"
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
    return (TAG + np.float64(complete_from_day).tobytes()
            + lz4.block.compress(np.ascontiguousarray(rows, dtype=HIRE_ROW), store_size=True))


def rows_bytes(blob):
    """The hires' bytes of a pack of the current layout; None for anything
    else (no pack, another layout, a damaged one)."""
    if not blob or len(blob) < _HEAD or bytes(blob[:len(TAG)]) != TAG:
        return None
    try:
        raw = lz4.block.decompress(memoryview(blob)[_HEAD:])
    except lz4.block.LZ4BlockError:
        return None
    return raw if len(raw) % HIRE_ROW.itemsize == 0 else None


def is_pack(blob):
    return rows_bytes(blob) is not None


def rows_of(blob):
    """The hires of one pack, as a HIRE_ROW array (a copy)."""
    raw = rows_bytes(blob)
    if raw is None:
        raise ValueError("not a pack of recent hires of the current layout")
    return np.frombuffer(raw, dtype=HIRE_ROW).copy()


def complete_from_many(blobs):
    """The day from which each pack is complete (float days; inf: not one).
    Reads each pack's header only: ``blobs`` are packs already checked
    (``rows_bytes``) or the day is all that is wanted."""
    head = struct.Struct("<d")
    return np.array([head.unpack_from(b, len(TAG))[0] if len(b) >= _HEAD and bytes(b[:len(TAG)]) == TAG else np.inf
                     for b in blobs], dtype=float)


def window_sums(blobs, since_day, *, raws=None):
    """Per pack (unit), over the hires that closed at or after ``since_day``
    (float days since 1970-01-01): powered hours, hours out, the
    powered-hours-weighted venue ambient [degC] (NaN: none) and the number
    of hires.  The same figures ``loader.recent_use`` groups in SQL.
    ``raws``: the packs' hires as ``rows_bytes`` gave them, if the caller
    has them (not unpacked again)."""
    n = len(blobs)
    if raws is None:
        raws = [rows_bytes(b) for b in blobs]
        if any(raw is None for raw in raws):
            raise ValueError("not a pack of recent hires of the current layout")
    counts = np.fromiter((len(raw) // HIRE_ROW.itemsize for raw in raws), dtype=np.int64, count=n)
    rows = np.frombuffer(b"".join(raws), dtype=HIRE_ROW)
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
