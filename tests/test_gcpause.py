"""The engine's bulk steps run with Python's cyclic garbage collector paused
(scheduling/gcpause.py) and leave it as they found it, also on failure."""

import gc

import pytest

from scheduling import services
from scheduling.gcpause import collector_paused


def test_the_collector_is_paused_inside_and_restored_after_even_on_failure():
    assert gc.isenabled()
    with collector_paused():
        assert not gc.isenabled()
    assert gc.isenabled()
    with pytest.raises(ValueError), collector_paused():
        raise ValueError("a failing step")
    assert gc.isenabled()
    gc.disable()
    try:
        with collector_paused():
            pass
        assert not gc.isenabled()  # a caller that paused it keeps it paused
    finally:
        gc.enable()


def test_a_refresh_computes_with_the_collector_paused(db, monkeypatch):
    from tests.base import build_fleet

    build_fleet()
    seen = []
    compute = services.compute_sound
    monkeypatch.setattr(services, "compute_sound", lambda *a, **k: (seen.append(gc.isenabled()), compute(*a, **k))[1])
    run = services.forecast_refresh()
    assert run.fleet.n_units >= 1 and seen == [False] and gc.isenabled()
