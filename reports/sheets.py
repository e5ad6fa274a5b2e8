"""What a unit's service sheet says, gathered in a fixed number of queries.

``unit_sheet(unit_id)`` returns a :class:`UnitSheet` (plain data, no model
instances) that ``reports.pdf.sheet`` draws; ``sheet_pdf`` does both.  The
figures are the stored forecast's, the same as the unit page's.
"""

import datetime as dt
from dataclasses import dataclass, field

import numpy as np
from django.db import models
from django.db.models import Count, Sum
from django.utils import timezone

from fleet.models import Location, Mount, Reading, Rental, Role, Unit, UnitCapacitor
from scheduling import histogram as H
from scheduling.days import date_to_day, day_to_date
from scheduling.loader import active_policy
from scheduling.models import UnitForecast
from scheduling.reasons import action_words
from scheduling.replacement import recommend
from scheduling.services import stored_positions
from scheduling.thresholds import DAMAGE_THRESHOLD_CAP
from scheduling.trajectory import damage_at
from scheduling.triage import ACTION_NAMES

from . import formatting as fmt
from .benchcheck import PumpPart, pump_check
from .safety import safety_box

#: Positions drawn in the damage chart (the worst by life used).
CHART_POSITIONS = 5
#: Years the chart looks ahead of today.
CHART_YEARS_AHEAD = 5
MOUNT_SHORT = {Mount.RADIAL: "radial", Mount.AXIAL: "axial", Mount.SMD: "SMD"}


class UnknownUnit(LookupError):
    """No unit has that asset tag (or id)."""


@dataclass
class LastReading:
    """A position's latest bench reading of the part fitted now (ESR and/or capacitance)."""
    taken_on: dt.date
    by: str                   # a readable name, else the username; "" when not recorded
    esr_ohm: float = None
    esr_freq_hz: float = None
    capacitance_uf: float = None
    leakage_ua: float = None
    predicted_esr_ohm: float = None
    predicted_capacitance_uf: float = None


def person(user):
    """A user as people read the name: the full name, else the username ("" for none)."""
    if user is None:
        return ""
    return user.get_full_name() or user.get_username()


def last_readings(unit):
    """{position id: LastReading} of the unit's fitted parts, in one query: each
    position's latest reading with a measured ESR or capacitance (readings of
    parts since replaced are findings, not about the part fitted now)."""
    qs = (Reading.objects.filter(unit=unit, kind=Reading.Kind.CAPACITOR, part_removed=False)
          .filter(models.Q(esr_ohm__isnull=False) | models.Q(capacitance_uf__isnull=False))
          .select_related("taken_by").order_by("position_id", "-taken_at", "-id"))
    out = {}
    for r in qs:
        if r.position_id in out:
            continue
        out[r.position_id] = LastReading(
            taken_on=timezone.localdate(r.taken_at), by=person(r.taken_by), esr_ohm=r.esr_ohm,
            esr_freq_hz=r.esr_freq_hz, capacitance_uf=r.capacitance_uf, leakage_ua=r.leakage_ua,
            predicted_esr_ohm=r.predicted_esr_ohm, predicted_capacitance_uf=r.predicted_capacitance_uf)
    return out


@dataclass
class RailReading:
    """A supply rail's latest bench reading."""
    name: str
    measured_v: float
    taken_on: dt.date
    by: str
    expected_v: float = None
    load_ma: float = None
    predicted_v: float = None


def last_rail_readings(unit):
    """The latest reading of each of the unit's supply rails (by name), in one query."""
    qs = (Reading.objects.filter(unit=unit, kind=Reading.Kind.RAIL).select_related("taken_by")
          .order_by("-taken_at", "-id"))
    out = {}
    for r in qs:
        name = r.rail_name or "rail"
        if name not in out:
            out[name] = RailReading(name=name, measured_v=r.rail_measured_v, taken_on=timezone.localdate(r.taken_at),
                                    by=person(r.taken_by), expected_v=r.rail_expected_v, load_ma=r.rail_load_ma,
                                    predicted_v=r.predicted_rail_v)
    return sorted(out.values(), key=lambda rail: rail.name)


@dataclass
class SheetRow:
    designator: str
    role: str                 # display name
    role_code: str
    capacitance_uf: float
    rated_voltage_v: float
    rated_temp_c: float
    rated_life_h: float
    diameter_mm: float
    length_mm: float
    mount: str
    installed_on: dt.date
    original: bool
    operating_voltage_v: float
    damage: float = None      # None: not yet forecast
    threshold: float = None
    esr_now_ohm: float = None
    capacitance_now_uf: float = None
    action: str = ""          # replace / measure / leave ("" not yet forecast)
    action_line: str = ""
    replacement: object = None  # scheduling.replacement.Replacement
    rate_per_day: float = None  # projected damage per day (stored with the forecast)
    last_reading: LastReading = None  # the latest bench reading of the part fitted now

    damage_limit: float = 1.0   # the policy's share of the threshold at which a part is due

    @property
    def life_used(self):
        limit = None if self.threshold is None else self.threshold * self.damage_limit
        return fmt.life_used(self.damage, limit)

    @property
    def beyond_model(self):
        return self.damage is not None and self.damage > DAMAGE_THRESHOLD_CAP


@dataclass
class Exposure:
    powered_total_h: float = None      # every powered hour counted, prior use included
    fleet_powered_h: float = 0.0       # hours powered on hires since it joined
    hires: int = 0
    hottest: list = field(default_factory=list)   # (venue degC, job ref, date in)
    home: str = ""
    home_profile: str = ""
    storage_median_c: float = None     # unpowered hours, weighted
    storage_p95_c: float = None


@dataclass
class ChartSeries:
    designator: str
    role: str
    years: list        # decimal years
    life_used: list    # damage / its limit (1 = at the limit)


@dataclass
class UnitSheet:
    asset_tag: str
    maker: str
    model_name: str
    serial: str
    location: str
    year_made: int
    unit_status: str
    printed_on: dt.date
    printed_at: dt.datetime
    hazards: dict
    model_notes: str
    exposure: Exposure
    forecast: dict            # None: not yet forecast
    rows: list
    safety: object            # reports.safety.SafetyBox
    pumps: list               # reports.benchcheck.PumpCheck
    chart: list               # ChartSeries, worst first
    chart_today_year: float = None
    damage_limit: float = 1.0
    rails: list = field(default_factory=list)   # RailReading, the latest of each rail

    @property
    def title(self):
        return f"{self.asset_tag} · {self.maker} {self.model_name}"

    def action_counts(self):
        counts = {"replace": 0, "measure": 0, "leave": 0}
        for r in self.rows:
            if r.action in counts:
                counts[r.action] += 1
        return counts


def _weighted_percentile_c(hist, q):
    total = float(hist.sum())
    if total <= 0:
        return None
    cum = np.cumsum(hist) / total
    return float(H.BIN_CENTRES_C[min(int(np.searchsorted(cum, q)), H.N_BINS - 1)])


def _profile_words(loc):
    if loc.profile == Location.Profile.MONTHLY and loc.monthly_temps_c:
        temps = loc.monthly_temps_c
        hot = max(range(12), key=lambda i: temps[i])
        return (f"monthly means {fmt.temperature(min(temps))}\u2013{fmt.temperature(max(temps))}, "
                f"warmest in {dt.date(2000, hot + 1, 1):%B}")
    if loc.profile == Location.Profile.SAMPLES:
        return "logged temperature samples" + (f", else {fmt.temperature(loc.constant_temp_c)}"
                                               if loc.constant_temp_c is not None else "")
    return f"constant {fmt.temperature(loc.constant_temp_c)}"


def _exposure(unit):
    ex = Exposure(home=unit.home_location.name, home_profile=_profile_words(unit.home_location))
    thermal = getattr(unit, "thermal", None)
    if thermal is not None:
        ex.powered_total_h = float(H.from_bytes(thermal.powered).sum())
        unpowered = H.from_bytes(thermal.unpowered)
        ex.storage_median_c = _weighted_percentile_c(unpowered, 0.5)
        ex.storage_p95_c = _weighted_percentile_c(unpowered, 0.95)
    closed = Rental.objects.filter(unit=unit, in_at__isnull=False)
    agg = closed.aggregate(n=Count("id"), h=Sum("powered_hours"))
    ex.hires, ex.fleet_powered_h = agg["n"] or 0, float(agg["h"] or 0.0)
    hottest = closed.order_by("-venue_ambient_c", "-in_at").values_list("venue_ambient_c", "job_ref", "in_at")[:3]
    ex.hottest = [(t, job, timezone.localtime(at).date()) for t, job, at in hottest]
    return ex


def _forecast_dict(stored, today):
    if stored is None:
        return None
    due = stored.due_date
    return {
        "status": stored.status, "status_label": stored.get_status_display(), "act_by": stored.act_by,
        "act_by_words": fmt.today_or_date(stored.act_by, today), "priority": stored.priority,
        "hire_risk": stored.hire_risk, "risk": stored.risk, "horizon_days": stored.horizon_days,
        "risk_words": fmt.risk_sentence(stored.risk, stored.horizon_days),
        "hire_risk_words": fmt.hire_risk_sentence(stored.hire_risk),
        "due_date": due, "past_limit_since": due if due is not None and due < today else None,
        "reasons": list(stored.reasons or []), "storage_reform": stored.storage_reform,
        "computed_at": stored.computed_at,
    }


def _rows(caps, stored, policy, today, readings=None):
    readings = readings or {}
    predicted = {int(r["capacitor_id"]): r for r in stored_positions(stored)} if stored is not None else {}
    rows = []
    for c in caps:
        p = c.position
        row = SheetRow(
            designator=p.designator, role=p.get_role_display(), role_code=p.role, capacitance_uf=c.capacitance_uf,
            rated_voltage_v=c.rated_voltage_v, rated_temp_c=c.rated_temp_c, rated_life_h=c.rated_life_h,
            diameter_mm=c.diameter_mm, length_mm=c.length_mm, mount=MOUNT_SHORT.get(c.mount, c.mount),
            installed_on=c.installed_on, original=c.is_original, operating_voltage_v=p.operating_voltage_v or 0.0,
            damage_limit=policy.damage_limit, last_reading=readings.get(c.position_id),
            replacement=recommend(capacitance_uf=p.capacitance_uf, rated_voltage_v=max(c.rated_voltage_v,
                                  p.rated_voltage_v), rated_life_h=max(c.rated_life_h, p.rated_life_h),
                                  diameter_mm=p.diameter_mm, mount=p.mount, role=p.role,
                                  operating_voltage_v=p.operating_voltage_v),
        )
        rec = predicted.get(c.pk)
        if rec is not None:
            row.damage, row.threshold = float(rec["damage"]), float(rec["threshold"])
            row.esr_now_ohm = float(rec["esr_ohm"])
            row.rate_per_day = float(rec["rate_per_day"])
            row.capacitance_now_uf = float(rec["capacitance_f"]) * 1e6
            row.action = ACTION_NAMES[int(rec["action"])]
            share = row.damage / row.threshold if row.threshold > 0 else None
            row.action_line = action_words(
                rec["action"], rec["why"], p.role, share=share,
                age_years=(today - c.installed_on).days / 365.25, age_limit_years=policy.calendar_age_years,
                min_rail_v=p.pump_min_rail_v, ripple_limit_v=p.reservoir_ripple_limit_v,
                max_corner_hz=p.coupling_max_corner_hz)
        rows.append(row)
    return rows


def _pumps(caps, rows):
    by_des = {c.position.designator: (c, r) for c, r in zip(caps, rows)}
    out = []
    for c, r in zip(caps, rows):
        p = c.position
        if p.role != Role.PUMP_FLYING or p.pump_partner not in by_des:
            continue
        rc, rr = by_des[p.pump_partner]
        if None in (p.pump_input_v, p.pump_load_a, p.pump_freq_hz, p.pump_min_rail_v):
            continue

        def part(cap, row):
            esr0 = cap.initial_esr_ohm
            return PumpPart(designator=cap.position.designator, capacitance_uf=cap.capacitance_uf, esr0_ohm=esr0,
                            capacitance_now_uf=row.capacitance_now_uf if row.damage is not None else cap.capacitance_uf,
                            esr_now_ohm=row.esr_now_ohm if row.damage is not None else esr0)

        out.append(pump_check(flying=part(c, r), reservoir=part(rc, rr), input_v=p.pump_input_v, load_a=p.pump_load_a,
                              pump_hz=p.pump_freq_hz, switch_ohm=p.pump_switch_ohm, min_rail_v=p.pump_min_rail_v))
    return out


def _chart(rows, policy, today):
    """The worst positions' life used over time, past and projected
    (``scheduling.trajectory``: even ageing since the part went in, then the
    stored rate of use).  Positions whose paths coincide (the same part in
    the same duty) share one line."""
    groups = {}
    for row in rows:
        if row.damage is None or not row.threshold or row.threshold <= 0 or row.rate_per_day is None:
            continue
        limit = row.threshold * policy.damage_limit
        # paths within 1 % of the limit of each other, now and a year ahead, draw as one
        key = (round(row.damage / limit, 2), round(row.rate_per_day / limit * 365.25, 2))
        groups.setdefault(key, []).append((row, limit))
    worst = sorted(groups.items(), key=lambda kv: -kv[0][0])[:CHART_POSITIONS]
    if not worst:
        return [], None
    today_day = date_to_day(today)
    firsts = [members[0] for _, members in worst]
    installed = np.array([date_to_day(r.installed_on) for r, _ in firsts])
    start = float(installed.min())
    # The paths are straight between their corners (the install date, today):
    # those, the ends and a yearly tick are all the points a line needs.
    end = today_day + CHART_YEARS_AHEAD * 365.25
    days = np.union1d(np.concatenate([installed, [start, today_day, end]]), np.arange(start, end, 365.25))
    paths = damage_at(days, damage_now=[r.damage for r, _ in firsts], rate_per_day=[r.rate_per_day for r, _ in firsts],
                      installed_day=installed, today_day=today_day)
    years = np.array([fmt.decimal_year(day_to_date(d)) for d in days])
    series = []
    for k, (_, members) in enumerate(worst):
        names = [m[0].designator for m in members]
        label = ", ".join(names[:3]) + (f" +{len(names) - 3}" if len(names) > 3 else "")
        roles = {m[0].role for m in members}
        drawn = ~np.isnan(paths[k])
        series.append(ChartSeries(label, roles.pop() if len(roles) == 1 else "", years[drawn].tolist(),
                                  (paths[k][drawn] / members[0][1]).tolist()))
    return series, fmt.decimal_year(today)


def unit_sheet(*, unit_id=None, asset_tag=None, today=None, resistor_ohm=None):
    """Everything one service sheet shows; raises :class:`UnknownUnit`."""
    qs = Unit.objects.select_related("gear_model", "home_location", "thermal")
    if asset_tag is not None:
        asset_tag = "".join(str(asset_tag).split()).upper()  # as typed or scanned
    try:
        unit = qs.get(pk=unit_id) if unit_id is not None else qs.get(asset_tag=asset_tag)
    except Unit.DoesNotExist:
        raise UnknownUnit(f"no unit has the asset tag {asset_tag!r}" if asset_tag is not None
                          else f"no unit has the id {unit_id!r}") from None
    today = today or timezone.localdate()
    stored = UnitForecast.objects.filter(unit=unit).first()
    policy = active_policy()
    caps = sorted(UnitCapacitor.objects.filter(unit=unit).select_related("position"),
                  key=lambda c: fmt.designator_key(c.position.designator))
    rows = _rows(caps, stored, policy, today, last_readings(unit))
    gm = unit.gear_model
    extra = {} if resistor_ohm is None else {"resistor_ohm": resistor_ohm}
    box = safety_box(designators=[r.designator for r in rows], capacitance_uf=[r.capacitance_uf for r in rows],
                     rated_voltage_v=[r.rated_voltage_v for r in rows],
                     mains_v=gm.mains_voltage_v if gm.hazard_mains else 0.0, hazard_mains=gm.hazard_mains,
                     tube_hv=gm.hazard_tube_hv, smps=gm.hazard_smps, has_smd=any(r.mount == "SMD" for r in rows),
                     storage_reform=bool(stored and stored.storage_reform), model_notes=gm.hazard_notes, **extra)
    chart, today_year = _chart(rows, policy, today)
    return UnitSheet(
        asset_tag=unit.asset_tag, maker=gm.maker, model_name=gm.model_name, serial=unit.serial or "",
        location=unit.home_location.name, year_made=unit.year_made, unit_status=unit.get_status_display(),
        printed_on=today, printed_at=timezone.localtime(),
        hazards={"mains": gm.hazard_mains, "tube_hv": gm.hazard_tube_hv, "smps": gm.hazard_smps,
                 "mains_v": gm.mains_voltage_v},
        model_notes=gm.notes or "", exposure=_exposure(unit), forecast=_forecast_dict(stored, today), rows=rows,
        safety=box, pumps=_pumps(caps, rows), chart=chart, chart_today_year=today_year,
        damage_limit=policy.damage_limit, rails=last_rail_readings(unit),
    )
