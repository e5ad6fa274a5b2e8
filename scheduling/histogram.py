"""Temperature-time histograms: hours spent in each 1 K bin.

Pure numpy, no Django.  A unit keeps two of these (powered and unpowered);
the damage of a capacitor is then one weighted sum over the bins, so a check-in
only adds to a few bins and a fleet recompute is array arithmetic.

Bins are centred on whole degrees Celsius from ``BIN_MIN_C`` to ``BIN_MAX_C``;
hours outside the range are clipped into the end bins (the model's validity
range is far inside it).  Temperatures are degC, durations hours.
"""

import lz4.block
import numpy as np

BIN_MIN_C = -40
BIN_MAX_C = 150
N_BINS = BIN_MAX_C - BIN_MIN_C + 1
BIN_CENTRES_C = np.arange(BIN_MIN_C, BIN_MAX_C + 1, dtype=np.float64)
DTYPE = np.dtype("<f8")
#: A stored histogram: this tag, then its float64 bins compressed (an lz4
#: block).  Most of a unit's bins hold no hours, so it takes about a tenth
#: of the N_BINS * 8 bytes of the bins themselves, and a whole fleet's
#: histories read that much faster.  A blob of exactly N_BINS * 8 bytes is
#: the bins as they are (as histograms were first stored, and as one is
#: still stored in the rare case its compressed form is that long): both read.
TAG = b"HZ1"
RAW_BYTES = N_BINS * DTYPE.itemsize


def empty(shape=()):
    """A histogram (or a stack of them) with no hours in it."""
    return np.zeros(tuple(np.atleast_1d(shape)) + (N_BINS,) if shape != () else (N_BINS,), dtype=DTYPE)


def bin_index(temp_c):
    """Index of the 1 K bin holding each temperature [degC]."""
    temp_c = np.asarray(temp_c, dtype=np.float64)
    if np.any(~np.isfinite(temp_c)):
        raise ValueError("temp_c must be finite")
    return np.clip(np.rint(temp_c).astype(np.int64) - BIN_MIN_C, 0, N_BINS - 1)


def add_hours(hist, temp_c, hours):
    """Add ``hours`` [h] spent at ``temp_c`` [degC] to ``hist`` in place and return it.

    Both arguments broadcast; repeated bins accumulate (``np.add.at``).
    """
    hours = np.asarray(hours, dtype=np.float64)
    if np.any(~np.isfinite(hours)) or np.any(hours < 0):
        raise ValueError("hours must be finite and not negative")
    idx, hrs = np.broadcast_arrays(bin_index(temp_c), hours)
    np.add.at(hist, idx.ravel(), hrs.ravel())
    return hist


def to_bytes(hist):
    """One histogram as stored (see TAG)."""
    bins = np.ascontiguousarray(hist, dtype=DTYPE)
    if bins.shape != (N_BINS,):
        raise ValueError(f"a histogram has {bins.size} bins, expected {N_BINS}")
    blob = TAG + lz4.block.compress(bins, store_size=False)
    return blob if len(blob) != RAW_BYTES else bins.tobytes()


def bins_of(blob):
    """The N_BINS * 8 bytes of the bins of one stored histogram (either form)."""
    if len(blob) == RAW_BYTES:
        return blob
    if bytes(blob[:len(TAG)]) != TAG:
        raise ValueError(f"a stored histogram is {len(blob)} bytes and not compressed; expected {RAW_BYTES}")
    try:
        bins = lz4.block.decompress(memoryview(blob)[len(TAG):], uncompressed_size=RAW_BYTES)
    except lz4.block.LZ4BlockError as exc:
        raise ValueError(f"a stored histogram is damaged ({exc})") from None
    if len(bins) != RAW_BYTES:
        raise ValueError(f"a stored histogram has {len(bins) // DTYPE.itemsize} bins, expected {N_BINS}")
    return bins


def from_bytes(blob):
    if blob is None:
        return empty()
    return np.frombuffer(bins_of(bytes(blob)), dtype=DTYPE).copy()


def stack_from_bytes(blobs):
    """Many stored histograms as one (n, N_BINS) array, without a Python loop per bin."""
    if not blobs:
        return np.zeros((0, N_BINS), dtype=DTYPE)
    decompress, tag, raw = lz4.block.decompress, len(TAG), RAW_BYTES
    try:  # bins_of's work, unrolled: a fleet has tens of thousands of histograms
        joined = b"".join([b if len(b) == raw else decompress(b[tag:], uncompressed_size=raw)
                           for b in blobs if len(b) == raw or b[:tag] == TAG])
    except (lz4.block.LZ4BlockError, TypeError):
        joined = b""
    if len(joined) != len(blobs) * RAW_BYTES:
        for b in blobs:
            bins_of(b)  # says which is damaged and how
        raise ValueError("a stored histogram has the wrong number of bins")
    return np.frombuffer(joined, dtype=DTYPE).reshape(len(blobs), N_BINS)
