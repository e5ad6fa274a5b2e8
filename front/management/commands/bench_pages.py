"""manage.py bench_pages: how fast every page answers on this database.

Prints figures; checks nothing (the budgets are read from the table: every
page p95 under 300 ms at 10,000 units, its queries independent of the fleet's
size, no page listing more than one page of rows).  `make bench` runs it on
the synthetic fleet after the life engine's benchmark.

Each page is requested through Django's test client in this process, so the
time is the server's (middleware, views, queries, templates), not the
network's.  The first request of each page warms caches and is not counted.
Users ``bench-desk``, ``bench-technician`` and ``bench-manager`` are created
in this database when missing.
"""

import logging
import statistics
import time

from django.conf import settings
from django.core.management.base import BaseCommand, CommandError
from django.db import connection
from django.db.models import Count
from django.test import Client
from django.test.utils import CaptureQueriesContext
from django.urls import reverse

from fleet.models import GearModel, Rental, Role, Unit, UnitCapacitor
from fleet.roles import DESK, MANAGER, TECHNICIAN, ensure_groups
from scheduling.models import UnitForecast

#: The budget the figures are read against [ms].
P95_BUDGET_MS = 300.0


def _user(role):
    from django.contrib.auth import get_user_model

    User = get_user_model()
    name = f"bench-{role}"
    user = User.objects.filter(username=name).first()
    if user is None:
        user = User.objects.create_user(username=name, password=None, is_staff=role == MANAGER)
        user.groups.add(ensure_groups()[role])
        if role == MANAGER:
            user.is_superuser = True  # the admin pages
            user.save(update_fields=["is_superuser"])
    return user


def _pages():
    """(role, label, url) for every page, with the fleet's own awkward cases:
    the unit with the most parts, a unit out on hire, the last page of lists."""
    biggest = (UnitCapacitor.objects.values("unit_id").annotate(n=Count("id")).order_by("-n").first() or {})
    unit = Unit.objects.filter(pk=biggest.get("unit_id")).first() or Unit.objects.first()
    out = Rental.objects.filter(in_at__isnull=True).select_related("unit").first()
    model = GearModel.objects.first()
    tag = unit.asset_tag
    pages = [
        (DESK, "start page (desk)", reverse("home")),
        (DESK, "unit card (desk)", reverse("unit_detail", args=[tag])),
        (DESK, "check-out", reverse("check_out") + f"?tag={tag}"),
        (DESK, "check-in", reverse("check_in") + (f"?tag={out.unit.asset_tag}" if out else "")),
        (DESK, "unit list", reverse("unit_list")),
        (DESK, "unit list, last page", reverse("unit_list") + "?page=last"),
        (TECHNICIAN, "start page (technician)", reverse("home")),
        (TECHNICIAN, "workshop", reverse("workshop")),
        (TECHNICIAN, "workshop, last page", reverse("workshop") + "?page=last"),
        (TECHNICIAN, "workshop, by role", reverse("workshop") + f"?role={Role.SUPPLY_RESERVOIR}"),
        (TECHNICIAN, "workshop, by model", reverse("workshop") + f"?gear_model={model.pk if model else ''}"),
        (TECHNICIAN, f"unit page ({unit.capacitors.count()} parts)", reverse("unit_detail", args=[tag])),
        (TECHNICIAN, "unit page, by role", reverse("unit_detail", args=[tag]) + "?view=role"),
        (TECHNICIAN, "unit search", reverse("unit_list") + "?q=" + tag[:4]),
        (TECHNICIAN, "404 (no such unit)", reverse("unit_detail", args=["NO-SUCH-UNIT"])),
        (MANAGER, "start page (manager)", reverse("home")),
        (MANAGER, "import and export", reverse("csv_import")),
        (MANAGER, "admin index", reverse("admin:index")),
        (MANAGER, "admin: hires", reverse("admin:fleet_rental_changelist")),
        (MANAGER, "admin: hires, search", reverse("admin:fleet_rental_changelist") + f"?q={tag}"),
        (MANAGER, "admin: gear models", reverse("admin:fleet_gearmodel_changelist")),
        (MANAGER, "admin: units", reverse("admin:fleet_unit_changelist")),
        (MANAGER, "admin: unit", reverse("admin:fleet_unit_change", args=[unit.pk])),
        (MANAGER, "admin: service records", reverse("admin:fleet_servicerecord_changelist")),
        (MANAGER, "admin: positions", reverse("admin:fleet_position_changelist")),
        (MANAGER, "admin: locations", reverse("admin:fleet_location_changelist")),
    ]
    return pages


def _rows(html):
    """Table rows shown (body rows: all <tr> less one header row per table)."""
    return max(html.count("<tr") - html.count("<thead"), 0)


class Command(BaseCommand):
    help = "Time every page per role (p50, p95, max), with its queries, size and rows."

    def add_arguments(self, parser):
        parser.add_argument("--repeat", type=int, default=20, help="Timed requests per page (after one warm-up).")

    def handle(self, *args, **options):
        repeat = options["repeat"]
        if repeat < 2:
            raise CommandError("--repeat must be at least 2.")
        units = Unit.objects.count()
        if not units:
            raise CommandError("The database has no units; run make_fleet first.")
        forecast = UnitForecast.objects.count()
        if forecast < units * 0.9:
            self.stdout.write(f"Only {forecast} of {units} units are forecast; run manage.py forecast first "
                              "for figures that mean something.")
        settings.ALLOWED_HOSTS = [*settings.ALLOWED_HOSTS, "testserver"]
        logging.getLogger("django.request").setLevel(logging.ERROR)  # the 404 page's warnings
        clients = {}
        for role in (DESK, TECHNICIAN, MANAGER):
            clients[role] = Client()
            clients[role].force_login(_user(role))
        self.stdout.write(f"Pages on {units:,} units ({forecast:,} forecast), {repeat} timed requests each; "
                          f"budget p95 {P95_BUDGET_MS:.0f} ms\n")
        self.stdout.write(f"{'page':<34} {'role':<10} {'p50 ms':>7} {'p95 ms':>7} {'max ms':>7} {'queries':>7} "
                          f"{'KB':>6} {'rows':>5}")
        worst = 0.0
        over = []
        for role, label, url in _pages():
            client = clients[role]
            first = client.get(url, secure=True)
            if first.status_code not in (200, 404):
                raise CommandError(f"{label}: {url} answered {first.status_code}")
            html = first.content.decode("utf-8", "replace")
            with CaptureQueriesContext(connection) as ctx:
                client.get(url, secure=True)
            queries = len(ctx.captured_queries)  # now: the next request empties the log
            times = []
            for _ in range(repeat):
                started = time.perf_counter()
                client.get(url, secure=True)
                times.append((time.perf_counter() - started) * 1000)
            times.sort()
            p95 = times[min(len(times) - 1, int(round(0.95 * (len(times) - 1))))]
            worst = max(worst, p95)
            if p95 > P95_BUDGET_MS:
                over.append(label)
            self.stdout.write(f"{label[:34]:<34} {role:<10} {statistics.median(times):7.1f} {p95:7.1f} "
                              f"{times[-1]:7.1f} {queries:7d} {len(first.content) / 1024:6.0f} "
                              f"{_rows(html):5d}")
        self.stdout.write(f"\nSlowest p95: {worst:.1f} ms (budget {P95_BUDGET_MS:.0f} ms); "
                          + (f"over budget: {', '.join(over)}" if over else "every page within it"))
