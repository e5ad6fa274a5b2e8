"""``manage.py demo_setup``: load the demo fleet into an empty database and
make sure the demo logins work.

Safe to run again: the fleet is built only while the database has no units,
and the three demo users are created or have their passwords reset to the
documented ones (``fixtures/demo_fleet.py``, ``DEMO_USERS``).  Meant for a
demo or development database; the passwords are printed on the console.
"""

import time

from django.core.management.base import BaseCommand, CommandError
from django.utils import timezone

from fleet.models import Unit
from fleet.roles import MANAGER, TECHNICIAN

DIGEST_ROLES = (MANAGER, TECHNICIAN)


class Command(BaseCommand):
    help = ("Build the demo fleet if the database has no units, and create or reset the demo logins "
            "(desk, technician, manager).  Run it again at any time.")

    def add_arguments(self, parser):
        parser.add_argument("--seed", type=int, default=None,
                            help="Random seed for the demo fleet (default: the scenario's own).")

    def handle(self, *args, seed=None, **options):
        from fixtures.demo_fleet import (DEFAULT_SEED, HOUSE_NAME, DemoFleetExists, build_demo_fleet,
                                         create_demo_users, credit_demo_readings, demo_technician)

        users = create_demo_users()   # first: the demo's bench readings name its technician
        technician = demo_technician()
        if Unit.objects.exists():
            self.stdout.write(f"The database already has {Unit.objects.count()} units; the demo fleet was not built.")
        else:
            started = time.perf_counter()
            try:
                counts = build_demo_fleet(seed=DEFAULT_SEED if seed is None else seed, technician=technician)
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
        if credit_demo_readings(technician):
            self.stdout.write(f"Named {technician.get_full_name() or technician.get_username()} on the demo's "
                              f"bench readings.")
        from fixtures.demo_fleet import add_demo_override

        if add_demo_override() is not None:
            self.stdout.write("Recorded the demo's one check-out against the forecast.")
        self.stdout.write("Demo logins: " + ", ".join(f"{name} / {password}" for name, password, _ in users))
        self._digest([name for name, _, role in users if role in DIGEST_ROLES])

    def _digest(self, usernames):
        """The demo's manager and technician take the digest (unless they opted
        out), and a new installation sends its first one a minute after start."""
        from django.contrib.auth import get_user_model

        from reports.digest.delivery import subscription_default
        from reports.schedule import ensure_default_schedule, schedule_first_digest

        for user in get_user_model().objects.filter(username__in=usernames):
            subscription_default(user=user)
        ensure_default_schedule()
        when = schedule_first_digest()
        if when is not None:
            self.stdout.write(f"A first digest goes to {', '.join(usernames)} at about "
                              f"{timezone.localtime(when):%H:%M} (the worker sends it; without EMAIL_HOST it is a "
                              f"file under var/mail/).")
