"""The audit trail of one unit, in words: who changed what and when on the
unit, its fitted capacitors, hires, service records, bench visits and
readings (django-simple-history keeps the versions; the policy's history is
in the admin).  One query per history table, whatever the unit's age.
"""

from fleet.models import BenchVisit, Reading, Rental, ServiceRecord, Unit, UnitCapacitor

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
        return f"{record.get_kind_display()} of {record.performed_on:%d %b %Y}"
    if model is BenchVisit:
        return "Bench visit"
    return "Reading"


def _fields(model):
    return [f for f in model._meta.fields if f.attname not in QUIET and f.name not in QUIET]


def _words(value):
    if value in (None, ""):
        return "—"
    text = str(value)
    return text if len(text) <= 60 else text[:57] + "…"


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
                change = "created"
            elif v.history_type == "-":
                change = "deleted"
            elif before is None:
                change = "changed"
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
