"""The audit trail of one unit, in words: who changed what and when on the
unit, its fitted capacitors, hires, service records, bench visits and
readings (django-simple-history keeps the versions; the policy's history is
in the admin).  One query per history table, whatever the unit's age.
"""

import datetime as dt

from django.contrib.auth import get_user_model
from django.utils import timezone

from fleet.models import BenchVisit, Reading, Rental, ServiceRecord, Unit, UnitCapacitor
from reports import formatting as fmt

#: Versions read per table, and changes shown.
PER_TABLE = 300
SHOWN = 40

#: Fields not worth a line in the trail (bookkeeping).
QUIET = {"id", "history_id", "history_date", "history_change_reason", "history_type", "history_user",
         "history_user_id", "records_version", "unit", "unit_id"}


def _label(record, model):
    if model is Unit:
        return f"Unit {record.asset_tag}"
    if model is UnitCapacitor:
        return f"Capacitor at position {record.position_id}"
    if model is Rental:
        return f"Hire {record.job_ref}"
    if model is ServiceRecord:
        return f"{record.get_kind_display()} of {fmt.date(record.performed_on)}"
    if model is BenchVisit:
        return "Bench visit"
    return "Reading"


def _fields(model):
    """The fields worth a line: not bookkeeping, not who did it (the trail names who)."""
    user_model = get_user_model()
    return [f for f in model._meta.fields if f.attname not in QUIET and f.name not in QUIET
            and getattr(f, "related_model", None) is not user_model]


def _words(value):
    if value in (None, ""):
        return "—"
    if isinstance(value, dt.datetime):
        return fmt.moment(timezone.localtime(value))
    if isinstance(value, dt.date):
        return fmt.date(value)
    if isinstance(value, float):
        return f"{value:g}"
    text = str(value)
    return text if len(text) <= 60 else text[:57] + "…"


def _created(v, model, designators):
    """What a new record says, in a few words."""
    if model is UnitCapacitor:
        return (f"fitted: {v.capacitance_uf:g} µF {v.rated_voltage_v:g} V {v.rated_temp_c:g} °C "
                f"{v.rated_life_h:g} h, on {fmt.date(v.installed_on)}")
    if model is Reading:
        if v.kind == Reading.Kind.RAIL:
            return f"{v.rail_name} rail {v.rail_measured_v:+g} V" + (f" at {v.rail_load_ma:g} mA"
                                                                    if v.rail_load_ma is not None else "")
        bits = [f"ESR {v.esr_ohm:g} Ω" if v.esr_ohm is not None else "",
                f"{v.capacitance_uf:g} µF" if v.capacitance_uf is not None else "",
                f"leakage {v.leakage_ua:g} µA" if v.leakage_ua is not None else ""]
        return f"{designators.get(v.position_id, '')}: " + ", ".join(b for b in bits if b)
    if model is BenchVisit:
        return "taken to the bench" + (f": {_words(v.intake_notes)}" if v.intake_notes else "")
    return "created"


def unit_history(unit, limit=SHOWN):
    """The latest ``limit`` changes of the unit and the records tied to it,
    newest first: ``[{"when", "who", "what", "change"}]``."""
    designators = dict(UnitCapacitor.objects.filter(unit=unit).values_list("position_id", "position__designator"))
    sources = [
        (Unit, Unit.history.filter(id=unit.pk)),
        (UnitCapacitor, UnitCapacitor.history.filter(unit_id=unit.pk)),
        (Rental, Rental.history.filter(unit_id=unit.pk)),
        (ServiceRecord, ServiceRecord.history.filter(unit_id=unit.pk)),
        (BenchVisit, BenchVisit.history.filter(unit_id=unit.pk)),
        (Reading, Reading.history.filter(unit_id=unit.pk)),
    ]
    entries = []
    for model, qs in sources:
        versions = list(qs.select_related("history_user").order_by("-history_date", "-history_id")[:PER_TABLE])
        versions.reverse()
        fields = _fields(model)
        last = {}
        for v in versions:
            before = last.get(v.id)
            last[v.id] = v
            if v.history_type == "+":
                change = _created(v, model, designators)
            elif v.history_type == "-":
                change = "deleted"
            elif before is None:
                change = _created(v, model, designators) if model is UnitCapacitor else "changed"
            else:
                diffs = [f"{f.verbose_name}: {_words(getattr(before, f.attname))} → {_words(getattr(v, f.attname))}"
                         for f in fields if getattr(before, f.attname) != getattr(v, f.attname)]
                if not diffs:
                    continue
                change = "; ".join(diffs)
            what = _label(v, model)
            if model is UnitCapacitor:
                what = f"Capacitor {designators.get(v.position_id, v.position_id)}"
            user = v.history_user
            entries.append({"when": v.history_date, "what": what, "change": change,
                            "who": (user.get_full_name() or user.get_username()) if user else "system"})
    entries.sort(key=lambda e: e["when"], reverse=True)
    return entries[:limit]
