"""Snapshots are found by (unit, install date) instead of a link from each
capacitor; histories record the records version and the hires they count.

Existing histories were kept up to date by the check-in and nightly services,
so they take the units' current version (1) and the counts of the hires they
hold; existing snapshots take the install date of the parts that pointed at
them (unreferenced ones are dropped: the engine writes what is missing).
"""

from collections import defaultdict

from django.db import migrations, models
from django.db.models import Count, F, Sum


def forwards(apps, schema_editor):
    Snapshot = apps.get_model("scheduling", "HistogramSnapshot")
    History = apps.get_model("scheduling", "ThermalHistory")
    Capacitor = apps.get_model("fleet", "UnitCapacitor")
    Rental = apps.get_model("fleet", "Rental")
    by_day = defaultdict(list)  # (unit, day) -> snapshot ids
    for snap_id, unit_id, day in (Capacitor.objects.filter(baseline__isnull=False)
                                  .values_list("baseline_id", "unit_id", "installed_on").distinct()):
        by_day[(unit_id, day)].append(snap_id)
    for (unit_id, day), ids in by_day.items():
        keep = min(ids)
        if len(ids) > 1:
            Capacitor.objects.filter(baseline_id__in=ids).update(baseline_id=keep)
        Snapshot.objects.filter(pk=keep).update(taken_on=day)
    Snapshot.objects.filter(taken_on__isnull=True).exclude(
        pk__in=Capacitor.objects.filter(baseline__isnull=False).values("baseline_id")).delete()
    counted = {
        row["unit_id"]: (row["n"], row["p"] or 0.0)
        for row in Rental.objects.filter(in_at__isnull=False, unit__thermal__isnull=False,
                                         out_at__lt=F("unit__thermal__accounted_until"))
        .values("unit_id").annotate(n=Count("id"), p=Sum("powered_hours")).order_by()
    }
    changed = []
    for history in History.objects.select_related("unit", "unit__gear_model"):
        unit = history.unit
        history.rentals_counted, history.powered_hours_counted = counted.get(history.unit_id, (0, 0.0))
        # as scheduling.exposure.exposure_basis writes it
        history.basis = (f"{unit.year_made}|{unit.joined_on.isoformat()}|{float(unit.prior_powered_h_per_year)!r}|"
                         f"{float(unit.prior_ambient_c)!r}|{float(unit.prior_storage_c)!r}|"
                         f"{float(unit.gear_model.internal_rise_k)!r}")
        changed.append(history)
    History.objects.bulk_update(changed, ["rentals_counted", "powered_hours_counted", "basis"], batch_size=1000)


class Migration(migrations.Migration):

    dependencies = [
        ("fleet", "0002_initial"),
        ("scheduling", "0001_initial"),
    ]

    operations = [
        migrations.AddField(
            model_name="histogramsnapshot",
            name="taken_on",
            field=models.DateField(null=True, help_text="Install date of the parts counted from this snapshot."),
        ),
        migrations.AddField(
            model_name="thermalhistory",
            name="records_version",
            field=models.PositiveIntegerField(
                default=1, help_text="The unit's records_version these histograms were brought up to date with."),
        ),
        migrations.AddField(
            model_name="thermalhistory",
            name="rentals_counted",
            field=models.PositiveIntegerField(
                default=0, help_text="Closed hires counted (those checked out before accounted_until)."),
        ),
        migrations.AddField(
            model_name="thermalhistory",
            name="powered_hours_counted",
            field=models.FloatField(default=0.0, help_text="hours; their powered hours summed"),
        ),
        migrations.AddField(
            model_name="thermalhistory",
            name="basis",
            field=models.CharField(
                blank=True, max_length=200,
                help_text="The unit's own figures the history was built from (year made, joining date, prior "
                          "use, the model's internal rise); a change means a rebuild."),
        ),
        migrations.RunPython(forwards, migrations.RunPython.noop),
    ]
