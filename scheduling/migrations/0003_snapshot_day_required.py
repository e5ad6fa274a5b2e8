from django.db import migrations, models


class Migration(migrations.Migration):

    dependencies = [
        ("fleet", "0003_records_version"),
        ("scheduling", "0002_snapshots_by_date"),
    ]

    operations = [
        migrations.AlterModelOptions(
            name="histogramsnapshot",
            options={"ordering": ["unit", "taken_on"]},
        ),
        migrations.AlterField(
            model_name="histogramsnapshot",
            name="taken_on",
            field=models.DateField(help_text="Install date of the parts counted from this snapshot."),
        ),
        migrations.AlterField(
            model_name="histogramsnapshot",
            name="taken_at",
            field=models.DateTimeField(help_text="The moment taken as that date's install time (noon, local)."),
        ),
        migrations.AlterField(
            model_name="thermalhistory",
            name="records_version",
            field=models.PositiveIntegerField(
                default=0, help_text="The unit's records_version these histograms were brought up to date with."),
        ),
        migrations.AddConstraint(
            model_name="histogramsnapshot",
            constraint=models.UniqueConstraint(fields=("unit", "taken_on"), name="snapshot_one_per_day"),
        ),
    ]
