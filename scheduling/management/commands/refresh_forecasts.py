"""manage.py refresh_forecasts: the nightly job by hand."""

import logging
import sys
import time

from django.core.management.base import BaseCommand
from tqdm import tqdm

from fleet.models import Unit
from scheduling.batches import fleet_nightly_refresh

log = logging.getLogger("scheduling.refresh")


class Command(BaseCommand):
    help = ("Bring every unit's thermal history up to date (storage counted up to now) and recompute and store "
            "the whole fleet's forecast: what the nightly job does.")

    def handle(self, *args, **options):
        started = time.perf_counter()
        n = Unit.objects.exclude(status=Unit.Status.RETIRED).count()
        # A bar on a terminal only (stderr); logs and pipes get the summary line.
        with tqdm(total=2 * n, unit="unit", desc="histories, then forecasts", disable=not sys.stderr.isatty(),
                  file=sys.stderr, leave=False) as bar:
            synced, run = fleet_nightly_refresh(progress=bar.update)
        counts = run.statuses
        summary = (f"refresh_forecasts: {run.forecast} units forecast in {time.perf_counter() - started:.1f} s "
                   f"in {run.batches} batches ({synced['changed']} histories rebuilt or extended, "
                   f"{synced['advanced']} storage counted); "
                   f"overdue {counts.get('overdue', 0)}, due {counts.get('due', 0)}, watch {counts.get('watch', 0)}, "
                   f"ok {counts.get('ok', 0)}, cannot forecast {run.cannot_forecast}; {run.need_work} need work")
        log.info(summary)
        self.stdout.write(summary)
