"""Units carry a records version; capacitors no longer point at the engine's snapshots."""

from django.db import migrations, models


class Migration(migrations.Migration):

    dependencies = [
        ("fleet", "0002_initial"),
        ("scheduling", "0002_snapshots_by_date"),
    ]

    operations = [
        migrations.RemoveField(
            model_name="unitcapacitor",
            name="baseline",
        ),
        migrations.AddField(
            model_name="unit",
            name="records_version",
            field=models.PositiveIntegerField(
                default=1, editable=False,
                help_text="Goes up whenever the records the unit's exposure is worked out from change (a hire "
                          "closed or edited, fitted parts, dates, prior use, home location, the model's "
                          "internal rise)."),
        ),
    ]
