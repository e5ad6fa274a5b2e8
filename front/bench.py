"""The workshop's loop: bench intake, readings that move the forecast at once,
a recap at the bench, release.

Each is one function that the bench pages, the management commands
(``bench_intake``, ``record_reading``, ``recap``, ``release``) and the tests
call alike, in one transaction.  The register's services
(``fleet.bench_services``, ``fleet.services``) write the records; the engine
(``scheduling``) recomputes the unit's forecast before the function returns.
"""

from dataclasses import dataclass

import numpy as np
from django.db import transaction
from django.utils import timezone

from fleet import bench_services as bench_register
from fleet.bench_services import pump_pairs
from fleet.models import Reading, Role, Unit, UnitCapacitor
from fleet.services import RATING_FIELDS, ServiceError
from scheduling import physics
from scheduling.replacement import recommend
from scheduling.services import forecast_compute, forecast_refresh
from scheduling.thermal import thermal_sync

from . import selectors
from .workflows import service_record_recap


@dataclass
class ForecastGlance:
    """What a technician watches move: the unit's status, due date and risk,
    and one position's (or a pump pair's) damage and predicted figures."""

    status: str
    due_date: object
    risk: float
    horizon_days: int
    positions: dict  # designator -> {"damage", "esr_ohm", "capacitance_uf", "threshold"}


def _glance(run):
    if not run.fleet.n_units:
        return None
    fa, r = run.fleet, run.result
    positions = {}
    for i in run.rows_of(0):
        positions[fa.pos_designator[fa.position_index[i]]] = {
            "damage": float(r.damage[i]), "esr_ohm": float(r.esr_ohm[i]),
            "capacitance_uf": float(r.capacitance_f[i]) * 1e6, "threshold": float(r.threshold[i]),
        }
    due = r.due_day[0]
    return ForecastGlance(status=r.status[0], due_date=None if np.isnan(due) else run.unit_dict(0, False)["due_date"],
                          risk=float(r.risk[0]), horizon_days=int(run.policy.horizon_days), positions=positions)


@transaction.atomic
def bench_intake(*, unit_id, notes="", user=None, at=None):
    """Bring a unit to the bench (from hold, or any unit not out): status
    bench, with the intake notes, who and when.  Returns the bench visit."""
    return bench_register.bench_visit_open(unit_id=unit_id, notes=notes, user=user, at=at)


def _predicted_rail(run, pump, load_ma, input_v):
    """The rail the forecast predicts for the pump (flying, reservoir) at this load."""
    glance = _glance(run)
    fly, res = pump
    d_f = glance.positions[fly.position.designator]["damage"]
    d_r = glance.positions[res.position.designator]["damage"]
    vin = input_v if input_v is not None else fly.position.pump_input_v
    return float(physics.inverter_output_v(
        vin, load_ma / 1000.0, fly.position.pump_freq_hz, physics.capacitance_at_damage(fly.capacitance_uf * 1e-6, d_f),
        physics.capacitance_at_damage(res.capacitance_uf * 1e-6, d_r), physics.esr_at_damage(fly.initial_esr_ohm, d_f),
        physics.esr_at_damage(res.initial_esr_ohm, d_r), fly.position.pump_switch_ohm or 0.0))


@dataclass
class ReadingOutcome:
    reading: Reading
    before: ForecastGlance
    after: ForecastGlance

    def moved(self):
        """The read positions: {designator: (damage before, damage after)}."""
        names = []
        if self.reading.kind == Reading.Kind.CAPACITOR:
            names = [self.reading.position.designator]
        elif self.reading.pump_position_id:
            names = [self.reading.pump_position.designator, self.reading.pump_position.pump_partner]
        return {n: (self.before.positions[n]["damage"], self.after.positions[n]["damage"]) for n in names
                if n in self.before.positions and n in self.after.positions}


@transaction.atomic
def bench_reading_record(*, unit_id, designator="", esr_ohm=None, esr_freq_hz=None, capacitance_uf=None,
                         leakage_ua=None, rail_name="", rail_expected_v=None, rail_measured_v=None, rail_load_ma=None,
                         rail_input_v=None, pump="", user=None, at=None, notes=""):
    """Record a bench reading and recompute the unit's forecast at once.

    The reading stores what the forecast predicted for it just before (ESR and
    capacitance of the position, or the pump's rail at the reading's load).
    Returns a ReadingOutcome with the forecast before and after.  Raises
    ``ServiceError`` (unknown position, unit not on the bench) or
    ``ValidationError`` (a reading that cannot be right, per field).
    """
    at = at or timezone.now()
    today = timezone.localdate(at)
    thermal_sync(unit_ids=[unit_id])
    before_run = forecast_compute(unit_ids=[unit_id], today=today)
    before = _glance(before_run)
    predicted = {}
    if before is not None and designator:
        p = before.positions.get(designator.strip().upper())
        if p is not None:
            predicted = {"esr_ohm": p["esr_ohm"], "capacitance_uf": p["capacitance_uf"]}
    elif before is not None and rail_measured_v is not None and rail_load_ma and rail_load_ma > 0:
        pairs = pump_pairs(unit_id)
        chosen = pairs.get((pump or "").strip().upper()) or (next(iter(pairs.values())) if len(pairs) == 1 else None)
        if chosen is not None and chosen[0].position.designator in before.positions:
            vin = rail_input_v if rail_input_v is not None and rail_input_v > 0 else None
            predicted = {"rail_v": _predicted_rail(before_run, chosen, rail_load_ma, vin)}
    reading = bench_register.reading_record(
        unit_id=unit_id, designator=designator, esr_ohm=esr_ohm, esr_freq_hz=esr_freq_hz,
        capacitance_uf=capacitance_uf, leakage_ua=leakage_ua, rail_name=rail_name, rail_expected_v=rail_expected_v,
        rail_measured_v=rail_measured_v, rail_load_ma=rail_load_ma, rail_input_v=rail_input_v, pump=pump,
        predicted=predicted, user=user, at=at, notes=notes)
    after = _glance(forecast_refresh(unit_ids=[unit_id], today=today))
    return ReadingOutcome(reading=reading, before=before, after=after)


# --- recap at the bench ------------------------------------------------------

ALL_ELECTROLYTICS = "all"


def recap_positions(*, unit_id, choice=ALL_ELECTROLYTICS, role="", designators=()):
    """The fitted capacitors a recap covers: every electrolytic of the unit,
    those of one role, or the designators picked.  Raises ServiceError for an
    unknown role or designator, or an empty choice."""
    caps = list(UnitCapacitor.objects.filter(unit_id=unit_id).select_related("position", "unit"))
    caps.sort(key=lambda c: _designator_key(c.position.designator))
    if not caps:
        raise ServiceError("The unit has no capacitor positions.")
    tag = caps[0].unit.asset_tag
    if choice == ALL_ELECTROLYTICS:
        return caps
    if choice == "role":
        if role not in Role.values:
            raise ServiceError(f"No role {role!r}.")
        chosen = [c for c in caps if c.position.role == role]
        if not chosen:
            raise ServiceError(f"{tag} has no {Role(role).label.lower()} position.")
        return chosen
    wanted = [d.strip().upper() for d in designators if d.strip()]
    if not wanted:
        raise ServiceError("Pick at least one position.")
    by_des = {c.position.designator.upper(): c for c in caps}
    unknown = [d for d in wanted if d not in by_des]
    if unknown:
        raise ServiceError(f"{tag} has no position {', '.join(unknown)}.")
    return [by_des[d] for d in dict.fromkeys(wanted)]


def _designator_key(designator):
    import re

    prefix, number, rest = re.match(r"([A-Za-z]*)(\d*)(.*)", designator).groups()
    return (prefix.upper(), int(number) if number else -1, rest)


def replacement_suggestion(cap):
    """The suggested new part for a fitted capacitor, as the register's
    ratings (``scheduling.replacement.recommend``: same capacitance, rated
    voltage at least the original's, 105 degC, endurance at least the
    original's and 2,000 h, a can no wider), keeping the fitted part's ESR or
    tan delta figure, which a new part of the same series does not exceed."""
    pos = cap.position
    rec = recommend(capacitance_uf=cap.capacitance_uf, rated_voltage_v=cap.rated_voltage_v,
                    rated_life_h=cap.rated_life_h, diameter_mm=cap.diameter_mm, mount=cap.mount, role=pos.role,
                    operating_voltage_v=pos.operating_voltage_v)
    ratings = rec.as_ratings()
    ratings.update(length_mm=cap.length_mm, esr_ohm=cap.esr_ohm, tan_delta=cap.tan_delta)
    return ratings, rec.low_esr


def replacement_errors(cap, ratings):
    """Messages for a replacement that cannot go in: it would not fit (a wider
    can), it is rated below the circuit's working voltage, or below the
    temperature or endurance of the part it replaces."""
    errors = []
    des = cap.position.designator
    for field in ("capacitance_uf", "rated_voltage_v", "rated_temp_c", "rated_life_h", "diameter_mm", "length_mm"):
        value = ratings.get(field)
        if value is None or not value > 0:
            errors.append(f"{des}: give the new part's {field.split('_')[0].replace('rated', 'rating')} "
                          "(above zero).")
    if errors:
        return errors
    if ratings["diameter_mm"] > cap.diameter_mm + 1e-9:
        errors.append(f"{des}: a {ratings['diameter_mm']:g} mm can is wider than the {cap.diameter_mm:g} mm one "
                      "fitted; it will not fit.")
    if ratings["rated_voltage_v"] < (cap.position.operating_voltage_v or 0.0):
        errors.append(f"{des}: rated {ratings['rated_voltage_v']:g} V is below the circuit's "
                      f"{cap.position.operating_voltage_v:g} V.")
    if ratings["rated_voltage_v"] < cap.rated_voltage_v:
        errors.append(f"{des}: rated {ratings['rated_voltage_v']:g} V is below the original's "
                      f"{cap.rated_voltage_v:g} V.")
    return errors


@transaction.atomic
def bench_recap(*, unit_id, replacements, removed_readings=None, user=None, technician_name="", notes="",
                signed_off=True, performed_on=None):
    """Recap a unit on the bench in one transaction.

    ``replacements`` maps a designator to the new part's ratings (any left out
    are the suggestion's, :func:`replacement_suggestion`); ``removed_readings``
    maps a designator to readings of the part taken out (``esr_ohm``,
    ``esr_freq_hz``, ``capacitance_uf``), kept as findings.  The record is
    signed off by ``user`` when ``signed_off``.  The new parts count their
    damage from the recap; the forecast is recomputed at once.  Returns the
    service record.
    """
    unit = Unit.objects.get(pk=unit_id)
    if unit.status != Unit.Status.BENCH:
        raise ServiceError(f"{unit.asset_tag} is {unit.get_status_display().lower()}, not on the bench; "
                           "take it in first.")
    if not replacements:
        raise ServiceError("Choose at least one position to replace.")
    caps = {c.position.designator.upper(): c for c in
            UnitCapacitor.objects.filter(unit_id=unit_id).select_related("position")}
    unknown = sorted(d for d in replacements if d.upper() not in caps)
    if unknown:
        raise ServiceError(f"{unit.asset_tag} has no position {', '.join(unknown)}.")
    full, errors = {}, []
    for des, given in replacements.items():
        cap = caps[des.upper()]
        ratings, _ = replacement_suggestion(cap)
        ratings.update({k: v for k, v in (given or {}).items() if v is not None and k in RATING_FIELDS})
        if given and given.get("esr_ohm") is not None:
            ratings["tan_delta"] = given.get("tan_delta")
        errors += replacement_errors(cap, ratings)
        full[cap.position.designator] = ratings
    if errors:
        raise ServiceError(" ".join(errors))
    at = timezone.now()
    findings = []
    for des, values in (removed_readings or {}).items():
        if des.upper() not in caps or not any(values.get(k) is not None for k in ("esr_ohm", "capacitance_uf")):
            continue
        findings.append(bench_register.reading_record(
            unit_id=unit_id, designator=des, esr_ohm=values.get("esr_ohm"), esr_freq_hz=values.get("esr_freq_hz"),
            capacitance_uf=values.get("capacitance_uf"), user=user, at=at, part_removed=True,
            notes="Part taken out at the recap."))
    visit = bench_register.open_visit(unit_id)
    record = service_record_recap(
        unit_id=unit_id, performed_on=performed_on or timezone.localdate(at), replacements=full, technician=user,
        technician_name=technician_name, notes=notes, signed_off_by=user if signed_off else None, bench_visit=visit)
    if findings:
        Reading.objects.filter(pk__in=[r.pk for r in findings]).update(service_record=record)
    return record


@transaction.atomic
def bench_release(*, unit_id, keep_held_reason="", notes="", user=None):
    """The unit leaves the bench: to available, or kept held with a reason the
    desk can read.  Returns the bench visit."""
    return bench_register.bench_visit_close(unit_id=unit_id, keep_held_reason=keep_held_reason, notes=notes,
                                            user=user)


def unit_by_tag_or_error(tag):
    """The unit with this asset tag (any case), or ServiceError with a one-line message."""
    clean = "".join((tag or "").split()).upper()
    unit = selectors.tagged(Unit.objects.all(), clean) if clean else None
    if unit is None:
        raise ServiceError(f"No unit has the asset tag {clean or tag!r}.")
    return unit


