"""scheduling.heap: large freed blocks kept in the heap once a process has
run a bulk step (glibc's malloc, read back through its own mallinfo2)."""

import ctypes

import numpy as np
import pytest

from scheduling import heap, services

glibc = pytest.mark.skipif(heap._libc is None, reason="glibc's malloc only")


class _MallInfo2(ctypes.Structure):
    # struct mallinfo2, mallinfo(3)
    _fields_ = [(name, ctypes.c_size_t) for name in
                ("arena", "ordblks", "smblks", "hblks", "hblkhd", "usmblks", "fsmblks", "uordblks", "fordblks",
                 "keepcost")]


def mallinfo():
    fn = heap._libc.mallinfo2
    fn.restype = _MallInfo2
    return fn()


@glibc
def test_a_large_array_comes_from_the_heap_and_stays_there_when_freed():
    assert heap.keep_freed_memory() is True
    # Larger than the most glibc's own sliding threshold ever reaches (32 MB on
    # 64-bit systems, mallopt(3)): with its defaults this would be a mapping.
    size = 64 * 2**20
    mapped = mallinfo().hblkhd
    block = np.ones(size // 8)
    # Not a mapping of its own (mallinfo2: hblkhd counts the bytes in mapped blocks) ...
    assert mallinfo().hblkhd < mapped + size
    top = mallinfo().arena
    del block
    # ... and, freed, it is still the heap's (not given back to the system).
    info = mallinfo()
    assert info.arena == top and info.fordblks >= size


def test_a_refresh_of_many_units_keeps_freed_memory_and_one_of_a_few_does_not(monkeypatch):
    calls = []
    monkeypatch.setattr(services, "keep_freed_memory", lambda: calls.append(1))
    monkeypatch.setattr(services, "forecast_compute", lambda **kw: (_ for _ in ()).throw(RuntimeError("stop")))
    for unit_ids, kept in ((None, 1), (list(range(services.PLACE_AT_MOST + 1)), 1), ([1, 2], 0)):
        calls.clear()
        with pytest.raises(RuntimeError, match="stop"):
            services.forecast_refresh(unit_ids=unit_ids)
        assert len(calls) == kept, unit_ids
