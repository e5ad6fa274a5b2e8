"""The manager's CSV import and export page (fleet.csvio does the work)."""

import importlib.util

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse

from front.forms import CsvUploadForm
from fleet.models import GearModel, Location, Unit, UnitCapacitor

pytestmark = pytest.mark.skipif(
    importlib.util.find_spec("fleet.csvio") is None,
    reason="fleet.csvio (CSV import/export, written in parallel) is not in this build yet",
)

URL = reverse("csv_import")
LOCATIONS_HEADER = "name,kind,profile,constant_temp_c,monthly_temps_c,notes\n"
UNITS_HEADER = ("asset_tag,serial,maker,model_name,year_made,joined_on,home_location,status,hour_meter_h,"
                "prior_powered_h_per_year,prior_ambient_c,prior_storage_c,notes\n")
GEAR_HEADER = ("maker,model_name,category,year_from,year_to,internal_rise_k,powered_hours_per_day,mains_voltage_v,"
               "hazard_mains,hazard_tube_hv,hazard_smps,notes\n")


def csv_file(name, text):
    return SimpleUploadedFile(name, text.encode("utf-8"), content_type="text/csv")


def good_locations(name="locations.csv"):
    return csv_file(name, LOCATIONS_HEADER + "Rear Store,store,constant,18,,\nStudio B,studio,constant,23,,\n")


def good_units(name="units.csv"):
    return csv_file(name, UNITS_HEADER
                    + "NMB-0100,BA-1,Brindle Acoustics,Nimbus 4,1982,2016-04-01,Rear Store,available,,,,,\n")


def test_the_page_offers_a_multiple_file_input_and_the_export_links(client, users):
    client.force_login(users.manager)
    text = client.get(URL).content.decode()
    assert 'type="file"' in text and "multiple" in text
    assert 'enctype="multipart/form-data"' in text
    for kind in ("locations", "temperature_samples", "gear_models", "positions", "units"):
        assert reverse("csv_export", args=[kind]) in text


def test_a_valid_small_file_is_imported_and_its_summary_shown(client, users):
    client.force_login(users.manager)
    response = client.post(URL, {"files": [good_locations()]})
    assert response.status_code == 200
    assert set(Location.objects.values_list("name", flat=True)) == {"Rear Store", "Studio B"}
    outcome = response.context["outcome"]
    assert outcome["failed"] is None
    assert [r["name"] for r in outcome["imported"]] == ["locations.csv"]
    text = response.content.decode()
    assert "All files imported" in text
    assert "2 created" in text


def test_files_chosen_in_any_order_are_imported_locations_first(client, users, fleet):
    client.force_login(users.manager)
    response = client.post(URL, {"files": [good_units("b.csv"), good_locations("a-later.csv")]})
    outcome = response.context["outcome"]
    assert outcome["order"] == ["a-later.csv", "b.csv"]
    assert outcome["failed"] is None
    unit = Unit.objects.get(asset_tag="NMB-0100")
    assert unit.home_location.name == "Rear Store"
    assert UnitCapacitor.objects.filter(unit=unit).count() == 3


def test_a_bad_file_is_rejected_with_row_and_column_and_nothing_of_it_is_written(client, users):
    client.force_login(users.manager)
    bad = csv_file("locations.csv", LOCATIONS_HEADER + "Rear Store,store,constant,18,,\nLoft,store,constant,hot,,\n")
    response = client.post(URL, {"files": [bad]})
    assert response.status_code == 200
    assert not Location.objects.exists()
    failed = response.context["outcome"]["failed"]
    assert failed["name"] == "locations.csv"
    assert any("row 3" in e for e in failed["errors"])
    text = response.content.decode()
    assert "Import stopped at locations.csv" in text
    assert "Nothing from this file was saved" in text


def test_the_import_stops_at_the_first_failing_file_and_says_which_were_left(client, users):
    client.force_login(users.manager)
    bad_models = csv_file("models.csv", GEAR_HEADER + "Brindle Acoustics,Nimbus 4,effects,1990,1980,10,,,,,,\n")
    response = client.post(URL, {"files": [good_units(), bad_models, good_locations()]})
    outcome = response.context["outcome"]
    assert [r["name"] for r in outcome["imported"]] == ["locations.csv"]
    assert outcome["failed"]["name"] == "models.csv"
    assert outcome["skipped"] == ["units.csv"]
    assert Location.objects.count() == 2
    assert not GearModel.objects.exists() and not Unit.objects.exists()
    assert "left alone: units.csv" in response.content.decode()


def test_a_post_without_files_asks_for_one(client, users):
    client.force_login(users.manager)
    response = client.post(URL, {})
    assert "Choose at least one CSV file." in response.content.decode()


def test_a_file_that_is_not_csv_is_refused_by_the_form():
    form = CsvUploadForm(data={}, files={"files": [csv_file("fleet.xlsx", "x")]})
    assert not form.is_valid()
    assert "fleet.xlsx is not a .csv file." in form.errors["files"]


def test_each_kind_downloads_as_csv(client, users, fleet):
    client.force_login(users.manager)
    response = client.get(reverse("csv_export", args=["units"]))
    assert response.status_code == 200
    assert response["Content-Type"].startswith("text/csv")
    assert 'filename="units-' in response["Content-Disposition"]
    text = response.content.decode()
    assert text.splitlines()[0].startswith("asset_tag,")
    assert "NMB-0001" in text
    assert client.get(reverse("csv_export", args=["nonsense"])).status_code == 404


def test_the_desk_may_not_import(client, users):
    client.force_login(users.desk)
    response = client.post(URL, {"files": [good_locations()]})
    assert response.status_code == 403
    assert not Location.objects.exists()
