"""Pages: start page, units, the rental desk, the workshop queue and the
manager's CSV import and export, one module per area.

Every page needs a login.  Desk pages are for the rental desk and managers,
workshop pages for technicians and managers, import and export for managers;
a superuser holds every role.  Writes go through ``front.workflows``; reads
through ``front.selectors``.
"""

from ..workflows import return_verdict  # noqa: F401  (the desk's verdict, worded)
from .bench import bench_intake, bench_reading, bench_recap, bench_release, bench_unit  # noqa: F401
from .data import csv_export, csv_import, import_job  # noqa: F401
from .desk import check_in, check_out, desk_scan  # noqa: F401
from .display import forecast_display, format_capacitance, hazard_words, position_plan  # noqa: F401
from .digest import digest_send_now, digest_settings, digest_unsubscribe  # noqa: F401
from .home import home  # noqa: F401
from .sheets import due_list, parts_list, sheet_batch, sheet_batch_pdf, sheet_batches, unit_sheet  # noqa: F401
from .people import people_list, person_edit, person_new  # noqa: F401
from .units import UNITS_PER_PAGE, unit_detail, unit_list  # noqa: F401
from .workshop import workshop  # noqa: F401
