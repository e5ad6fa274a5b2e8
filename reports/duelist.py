"""The due list (the triage order) and the parts list for the top of it, read
from the stored forecasts in a fixed number of queries.

The due list: the units that need work, priority 1 first, then those due
within the policy horizon (or ``within_days``), as ``manage.py due_list``
orders them; retired units never.  The parts list: the replacement parts
(``scheduling.replacement.recommend``, common practice) for the positions the
triage says to replace in the first ``units`` units of the list, grouped by
capacitance, rated voltage, temperature rating, can size and mount, with a
spares margin.
"""

import datetime as dt
import math
from dataclasses import dataclass, field

import numpy as np
from django.db.models import Case, F, IntegerField, Q, When
from django.utils import timezone

from fleet.models import Unit, UnitCapacitor
from scheduling.loader import active_policy
from scheduling.models import UnitForecast
from scheduling.replacement import E6, E12, E24, recommend
from scheduling.services import stored_positions
from scheduling.triage import MEASURE, REPLACE

from . import formatting as fmt

STATUS_RANK = {"overdue": 0, "due": 1, "watch": 2, "ok": 3}
#: Spares ordered on top of the parts to fit: this share, rounded up, and at
#: least ``SPARES_MIN`` per line.  Common practice (a lifted pad or a part
#: fitted the wrong way round costs a part).
SPARES_SHARE = 0.10
SPARES_MIN = 1
#: Units at the top of the list the parts list covers by default.
PARTS_UNITS = 20


@dataclass
class DueRow:
    priority: int             # None: due, but not among the units that need work now
    asset_tag: str
    unit_id: int
    model: str
    location: str
    unit_status: str
    status: str
    status_label: str
    act_by: dt.date
    due_date: dt.date
    risk: float
    hire_risk: float
    horizon_days: int
    replace: int
    measure: int
    reason: str               # the first reason, one line
    reasons: list


@dataclass
class DueList:
    rows: list
    today: dt.date
    computed_at: dt.datetime   # the oldest forecast on the list
    within_days: int
    total: int                 # rows before any limit

    @property
    def need_work(self):
        return sum(1 for r in self.rows if r.priority)

    @property
    def cannot_forecast(self):
        """Rows of units whose figures the engine cannot use (listed first)."""
        return sum(1 for r in self.rows if r.status == UnitForecast.Status.INVALID)

    @property
    def due_only(self):
        """Rows due within the days asked for but not among the units that need work."""
        return len(self.rows) - self.need_work - self.cannot_forecast


def _actions(forecast):
    rec = stored_positions(forecast)
    if not rec.size:
        return 0, 0
    return int(np.count_nonzero(rec["action"] == REPLACE)), int(np.count_nonzero(rec["action"] == MEASURE))


def due_forecasts(*, within_days=None, today=None):
    """Stored forecasts on the due list, in triage order (a queryset), after
    the units that cannot be forecast (their figures need a technician first)."""
    today = today or timezone.localdate()
    if within_days is None:
        within_days = int(active_policy().horizon_days)
    qs = UnitForecast.objects.exclude(unit__status=Unit.Status.RETIRED)
    invalid = UnitForecast.Status.INVALID
    qs = qs.filter(Q(priority__isnull=False) | Q(due_date__lte=today + dt.timedelta(days=within_days))
                   | Q(status=invalid))
    cannot = Case(When(status=invalid, then=0), default=1, output_field=IntegerField())
    return qs.order_by(cannot, F("priority").asc(nulls_last=True), "due_date", "-risk", "unit__asset_tag")


def due_list(*, limit=None, within_days=None, today=None):
    """The due list; ``limit`` keeps the first rows only."""
    today = today or timezone.localdate()
    if within_days is None:
        within_days = int(active_policy().horizon_days)
    qs = due_forecasts(within_days=within_days, today=today)
    total = qs.count()
    if limit is not None:
        qs = qs[:limit]
    rows, oldest = [], None
    for f in qs.select_related("unit", "unit__gear_model", "unit__home_location"):
        u = f.unit
        replace, measure = _actions(f)
        reasons = list(f.reasons or [])
        rows.append(DueRow(
            priority=f.priority, asset_tag=u.asset_tag, unit_id=u.pk,
            model=f"{u.gear_model.maker} {u.gear_model.model_name}", location=u.home_location.name,
            unit_status=u.get_status_display(), status=f.status, status_label=f.get_status_display(),
            act_by=f.act_by, due_date=f.due_date, risk=f.risk, hire_risk=f.hire_risk, horizon_days=f.horizon_days,
            replace=replace, measure=measure, reason=reasons[0] if reasons else "", reasons=reasons))
        oldest = f.computed_at if oldest is None else min(oldest, f.computed_at)
    return DueList(rows=rows, today=today, computed_at=oldest, within_days=within_days, total=total)


# --- the parts list -------------------------------------------------------------------


def series_of(value):
    """The first IEC 60063 series (E6, E12, E24) holding ``value``, else ""."""
    from scheduling.replacement import in_series

    for name in ("E6", "E12", "E24"):
        if in_series(value, name):
            return name
    return ""


@dataclass
class PartLine:
    capacitance_uf: float
    rated_voltage_v: float
    rated_temp_c: float
    max_diameter_mm: float
    length_mm: float
    mount: str
    low_esr: bool
    rated_life_h: float = 0.0       # the longest endurance any position in the line asks for
    to_fit: int = 0                 # positions to replace
    to_measure: int = 0             # positions to read first (may need a part)
    positions: list = field(default_factory=list)   # (asset tag, designator) to replace
    measure_positions: list = field(default_factory=list)   # (asset tag, designator) to read first
    units: set = field(default_factory=set)
    hazards: dict = field(default_factory=dict)      # gear model name -> (its hazards in words, [asset tags])

    def hazards_text(self):
        """ "Maker Model (CB-0011, CB-0013): B+ about 470 V ... | Other Model (CB-0002): tube high voltage",
        one line; the models without a hazard to mention are left out."""
        return " | ".join(f"{name} ({', '.join(tags)}): {words}" for name, (words, tags) in self.hazards.items()
                         if words)

    @property
    def spares(self):
        return max(SPARES_MIN, math.ceil(SPARES_SHARE * self.to_fit)) if self.to_fit else 0

    @property
    def order(self):
        return self.to_fit + self.spares

    @property
    def series(self):
        return series_of(self.capacitance_uf)

    @property
    def key(self):
        return (self.capacitance_uf, self.rated_voltage_v, self.rated_temp_c, self.max_diameter_mm, self.length_mm,
                self.mount, self.low_esr)

    def positions_text(self, which=None):
        """ "CB-0032: C101, C102; CB-0001: C32", in the order the units came (the positions
        to replace, or ``which``)."""
        by_unit = {}
        for tag, designator in self.positions if which is None else which:
            by_unit.setdefault(tag, []).append(designator)
        return "; ".join(f"{tag}: {', '.join(sorted(ds, key=fmt.designator_key))}" for tag, ds in by_unit.items())

    def measure_text(self):
        """The positions to read first, as ``positions_text`` writes them."""
        return self.positions_text(self.measure_positions)

    def where_text(self):
        """Where the line's parts go and which positions to read first, for the printed list."""
        text = self.positions_text()
        if self.measure_positions:
            text += (" \u00b7 " if text else "") + "measure first: " + self.measure_text()
        return text

    def describe(self):
        text = (f"{fmt.capacitance(self.capacitance_uf)} {fmt.volts(self.rated_voltage_v)} "
                f"{fmt.temperature(self.rated_temp_c)}, {fmt.hours(self.rated_life_h)} or more, "
                f"can \u2264 {fmt.can_size(self.max_diameter_mm, self.length_mm)}, {self.mount}")
        return text + (", low ESR" if self.low_esr else "")


@dataclass
class PartsList:
    lines: list
    unit_tags: list
    today: dt.date
    units_asked: int

    @property
    def to_fit(self):
        return sum(line.to_fit for line in self.lines)

    @property
    def to_order(self):
        return sum(line.order for line in self.lines)


def parts_list(*, units=PARTS_UNITS, today=None):
    """The parts for the first ``units`` units that need work (priority order)."""
    if units < 1:
        raise ValueError("the parts list needs at least one unit")
    today = today or timezone.localdate()
    top = list(UnitForecast.objects.exclude(unit__status=Unit.Status.RETIRED).filter(priority__isnull=False)
               .order_by("priority").select_related("unit")[:units])
    actions = {}
    for f in top:
        for rec in stored_positions(f):
            if rec["action"] in (REPLACE, MEASURE):
                actions[int(rec["capacitor_id"])] = int(rec["action"])
    rank = {f.unit_id: f.priority for f in top}
    caps = sorted(UnitCapacitor.objects.filter(pk__in=list(actions)).select_related("position", "unit__gear_model"),
                  key=lambda c: (rank[c.unit_id], fmt.designator_key(c.position.designator)))
    lines = {}
    for c in caps:
        gm = c.unit.gear_model
        p = c.position
        rep = recommend(capacitance_uf=p.capacitance_uf, rated_voltage_v=max(c.rated_voltage_v, p.rated_voltage_v),
                        rated_life_h=max(c.rated_life_h, p.rated_life_h), diameter_mm=p.diameter_mm, mount=p.mount,
                        role=p.role, operating_voltage_v=p.operating_voltage_v)
        line = PartLine(rep.capacitance_uf, rep.rated_voltage_v, rep.rated_temp_c, rep.max_diameter_mm,
                        float(p.length_mm), rep.mount, rep.low_esr)
        line = lines.setdefault(line.key, line)
        line.rated_life_h = max(line.rated_life_h, rep.rated_life_h)
        if actions[c.pk] == REPLACE:
            line.to_fit += 1
            line.positions.append((c.unit.asset_tag, p.designator))
        else:
            line.to_measure += 1
            line.measure_positions.append((c.unit.asset_tag, p.designator))
        line.units.add(c.unit.asset_tag)
        tags = line.hazards.setdefault(str(gm), (hazard_words(gm), []))[1]
        if c.unit.asset_tag not in tags:
            tags.append(c.unit.asset_tag)
    ordered = sorted(lines.values(), key=lambda ln: (ln.mount, ln.capacitance_uf, ln.rated_voltage_v,
                                                      ln.max_diameter_mm, ln.length_mm, ln.low_esr))
    return PartsList(lines=[ln for ln in ordered if ln.to_fit or ln.to_measure],
                     unit_tags=[f.unit.asset_tag for f in top], today=today, units_asked=units)


def hazard_words(gm):
    """A gear model's hazards in one line: its hazard notes, else its tube and switch-mode
    flags in words ("" for none; mains alone, nearly every unit's, is not repeated here)."""
    notes = " ".join((gm.hazard_notes or "").split())
    if notes:
        return notes
    return ", ".join(words for on, words in ((gm.hazard_tube_hv, "tube high voltage"),
                                             (gm.hazard_smps, "switch-mode supply")) if on)


CSV_COLUMNS = ["capacitance_uf", "capacitance", "series", "rated_voltage_v", "rated_temp_c", "min_endurance_h",
               "max_diameter_mm", "length_mm", "mount", "low_esr", "to_fit", "spares", "order", "to_measure",
               "units", "positions", "measure_positions", "hazard_notes"]


def parts_csv_rows(plist):
    """The parts list as CSV rows (header first); units stored units, not words.  ``positions``:
    where the parts go; ``measure_positions``: the positions to read first; ``hazard_notes``:
    the hazards of the gear models the line's parts go into (whoever orders and fits them reads it)."""
    yield CSV_COLUMNS
    for ln in plist.lines:
        yield [f"{ln.capacitance_uf:g}", fmt.capacitance(ln.capacitance_uf), ln.series, f"{ln.rated_voltage_v:g}",
               f"{ln.rated_temp_c:g}", f"{ln.rated_life_h:g}", f"{ln.max_diameter_mm:g}", f"{ln.length_mm:g}",
               ln.mount, "yes" if ln.low_esr else "no", ln.to_fit, ln.spares, ln.order, ln.to_measure,
               len(ln.units), ln.positions_text(), ln.measure_text(), ln.hazards_text()]


__all__ = ["due_list", "due_forecasts", "parts_list", "parts_csv_rows", "series_of", "E6", "E12", "E24"]
