"""Each unit's fitted parts and recent hires, packed beside its history
(scheduling/parts.py, recent.py): every way of changing fitted parts writes
the pack again, the loader reads the same arrays from packs as from rows,
and a pack that went stale behind the register's back is found and repaired.

The reference here is the project's own row reading (the SQL the loader used
before packs); the packs are a faster copy of it, so equality is the check.
"""

import datetime as dt
import io

import numpy as np
import pytest
from django.core.management import call_command
from django.utils import timezone

from fleet.models import Rental, Unit, UnitCapacitor
from front import workflows
from scheduling import parts as P
from scheduling import recent as R
from scheduling.loader import load_fleet, recent_use
from scheduling.models import ThermalHistory
from scheduling.services import forecast_refresh
from scheduling.thermal import parts_verify, thermal_sync
from tests.base import build_fleet, make_unit

TODAY = dt.date(2026, 6, 1)


def _pack_matches_rows(unit_id):
    h = ThermalHistory.objects.get(unit_id=unit_id)
    rows = P.read_rows([unit_id])
    return bytes(h.parts) == P.pack(rows) and h.parts_version == h.unit.records_version


@pytest.fixture
def fleet(db):
    f = build_fleet()
    f.other = make_unit(f.gear_model, f.location, asset_tag="NMB-0002", serial="BA-80-2002",
                        joined_on=dt.date(2024, 1, 10))
    forecast_refresh(today=TODAY)
    return f


def test_a_new_unit_is_packed_at_its_first_refresh(fleet):
    assert _pack_matches_rows(fleet.unit.pk) and _pack_matches_rows(fleet.other.pk)
    assert P.unpack_many([ThermalHistory.objects.get(unit=fleet.unit).parts]).size == 3


def test_a_recap_packs_the_new_parts(fleet):
    workflows.service_record_recap(unit_id=fleet.unit.pk, performed_on=dt.date(2025, 5, 2),
                                   replacements={"C1": {"rated_temp_c": 105, "rated_life_h": 8000}})
    assert _pack_matches_rows(fleet.unit.pk)
    packed = P.unpack_many([ThermalHistory.objects.get(unit=fleet.unit).parts])
    c1 = packed[packed["position_id"] == fleet.gear_model.positions.get(designator="C1").pk][0]
    assert (c1["rated_life_h"], c1["is_original"]) == (8000.0, False)


def test_a_check_in_packs_the_hire_it_closes(fleet):
    out = timezone.now() - dt.timedelta(days=3)
    workflows.rental_check_out(unit_id=fleet.other.pk, job_ref="J-1", out_at=out, override_reason="test hire")
    workflows.rental_check_in(unit_id=fleet.other.pk, in_at=out + dt.timedelta(days=2), venue_ambient_c=31.0,
                              powered_hours=20.0)
    hires = R.rows_of(ThermalHistory.objects.get(unit=fleet.other).recent)
    assert hires.size == 1 and (hires["powered_h"][0], hires["ambient_c"][0]) == (20.0, 31.0)
    assert hires["in_day"][0] - hires["out_day"][0] == pytest.approx(2.0)


def test_a_unit_added_by_csv_import_is_packed_with_its_parts(fleet, tmp_path):
    call_command("export_fleet", str(tmp_path), stdout=io.StringIO())
    lines = (tmp_path / "units.csv").read_text().splitlines()
    header = lines[0].split(",")
    row = lines[1].split(",")
    row[header.index("asset_tag")], row[header.index("serial")] = "NMB-0099", "BA-99-0099"
    (tmp_path / "new.csv").write_text("\n".join([lines[0], ",".join(row)]) + "\n")
    workflows.import_csv(str(tmp_path / "new.csv"), name="units.csv")
    new = ThermalHistory.objects.get(unit__asset_tag="NMB-0099")
    assert _pack_matches_rows(new.unit_id)
    assert P.unpack_many([new.parts]).size == 3


def test_the_loader_reads_the_same_arrays_from_packs_as_from_rows(fleet):
    out = timezone.now() - dt.timedelta(days=40)
    workflows.rental_check_out(unit_id=fleet.unit.pk, job_ref="J-2", out_at=out, override_reason="test hire")
    workflows.rental_check_in(unit_id=fleet.unit.pk, in_at=out + dt.timedelta(days=1), venue_ambient_c=28.0,
                              powered_hours=9.0)
    today = timezone.localdate()
    packed = load_fleet(today=today)
    ThermalHistory.objects.update(parts_version=-1)  # every pack counts as stale: rows are read
    from_rows = load_fleet(today=today)
    for name in ("cap_id", "unit_index", "position_index", "capacitance_f", "rated_life_h", "esr0_ohm",
                 "installed_day", "is_original", "use_powered_h_per_year", "use_out_h_per_year",
                 "use_ambient_c", "use_hires_per_year"):
        np.testing.assert_array_equal(getattr(packed, name), getattr(from_rows, name), err_msg=name)
    assert packed.use_hires_per_year.tolist() == [1.0, 0.0]


@pytest.mark.parametrize("block_bytes", [1, 3 * P.CAPACITOR_ROW.itemsize + 1, P.COLUMN_BLOCK_BYTES, 10**9])
def test_columns_block_by_block_equal_the_columns_of_all_rows_joined(block_bytes):
    rng = np.random.default_rng(7)
    raws = []
    for n in (5, 0, 1, 40, 0, 17, 3):  # units with and without parts
        rows = np.zeros(n, dtype=P.CAPACITOR_ROW)
        for name in P.CAPACITOR_ROW.names:
            rows[name] = rng.integers(0, 2, n) if name == "is_original" else rng.uniform(0.1, 20.0, n)
        rows["esr_ohm"][::3] = -1.0  # NULL figures as packed
        raws.append(P.rows_bytes(P.pack(rows)))
    joined = P.as_columns(np.frombuffer(b"".join(raws), dtype=P.CAPACITOR_ROW))
    blocked = P.columns_of(raws, block_bytes=block_bytes)
    assert list(blocked) == list(joined)
    for name in joined:
        assert blocked[name].dtype == joined[name].dtype and blocked[name].flags.c_contiguous
        np.testing.assert_array_equal(blocked[name], joined[name], err_msg=name)
    assert np.isnan(blocked["esr_ohm"]).sum() == sum((len(r) // P.CAPACITOR_ROW.itemsize + 2) // 3 for r in raws)
    assert all(v.size == 0 for v in P.columns_of([]).values())


def test_window_sums_equal_the_grouped_sql(fleet):
    start = timezone.now() - dt.timedelta(days=500)
    for k in range(12):  # hires every 40 days, some before the twelve-month window
        out = start + dt.timedelta(days=40 * k)
        Rental.objects.create(unit=fleet.unit, job_ref=f"J{k}", out_at=out, in_at=out + dt.timedelta(hours=30 + k),
                              powered_hours=5.0 + k, venue_ambient_c=20.0 + k)
    from fleet.services import units_mark_changed
    units_mark_changed(unit_ids=[fleet.unit.pk])
    thermal_sync(unit_ids=[fleet.unit.pk])
    today = timezone.localdate()
    since = dt.datetime.combine(today - dt.timedelta(days=365), dt.time(0), tzinfo=dt.timezone.utc)
    blob = bytes(ThermalHistory.objects.get(unit=fleet.unit).recent)
    p, o, a, n = (x[0] for x in R.window_sums([blob], since.timestamp() / 86400.0))
    sql = recent_use([fleet.unit.pk], today)[fleet.unit.pk]
    assert n == sql[3] and 0 < n < 12
    assert p == pytest.approx(sql[0], rel=1e-12) and o == pytest.approx(sql[1], rel=1e-9)
    assert a == pytest.approx(sql[2], rel=1e-12)


def test_a_pack_older_than_the_day_asked_for_falls_back_to_the_rows(fleet):
    blob = bytes(ThermalHistory.objects.get(unit=fleet.unit).recent)
    assert R.complete_from_many([blob])[0] == pytest.approx(
        (timezone.now() - dt.timedelta(days=R.KEEP_DAYS)).timestamp() / 86400.0, abs=0.01)
    # a forecast for a day three years back needs hires the pack no longer holds: same figures as the SQL
    old = load_fleet(today=TODAY - dt.timedelta(days=3 * 365), unit_ids=[fleet.unit.pk])
    assert old.use_hires_per_year.tolist() == [0.0]


def test_a_pack_changed_behind_the_registers_back_is_found_and_repaired(fleet):
    UnitCapacitor.objects.filter(unit=fleet.unit, position__designator="C7").update(rated_life_h=3000)
    assert parts_verify() == [fleet.unit.pk]
    buf = io.StringIO()
    with pytest.raises(SystemExit):
        call_command("verify_parts", stdout=buf)
    assert "NMB-0001" in buf.getvalue()
    call_command("verify_parts", "--repair", stdout=io.StringIO())
    assert parts_verify() == []
    packed = P.unpack_many([ThermalHistory.objects.get(unit=fleet.unit).parts])
    assert 3000.0 in packed["rated_life_h"].tolist()


def test_verify_parts_refuses_an_unknown_tag(fleet):
    from django.core.management.base import CommandError
    with pytest.raises(CommandError, match="No unit with asset tag NOPE-1"):
        call_command("verify_parts", "NOPE-1")


def _engine_rows(unit_id):
    """Everything the engine keeps for a unit: its history with its packs, its snapshots, its forecast."""
    from scheduling.models import HistogramSnapshot, UnitForecast

    history = ThermalHistory.objects.filter(unit_id=unit_id).values().get()
    snapshots = sorted((s["taken_on"], s["taken_at"], bytes(s["powered"]), bytes(s["unpowered"]))
                       for s in HistogramSnapshot.objects.filter(unit_id=unit_id).values())
    forecast = UnitForecast.objects.filter(unit_id=unit_id).values().get()
    for row in (history, forecast):
        row.pop("id"), row.pop("computed_at", None), row.pop("updated_at", None)  # moments of the writing
        row.update({k: bytes(v) for k, v in row.items() if isinstance(v, memoryview)})
    # The recent hires' pack without the moment it is complete from (now less KEEP_DAYS when written).
    history["recent"] = history["recent"][:len(R.TAG)] + history["recent"][len(R.TAG) + 8:]
    return history, snapshots, forecast


def _check_out_and_close(unit_id, job_ref):
    """Check ``unit_id`` out three days ago and close the hire two days
    later, in the caller's transaction; returns the closed hire."""
    from fleet import services as register

    out = timezone.now() - dt.timedelta(days=3)
    workflows.rental_check_out(unit_id=unit_id, job_ref=job_ref, out_at=out, override_reason="test hire")
    return register.rental_close(unit_id=unit_id, in_at=out + dt.timedelta(days=2), venue_ambient_c=31.0,
                                 powered_hours=20.0)


def _check_in_both_ways(monkeypatch, unit_id, out, *, hires_before=()):
    """The engine's rows after a check-in of ``unit_id`` (out since ``out``)
    the check-in's own way, then (that undone) with a full sync instead;
    and whether the check-in took its short way."""
    from django.db import transaction

    from scheduling import thermal

    took = []
    short_way = thermal.thermal_check_in

    def spied(unit, rental, **kwargs):
        took.append(short_way(unit, rental, **kwargs))
        return took[-1]

    monkeypatch.setattr(workflows, "thermal_check_in", spied)

    def check_in():
        workflows.rental_check_in(unit_id=unit_id, in_at=out + dt.timedelta(days=2), venue_ambient_c=31.0,
                                  powered_hours=20.0)
        return _engine_rows(unit_id)

    class Undo(Exception):
        pass

    try:
        with transaction.atomic():
            short = check_in()
            raise Undo
    except Undo:
        pass
    # The reference: every step of the sync, nothing skipped.
    def full_sync(unit, rental, *, before_general):
        before_general()  # the unit row written first, as the general way has it
        thermal_sync(unit_ids=[unit.pk], until=rental.in_at)
        return None  # nothing known: the forecast reads everything again

    monkeypatch.setattr(workflows, "thermal_check_in", full_sync)
    full = check_in()
    return short, full, [x is not None for x in took] == [True]


def test_a_check_in_keeps_what_a_full_sync_would_write(fleet, monkeypatch):
    """The check-in's own way (the history read once, only this hire added to
    it and to the packed recent hires, the packed parts kept) stores what
    the full sync stores."""
    unit = fleet.unit
    workflows.service_record_recap(unit_id=unit.pk, performed_on=dt.date(2025, 5, 2),
                                   replacements={"C1": {"rated_temp_c": 105, "rated_life_h": 8000}})
    # Earlier hires in the packed recent hires, one of them older than the pack keeps.
    for k, days_ago in enumerate((420, 200, 30)):
        out = timezone.now() - dt.timedelta(days=days_ago)
        workflows.rental_check_out(unit_id=unit.pk, job_ref=f"J-0{k}", out_at=out, override_reason="test hire")
        workflows.rental_check_in(unit_id=unit.pk, in_at=out + dt.timedelta(days=1), venue_ambient_c=25.0 + k,
                                  powered_hours=6.0 + k)
        Unit.objects.filter(pk=unit.pk).update(status=Unit.Status.AVAILABLE, hold_reason="")  # the bench let it go
    out = timezone.now() - dt.timedelta(days=3)
    workflows.rental_check_out(unit_id=unit.pk, job_ref="J-1", out_at=out, override_reason="test hire")
    short, full, short_way = _check_in_both_ways(monkeypatch, unit.pk, out)
    assert short_way
    assert short[1] and short[0]["parts_version"] == short[0]["records_version"]
    assert R.rows_of(ThermalHistory.objects.get(unit=unit).recent).size == 3  # the oldest hire dropped
    assert short == full
    assert _pack_matches_rows(unit.pk)


def test_a_check_in_after_other_changes_takes_the_general_way_with_the_same_result(fleet, monkeypatch):
    """Records changed while the unit was out (marked changed, no sync): the
    check-in's short way does not apply; the result is still the full sync's."""
    from fleet.services import units_mark_changed

    out = timezone.now() - dt.timedelta(days=3)
    workflows.rental_check_out(unit_id=fleet.other.pk, job_ref="J-2", out_at=out, override_reason="test hire")
    units_mark_changed(unit_ids=[fleet.other.pk])
    short, full, short_way = _check_in_both_ways(monkeypatch, fleet.other.pk, out)
    assert not short_way and short == full


def test_a_hire_entered_back_to_before_the_history_end_rebuilds_it(fleet, monkeypatch):
    """A hire checked out before the moment the history counts up to cannot
    be added at its end: the check-in rebuilds, as the full sync does."""
    thermal_sync(unit_ids=[fleet.other.pk], until=timezone.now() - dt.timedelta(days=3), advance_storage=True)
    h = ThermalHistory.objects.get(unit=fleet.other)
    out = h.accounted_until - dt.timedelta(hours=5)
    workflows.rental_check_out(unit_id=fleet.other.pk, job_ref="J-3", out_at=out, override_reason="test hire")
    short, full, short_way = _check_in_both_ways(monkeypatch, fleet.other.pk, out)
    assert not short_way and short == full
    assert short[0]["rentals_counted"] == 1


def test_a_check_in_after_other_changes_reads_the_parts_again(fleet):
    """Parts changed behind the sync while the unit was out (records marked
    changed, no sync): the check-in's sync reads them, not the old pack."""
    from fleet.services import units_mark_changed

    out = timezone.now() - dt.timedelta(days=3)
    workflows.rental_check_out(unit_id=fleet.other.pk, job_ref="J-2", out_at=out, override_reason="test hire")
    UnitCapacitor.objects.filter(unit=fleet.other).update(rated_life_h=12345)
    units_mark_changed(unit_ids=[fleet.other.pk])
    workflows.rental_check_in(unit_id=fleet.other.pk, in_at=out + dt.timedelta(days=2), venue_ambient_c=31.0,
                              powered_hours=20.0)
    assert _pack_matches_rows(fleet.other.pk)
    assert set(P.unpack_many([ThermalHistory.objects.get(unit=fleet.other).parts])["rated_life_h"]) == {12345.0}


def test_the_forecast_after_a_check_in_takes_what_the_check_in_wrote_instead_of_reading_it(fleet):
    """The check-in hands the unit's row it locked and wrote, the history it
    wrote and the home's temperatures it read to the forecast that follows:
    the same arrays, three queries fewer."""
    import dataclasses

    from django.db import connection, transaction
    from django.test.utils import CaptureQueriesContext

    from scheduling.loader import unit_rows
    from scheduling.thermal import thermal_check_in

    unit_id = fleet.other.pk
    with transaction.atomic():
        rental = _check_out_and_close(unit_id, "J-4")
        known = thermal_check_in(rental.unit, rental)
        assert known is not None
        # The row as the engine reads it from the table, the new records version included.
        assert known.unit_row == tuple(unit_rows(unit_ids=[unit_id])[0])
        with CaptureQueriesContext(connection) as given_queries:
            given = load_fleet(unit_ids=[unit_id], today=timezone.localdate(), known=known)
        with CaptureQueriesContext(connection) as read_queries:
            read = load_fleet(unit_ids=[unit_id], today=timezone.localdate())
    for f in dataclasses.fields(read):
        a, b = getattr(given, f.name), getattr(read, f.name)
        if isinstance(b, np.ndarray):
            assert np.array_equal(a, b, equal_nan=b.dtype.kind == "f"), f.name
        elif isinstance(b, dict):
            assert a.keys() == b.keys() and all(np.array_equal(a[k], b[k], equal_nan=True) for k in b), f.name
        else:
            assert a == b, f.name
    assert read.accounted_day[0] == pytest.approx(rental.in_at.timestamp() / 86400.0, abs=1 / 86400)
    assert len(read_queries) - len(given_queries) == 3


@pytest.mark.parametrize("profile", ["constant", "monthly", "samples"])
def test_the_check_in_reads_its_home_with_the_history_and_the_same_temperatures(fleet, profile):
    """The check-in's sync locks the history with its home's profile and
    temperatures in one query; the monthly temperatures it hands on equal
    those read afresh from the location (``location_monthly_temps``), for
    each way a home keeps them."""
    from django.db import connection, transaction
    from django.test.utils import CaptureQueriesContext

    from fleet.models import Location, TemperatureSample
    from scheduling.thermal import location_monthly_temps, thermal_check_in

    home = fleet.location
    if profile == "monthly":
        Location.objects.filter(pk=home.pk).update(profile=profile, monthly_temps_c=[12.5 + m for m in range(12)])
    elif profile == "samples":
        Location.objects.filter(pk=home.pk).update(profile=profile, constant_temp_c=21.0)
        TemperatureSample.objects.bulk_create([
            TemperatureSample(location=home, taken_at=dt.datetime(2025, m, d, 12, tzinfo=dt.timezone.utc),
                              temp_c=10.0 + m + d / 10) for m in (1, 2, 7) for d in (3, 17)])
    unit_id = fleet.other.pk
    with transaction.atomic():
        rental = _check_out_and_close(unit_id, "J-5")
        with CaptureQueriesContext(connection) as ctx:
            known = thermal_check_in(rental.unit, rental)
        assert known is not None  # the short way
        fresh = location_monthly_temps([home.pk])
    assert known.location_temps.keys() == fresh.keys() == {home.pk}
    assert np.array_equal(known.location_temps[home.pk], fresh[home.pk])
    assert not any('FROM "fleet_location"' in q["sql"] and "JOIN" not in q["sql"] for q in ctx.captured_queries)
    assert len(ctx.captured_queries) == (3 if profile == "samples" else 2)
