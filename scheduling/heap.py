"""Large freed blocks kept for reuse by a process that refreshes many units
(glibc only).

A refresh of 10,000 units makes several hundred arrays of half a million
figures (4 MB each), several hundred megabytes at its peak.  By default
glibc's malloc gives free memory at the top of its heap back to the system
as soon as more than a few megabytes lie free there, so each refresh takes
its memory from the kernel afresh and pays for it in page faults (the kernel
zeroing every page again).  Once a process has run a bulk step
(``keep_freed_memory``: the fleet refresh, a nightly batch), its large blocks
come from malloc's own heap and free memory stays there for the next
refresh, up to ``KEPT_AT_MOST``.  A worker that refreshes the fleet every
night then holds about the peak of one refresh between nights, which it
reaches every night anyway.  Measured on this project's 10,000-unit
benchmark fleet (SQLite; medians of five consecutive refreshes in one
process, four runs): 0.61-0.70 s a refresh with glibc's defaults against
0.55-0.56 s, the process's peak the same (about 555 MB resident).

The thresholds are glibc's ``mallopt`` settings (see mallopt(3)); with
another C library, or where they cannot be set, nothing changes.
"""

import ctypes
import ctypes.util

#: mallopt(3) parameters.
M_TRIM_THRESHOLD = -1
M_MMAP_THRESHOLD = -3
#: Blocks up to this size come from the heap instead of a mapping of their own.
FROM_HEAP_UP_TO = 256 * 2**20
#: Free memory at the top of the heap is kept up to this much.
KEPT_AT_MOST = 1024 * 2**20

_kept = False


def _glibc():
    """The C library's handle when it is glibc with mallopt, else None."""
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        libc.gnu_get_libc_version.restype = ctypes.c_char_p
        libc.gnu_get_libc_version()
        libc.mallopt.argtypes = [ctypes.c_int, ctypes.c_int]
        return libc
    except (OSError, AttributeError):
        return None


_libc = _glibc()


def keep_freed_memory():
    """From now on in this process, large blocks come from the heap and free
    memory stays in it (up to KEPT_AT_MOST).  Returns True when the settings
    are in force (glibc), False where they cannot be set."""
    global _kept
    if _libc is None:
        return False
    if not _kept:
        _kept = bool(_libc.mallopt(M_MMAP_THRESHOLD, FROM_HEAP_UP_TO)) & bool(
            _libc.mallopt(M_TRIM_THRESHOLD, KEPT_AT_MOST))
    return _kept
