"""`manage.py service_sheet` and the unit page's print and download buttons."""

import io
import os
import subprocess
import sys
from pathlib import Path

import pytest
from django.core.management import CommandError, call_command
from django.db import connection
from django.urls import reverse


ROOT = Path(__file__).resolve().parents[2]


def test_the_command_writes_the_sheet(bench_unit, tmp_path):
    out = io.StringIO()
    target = tmp_path / "ft.pdf"
    call_command("service_sheet", "ft-0120", "--out", str(target), stdout=out)
    assert target.read_bytes().startswith(b"%PDF")
    assert "Wrote the service sheet of FT-0120 (120 capacitors" in out.getvalue()
    assert not list(tmp_path.glob(".*.part")), "no temporary file left behind"


def test_an_unknown_tag_is_one_clear_line(bench_unit, tmp_path):
    with pytest.raises(CommandError, match=r"^no unit has the asset tag 'XX-9999'$"):
        call_command("service_sheet", "XX-9999", "--out", str(tmp_path / "x.pdf"))
    assert not (tmp_path / "x.pdf").exists()


@pytest.mark.parametrize("where", ["missing-folder/x.pdf", "."])
def test_an_unwritable_path_is_one_clear_line_and_leaves_no_file(bench_unit, tmp_path, where):
    target = tmp_path / where
    with pytest.raises(CommandError, match=r"^cannot write "):
        call_command("service_sheet", "FT-0120", "--out", str(target))
    assert not (tmp_path / "missing-folder").exists()


def test_an_earlier_file_is_kept_when_the_tag_is_unknown(bench_unit, tmp_path):
    target = tmp_path / "keep.pdf"
    target.write_bytes(b"earlier")
    with pytest.raises(CommandError):
        call_command("service_sheet", "NOPE-1", "--out", str(target))
    assert target.read_bytes() == b"earlier"


@pytest.mark.django_db(transaction=True)
def test_the_command_exits_non_zero_with_one_line(tmp_path):
    if connection.vendor == "sqlite" and connection.settings_dict["NAME"].startswith(("file:", ":memory:")):
        pytest.skip("the process needs a file database")
    s = connection.settings_dict
    url = (f"sqlite:///{s['NAME']}" if connection.vendor == "sqlite"
           else f"postgres://{s['USER']}@{s['HOST'] or '127.0.0.1'}:{s['PORT'] or 5432}/{s['NAME']}")
    done = subprocess.run([sys.executable, "manage.py", "service_sheet", "NOPE-1", "--out", str(tmp_path / "x.pdf")],
                          cwd=ROOT, env=dict(os.environ, DATABASE_URL=url), capture_output=True, text=True,
                          timeout=120)
    assert done.returncode != 0
    assert done.stderr.strip().splitlines() == ["CommandError: no unit has the asset tag 'NOPE-1'"]


def test_a_technician_prints_and_downloads_the_sheet(client, users, bench_unit):
    client.force_login(users.technician)
    page = client.get(reverse("unit_detail", args=["FT-0120"])).content.decode()
    url = reverse("unit_sheet", args=["FT-0120"])
    assert f'href="{url}"' in page and f'href="{url}?download=1"' in page
    inline = client.get(url)
    assert inline.status_code == 200 and inline["Content-Type"] == "application/pdf"
    assert inline["Content-Disposition"] == 'inline; filename="service-sheet-FT-0120.pdf"'
    assert inline.content.startswith(b"%PDF")
    download = client.get(url + "?download=1")
    assert download["Content-Disposition"] == 'attachment; filename="service-sheet-FT-0120.pdf"'


def test_the_desk_sees_no_sheet_buttons_and_may_not_fetch_one(client, users, bench_unit):
    client.force_login(users.desk)
    page = client.get(reverse("unit_detail", args=["FT-0120"])).content.decode()
    assert "service-sheet.pdf" not in page
    assert client.get(reverse("unit_sheet", args=["FT-0120"])).status_code == 403


def test_an_unknown_unit_is_not_found(client, users, bench_unit):
    client.force_login(users.technician)
    assert client.get(reverse("unit_sheet", args=["NOPE-1"])).status_code == 404
