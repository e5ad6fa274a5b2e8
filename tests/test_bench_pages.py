"""manage.py bench_pages reports every page with its figures (it times; it checks nothing)."""

import io
import re

from django.core.management import call_command

from scheduling.services import forecast_refresh
from tests.base import build_fleet, make_unit


def test_it_prints_a_row_per_page_with_queries_size_and_rows(db):
    fleet = build_fleet()
    make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002", year_made=1960)
    forecast_refresh()
    out = io.StringIO()
    call_command("bench_pages", repeat=2, stdout=out)
    text = out.getvalue()
    rows = {m.group(1).strip(): m.groups()[1:] for m in re.finditer(
        r"^(.{34}) (desk|technician|manager)\s+([\d.]+)\s+([\d.]+)\s+([\d.]+)\s+(\d+)\s+(\d+)\s+(\d+)$", text, re.M)}
    for page in ("workshop", "start page (manager)", "admin: hires", "unit page (3 parts)", "check-in"):
        assert page in rows, text
    role, p50, p95, top, queries, kb, listed = rows["workshop"]
    assert role == "technician" and int(queries) > 3 and float(p95) >= float(p50) > 0
    assert "Slowest p95" in text
