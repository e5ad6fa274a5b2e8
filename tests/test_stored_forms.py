"""The compressed forms the engine stores its histograms and packs in
(scheduling/histogram.py, parts.py, recent.py): read back bit for bit, the
forms stored before still read (or read as missing, so the rows are read
instead), and a damaged blob never reads as figures.

The references are the arrays themselves (a lossless form must give back
exactly what went in) and the project's own row reading, which the packs
are a faster copy of."""

import datetime as dt

import lz4.block
import numpy as np
import pytest
from django.utils import timezone

from front import workflows
from scheduling import histogram as H
from scheduling import parts as P
from scheduling import recent as R
from scheduling.loader import load_fleet
from scheduling.models import ThermalHistory
from scheduling.services import forecast_refresh
from scheduling.thermal import parts_verify
from tests.test_packed_parts import TODAY, fleet  # noqa: F401 - fleet: the fixture

def _histogram(seed):
    """A unit's histogram as the engine makes them: hours in a span of bins, zeros elsewhere."""
    rng = np.random.default_rng(seed)
    hist = H.empty()
    H.add_hours(hist, rng.normal(24.0, 6.0, 400), rng.uniform(0.0, 30.0, 400))
    return hist


@pytest.mark.parametrize("seed", range(5))
def test_a_histogram_reads_back_bit_for_bit_in_far_fewer_bytes(seed):
    hist = _histogram(seed)
    blob = H.to_bytes(hist)
    assert blob[:len(H.TAG)] == H.TAG and len(blob) < H.RAW_BYTES / 3
    back = H.from_bytes(blob)
    assert back.tobytes() == hist.tobytes()  # every bit, not approximately
    assert H.stack_from_bytes([blob, memoryview(blob)]).tobytes() == hist.tobytes() * 2


def test_a_histogram_stored_before_compression_still_reads():
    hist = _histogram(7)
    raw = hist.tobytes()  # the form of the first stored histograms: the float64 bins as they are
    assert len(raw) == H.RAW_BYTES
    assert H.from_bytes(raw).tobytes() == raw
    mixed = H.stack_from_bytes([raw, H.to_bytes(hist)])
    assert mixed[0].tobytes() == mixed[1].tobytes() == raw


def test_a_histogram_of_incompressible_hours_still_round_trips():
    hist = np.random.default_rng(3).uniform(1.0, 2.0, H.N_BINS)  # every bin a different figure
    assert H.from_bytes(H.to_bytes(hist)).tobytes() == hist.tobytes()


@pytest.mark.parametrize("damage", ["cut", "wrong size", "no tag"])
def test_a_damaged_histogram_is_an_error_not_figures(damage):
    blob = H.to_bytes(_histogram(1))
    bad = {"cut": blob[:-6],
           "wrong size": H.TAG + lz4.block.compress(np.zeros(H.N_BINS - 1), store_size=False),
           "no tag": b"XYZ" + blob[len(H.TAG):]}[damage]
    with pytest.raises(ValueError, match="stored histogram"):
        H.from_bytes(bad)
    with pytest.raises(ValueError, match="stored histogram"):
        H.stack_from_bytes([blob, bad])


@pytest.fixture
def hired(fleet):
    """test_packed_parts' two units, the first back from a hire."""
    out = timezone.now() - dt.timedelta(days=40)
    workflows.rental_check_out(unit_id=fleet.unit.pk, job_ref="J-2", out_at=out, override_reason="test hire")
    workflows.rental_check_in(unit_id=fleet.unit.pk, in_at=out + dt.timedelta(days=1), venue_ambient_c=28.0,
                              powered_hours=9.0)
    return fleet


ARRAYS = ("cap_id", "unit_index", "position_index", "capacitance_f", "rated_life_h", "esr0_ohm", "installed_day",
          "is_original", "use_powered_h_per_year", "use_out_h_per_year", "use_ambient_c", "use_hires_per_year",
          "hist_powered", "hist_unpowered")


def _assert_same_arrays(a, b):
    for name in ARRAYS:
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)


def test_the_stored_packs_are_compressed_and_read_back_as_the_rows(hired):
    h = ThermalHistory.objects.get(unit=hired.unit)
    rows = P.read_rows([hired.unit.pk])
    assert bytes(h.parts)[:len(P.PACK_TAG)] == P.PACK_TAG and len(h.parts) < rows.nbytes  # three parts here
    assert P.rows_bytes(h.parts) == rows.tobytes()
    hires = R.rows_of(h.recent)
    assert hires.size == 1 and hires["powered_h"][0] == 9.0


@pytest.mark.parametrize("which", ["parts", "recent"])
@pytest.mark.parametrize("form", ["cut short", "the layout before compression"])
def test_a_cut_or_older_pack_reads_as_missing_and_the_rows_are_read(hired, which, form):
    today = timezone.localdate()
    good = load_fleet(today=today)
    h = ThermalHistory.objects.get(unit=hired.unit)
    blob = bytes(getattr(h, which))
    if form == "cut short":  # (an lz4 block has no checksum: a cut one is what it can tell)
        blob = blob[:-9]
    elif which == "parts":
        blob = b"CP01" + P.read_rows([hired.unit.pk]).tobytes()
    else:
        blob = b"RH01" + blob[len(R.TAG):len(R.TAG) + 8] + R.rows_of(h.recent).tobytes()
    ThermalHistory.objects.filter(pk=h.pk).update(**{which: blob})
    assert not (P if which == "parts" else R).is_pack(blob)
    _assert_same_arrays(load_fleet(today=today), good)
    if which == "parts":
        assert parts_verify() == [hired.unit.pk]
        assert parts_verify(repair=True) == [hired.unit.pk] and parts_verify() == []


def test_the_migration_to_compressed_forms_marks_every_pack_for_packing_again(hired):
    from importlib import import_module

    from django.apps import apps

    migration = import_module("scheduling.migrations.0010_compressed_histories")
    migration.mark_packs_stale(apps, None)
    assert set(ThermalHistory.objects.values_list("parts_version", flat=True)) == {-1}
    forecast_refresh(today=TODAY)  # its sync packs them again
    assert not ThermalHistory.objects.filter(parts_version=-1).exists()
    assert all(P.is_pack(p) and R.is_pack(r) for p, r in ThermalHistory.objects.values_list("parts", "recent"))
