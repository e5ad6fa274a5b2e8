"""Register services of the workshop: bench intake, readings, release.

Each runs in one transaction and refuses, with a message for the user, what
the fleet's rules do not allow; a reading that cannot be right is refused
field by field (``django.core.exceptions.ValidationError`` with a message per
field), never silently corrected.  Like the rest of the register these know
nothing of the life engine: the workflows in ``front.bench`` call them and
then bring the forecast up to date.
"""

import re

from django.core.exceptions import ValidationError
from django.db import transaction
from django.utils import timezone

from scheduling import physics

from .bench_models import BenchVisit, Reading
from .models import Unit, UnitCapacitor
from .services import ServiceError, units_mark_changed
from .services import _by as by

#: An ESR reading below this fraction of the part's new ESR figure cannot be
#: right (a new part scatters below its data-sheet figure, but not by half).
#: Our assumption.
ESR_MIN_FRACTION_OF_NEW = 0.5
#: A capacitance reading above this multiple of the rating cannot be right:
#: the widest tolerance electrolytics are marked with is -20/+80 % (IEC 60062
#: code Z, from memory).
CAPACITANCE_MAX_MULTIPLE_OF_RATED = 1.8
#: ESR test frequency when none is given [Hz].
DEFAULT_ESR_FREQ_HZ = 100.0
#: Tolerance on a rail being "better than the converter can give" [V]: meter
#: and rounding.  Our assumption.
RAIL_SLACK_V = 0.05


def _unit_for_update(unit_id):
    return Unit.objects.select_for_update().get(pk=unit_id)


def open_visit(unit_id):
    return BenchVisit.objects.filter(unit_id=unit_id, closed_at__isnull=True).first()


@transaction.atomic
def bench_visit_open(*, unit_id, notes="", user=None, at=None):
    """Take a unit to the bench: from hold, or any unit not out on hire or
    retired.  Opens a bench visit (who, when, intake notes).  Returns it."""
    unit = _unit_for_update(unit_id)
    if unit.status == Unit.Status.OUT:
        raise ServiceError(f"{unit.asset_tag} is out on hire; check it in first.")
    if unit.status == Unit.Status.RETIRED:
        raise ServiceError(f"{unit.asset_tag} is retired.")
    visit = open_visit(unit.pk)
    if visit is not None:
        since = timezone.localtime(visit.opened_at)
        raise ServiceError(f"{unit.asset_tag} is already on the bench (since {since.day} {since:%b %Y %H:%M}).")
    visit = BenchVisit(unit=unit, opened_at=at or timezone.now(), opened_by=user, intake_notes=notes.strip(),
                       came_from=unit.status)
    by(visit, user).save()
    unit.status = Unit.Status.BENCH
    by(unit, user).save(update_fields=["status"])
    return visit


@transaction.atomic
def bench_visit_close(*, unit_id, keep_held_reason="", notes="", user=None, at=None):
    """The unit leaves the bench: released to available, or kept held with a
    reason the desk can read (``keep_held_reason``).  Returns the visit."""
    unit = _unit_for_update(unit_id)
    if unit.status != Unit.Status.BENCH:
        raise ServiceError(f"{unit.asset_tag} is {unit.get_status_display().lower()}, not on the bench; "
                           "take it in first.")
    reason = keep_held_reason.strip()
    visit = open_visit(unit.pk) or BenchVisit(unit=unit, opened_at=at or timezone.now(), came_from=unit.status)
    visit.closed_at, visit.closed_by = at or timezone.now(), user
    visit.outcome = BenchVisit.Outcome.HELD if reason else BenchVisit.Outcome.RELEASED
    visit.outcome_notes = reason or notes.strip()
    by(visit, user).save()
    unit.status = Unit.Status.HOLD if reason else Unit.Status.AVAILABLE
    unit.hold_reason = reason
    by(unit, user).save(update_fields=["status", "hold_reason"])
    return visit


def _expected_sign(name, expected_v):
    if expected_v is not None and expected_v != 0:
        return 1 if expected_v > 0 else -1
    text = (name or "").strip()
    if text.startswith("-"):
        return -1
    if text.startswith("+") or re.fullmatch(r"B\+.*", text, flags=re.IGNORECASE):
        return 1
    return 0


def pump_pairs(unit_id):
    """{flying designator: (flying UnitCapacitor, reservoir UnitCapacitor)} of a unit's charge pumps."""
    caps = {c.position.designator: c for c in
            UnitCapacitor.objects.filter(unit_id=unit_id).select_related("position")}
    pairs = {}
    for des, cap in caps.items():
        if cap.position.role == "pump_flying" and cap.position.pump_partner in caps:
            pairs[des] = (cap, caps[cap.position.pump_partner])
    return pairs


def capacitor_reading_errors(cap, *, esr_ohm=None, esr_freq_hz=None, capacitance_uf=None, leakage_ua=None):
    """{field: message} for a capacitor reading that cannot be right (empty when fine)."""
    errors = {}
    if esr_ohm is None and capacitance_uf is None and leakage_ua is None:
        errors["esr_ohm"] = "Give at least one of ESR, capacitance or leakage."
        return errors
    if esr_ohm is not None:
        new = cap.initial_esr_ohm
        if not esr_ohm > 0:
            errors["esr_ohm"] = "ESR must be above zero; a reading of zero or less cannot be right (check the leads)."
        elif esr_ohm < ESR_MIN_FRACTION_OF_NEW * new:
            errors["esr_ohm"] = (f"{esr_ohm:g} Ω is well below a new part's {new:.3g} Ω: check the meter "
                                 "(leads zeroed? the test frequency against the part's figure?).")
    if esr_freq_hz is not None and not esr_freq_hz > 0:
        errors["esr_freq_hz"] = "The test frequency must be above zero."
    if capacitance_uf is not None:
        if not capacitance_uf > 0:
            errors["capacitance_uf"] = "Capacitance must be above zero; a reading of zero or less cannot be right."
        elif capacitance_uf > CAPACITANCE_MAX_MULTIPLE_OF_RATED * cap.capacitance_uf:
            errors["capacitance_uf"] = (f"{capacitance_uf:g} µF is far above the part's {cap.capacitance_uf:g} µF "
                                        "(no electrolytic is marked beyond +80 %): check the meter's range and "
                                        "the part's value.")
    if leakage_ua is not None and leakage_ua < 0:
        errors["leakage_ua"] = "Leakage current cannot be negative."
    return errors


def rail_reading_errors(*, rail_name, rail_expected_v, rail_measured_v, rail_load_ma, rail_input_v, pump):
    """{field: message} for a rail reading that cannot be right; ``pump`` the
    (flying, reservoir) capacitors the rail comes from, or None."""
    errors = {}
    if not (rail_name or "").strip():
        errors["rail_name"] = "Name the rail (e.g. -5V)."
    if rail_measured_v is None:
        errors["rail_measured_v"] = "Give the measured voltage."
        return errors
    sign = _expected_sign(rail_name, rail_expected_v)
    if pump is not None:
        sign = -1
    if sign and rail_measured_v != 0 and (rail_measured_v > 0) != (sign > 0):
        kind = "negative" if sign < 0 else "positive"
        errors["rail_measured_v"] = (f"A {kind} rail cannot read {rail_measured_v:+g} V: check the probe and the "
                                     "ground clip (the wrong sign cannot be right).")
        return errors
    if rail_load_ma is not None and rail_load_ma < 0:
        errors["rail_load_ma"] = "The load current cannot be negative."
    if pump is None:
        return errors
    fly = pump[0].position
    if rail_load_ma is None or not rail_load_ma > 0:
        errors["rail_load_ma"] = (f"Give the load current the rail was measured at (the pump's design load is "
                                  f"{fly.pump_load_a * 1000:g} mA).")
        return errors
    vin = rail_input_v if rail_input_v is not None else fly.pump_input_v
    if rail_input_v is not None and not rail_input_v > 0:
        errors["rail_input_v"] = "The input rail of a charge pump must be above zero."
        return errors
    if abs(rail_measured_v) > vin:
        errors["rail_measured_v"] = (f"{rail_measured_v:g} V is more than the pump's {vin:g} V input: an inverter "
                                     "cannot give more than it gets; check the reading and the input rail.")
        return errors
    ideal = physics.inverter_output_v(vin, rail_load_ma / 1000.0, fly.pump_freq_hz, pump[0].capacitance_uf * 1e-6,
                                      pump[1].capacitance_uf * 1e-6, 0.0, 0.0, fly.pump_switch_ohm or 0.0)
    if abs(rail_measured_v) > abs(ideal) + RAIL_SLACK_V:
        errors["rail_measured_v"] = (f"{rail_measured_v:g} V at {rail_load_ma:g} mA is better than the pump gives "
                                     f"even with perfect capacitors ({ideal:.2f} V): check the load current and "
                                     "the input rail.")
    return errors


@transaction.atomic
def reading_record(*, unit_id, designator="", esr_ohm=None, esr_freq_hz=None, capacitance_uf=None,
                   leakage_ua=None, rail_name="", rail_expected_v=None, rail_measured_v=None, rail_load_ma=None,
                   rail_input_v=None, pump="", predicted=None, user=None, at=None, part_removed=False,
                   service_record=None, notes=""):
    """Record one bench reading of a unit on the bench.

    A capacitor reading names its position (``designator``); a rail reading
    its ``rail_name``.  A negative rail of a unit with one charge pump is
    taken to come from it (name the flying capacitor in ``pump`` when it has
    several).  ``predicted`` carries the forecast's figures at this moment
    (``esr_ohm``, ``capacitance_uf``, ``rail_v``).  Marks the unit's records
    changed, so the engine takes its histograms at the reading's date.
    Raises ``ServiceError`` for an unknown position or a unit not on the
    bench, ``ValidationError`` (per field) for a reading that cannot be right.
    """
    unit = _unit_for_update(unit_id)
    if unit.status != Unit.Status.BENCH:
        raise ServiceError(f"{unit.asset_tag} is {unit.get_status_display().lower()}, not on the bench; "
                           "take it in first.")
    predicted = predicted or {}
    reading = Reading(unit=unit, visit=open_visit(unit.pk), taken_at=at or timezone.now(), taken_by=user,
                      part_removed=part_removed, service_record=service_record, notes=notes.strip())
    designator = (designator or "").strip().upper()
    if designator:
        cap = (UnitCapacitor.objects.filter(unit=unit, position__designator__iexact=designator)
               .select_related("position").first())
        if cap is None:
            raise ServiceError(f"{unit.asset_tag} has no position {designator}.")
        errors = capacitor_reading_errors(cap, esr_ohm=esr_ohm, esr_freq_hz=esr_freq_hz,
                                          capacitance_uf=capacitance_uf, leakage_ua=leakage_ua)
        if errors:
            raise ValidationError(errors)
        reading.kind, reading.position = Reading.Kind.CAPACITOR, cap.position
        reading.esr_ohm, reading.capacitance_uf, reading.leakage_ua = esr_ohm, capacitance_uf, leakage_ua
        reading.esr_freq_hz = (esr_freq_hz or DEFAULT_ESR_FREQ_HZ) if esr_ohm is not None else None
        reading.predicted_esr_ohm = predicted.get("esr_ohm") if esr_ohm is not None else None
        reading.predicted_capacitance_uf = predicted.get("capacitance_uf") if capacitance_uf is not None else None
    else:
        pairs = pump_pairs(unit.pk)
        chosen = None
        pump = (pump or "").strip().upper()
        expected = _expected_sign(rail_name, rail_expected_v)
        negative = rail_measured_v is not None and (expected < 0 or (expected == 0 and rail_measured_v < 0))
        if pump:
            if pump not in pairs:
                raise ServiceError(f"{unit.asset_tag} has no charge pump with the flying capacitor {pump}.")
            chosen = pairs[pump]
        elif negative and len(pairs) == 1:
            chosen = next(iter(pairs.values()))
        elif negative and len(pairs) > 1:
            raise ServiceError(f"{unit.asset_tag} has {len(pairs)} charge pumps ({', '.join(sorted(pairs))}); "
                               "say which one makes this rail.")
        errors = rail_reading_errors(rail_name=rail_name, rail_expected_v=rail_expected_v,
                                     rail_measured_v=rail_measured_v, rail_load_ma=rail_load_ma,
                                     rail_input_v=rail_input_v, pump=chosen)
        if errors:
            raise ValidationError(errors)
        reading.kind = Reading.Kind.RAIL
        reading.rail_name = rail_name.strip()
        reading.rail_expected_v, reading.rail_measured_v = rail_expected_v, rail_measured_v
        reading.rail_load_ma, reading.rail_input_v = rail_load_ma, rail_input_v
        reading.pump_position = chosen[0].position if chosen else None
        reading.predicted_rail_v = predicted.get("rail_v") if chosen else None
    by(reading, user).save()
    if not part_removed:
        units_mark_changed(unit_ids=[unit.pk])
    return reading
