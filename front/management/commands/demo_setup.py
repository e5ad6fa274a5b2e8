"""``manage.py demo_setup``: load the demo fleet into an empty database and
make sure the demo logins work.

Safe to run again: the fleet is built only while the database has no units,
and the three demo users are created or have their passwords reset to the
documented ones (``fixtures/demo_fleet.py``, ``DEMO_USERS``).  Meant for a
demo or development database; the passwords are printed on the console.
"""

import time

from django.core.management.base import BaseCommand, CommandError

from fleet.models import Unit


class Command(BaseCommand):
    help = ("Build the demo fleet if the database has no units, and create or reset the demo logins "
            "(desk, technician, manager).  Run it again at any time.")

    def add_arguments(self, parser):
        parser.add_argument("--seed", type=int, default=None,
                            help="Random seed for the demo fleet (default: the scenario's own).")

    def handle(self, *args, seed=None, **options):
        from fixtures.demo_fleet import DEFAULT_SEED, HOUSE_NAME, DemoFleetExists, build_demo_fleet, create_demo_users

        if Unit.objects.exists():
            self.stdout.write(f"The database already has {Unit.objects.count()} units; the demo fleet was not built.")
        else:
            started = time.perf_counter()
            try:
                counts = build_demo_fleet(seed=DEFAULT_SEED if seed is None else seed)
            except DemoFleetExists as exc:
                raise CommandError(str(exc)) from None
            self.stdout.write(self.style.SUCCESS(
                f"Built the demo fleet of {HOUSE_NAME} in {time.perf_counter() - started:.1f} s: "
                f"{counts['gear_models']} gear models, {counts['positions']} capacitor positions, "
                f"{counts['units']} units, {counts['rentals']} hires ({counts['open_rentals']} out now), "
                f"{counts['service_records']} service records."
            ))
            from scheduling.services import forecast_refresh

            run = forecast_refresh()
            self.stdout.write(f"Forecast {run.fleet.n_units} units.")
        users = create_demo_users()
        self.stdout.write("Demo logins: " + ", ".join(f"{name} / {password}" for name, password, _ in users))
