"""The admin: adding a unit gives it its capacitors and thermal history."""

from django.urls import reverse

from fleet.models import Unit, UnitCapacitor
from scheduling.models import ThermalHistory
from tests.base import make_user


def test_adding_a_unit_in_the_admin_fits_its_capacitors_and_starts_its_history(client, fleet):
    client.force_login(make_user("superuser", username="root"))
    response = client.post(reverse("admin:fleet_unit_add"), {
        "asset_tag": "NMB-0077",
        "serial": "BA-83-0077",
        "gear_model": fleet.gear_model.pk,
        "year_made": "1983",
        "joined_on": "2019-05-02",
        "home_location": fleet.location.pk,
        "status": "available",
        "hour_meter_h": "",
        "prior_powered_h_per_year": "300",
        "prior_ambient_c": "25",
        "prior_storage_c": "20",
        "notes": "",
    })
    assert response.status_code == 302, response.content.decode()[:2000]
    unit = Unit.objects.get(asset_tag="NMB-0077")
    caps = UnitCapacitor.objects.filter(unit=unit).select_related("position")
    assert sorted(c.position.designator for c in caps) == ["C1", "C12", "C7"]
    assert all(c.is_original and c.installed_on.year == 1983 for c in caps)
    assert ThermalHistory.objects.filter(unit=unit).exists()


def test_the_unit_change_page_shows_the_fitted_capacitors(client, fleet):
    client.force_login(make_user("superuser", username="root"))
    response = client.get(reverse("admin:fleet_unit_change", args=[fleet.unit.pk]))
    assert response.status_code == 200
    text = response.content.decode()
    assert "C12" in text and "C7" in text


def test_admin_lists_and_pages_open(client, fleet):
    client.force_login(make_user("superuser", username="root"))
    for name in ("location", "gearmodel", "position", "unit", "rental", "servicerecord", "maintenancepolicy",
                 "temperaturesample"):
        assert client.get(reverse(f"admin:fleet_{name}_changelist")).status_code == 200, name
    assert client.get(reverse("admin:fleet_unit_changelist"), {"q": "nmb-0001"}).status_code == 200
    assert client.get(reverse("admin:fleet_gearmodel_change", args=[fleet.gear_model.pk])).status_code == 200
    assert client.get(reverse("admin:fleet_location_change", args=[fleet.location.pk])).status_code == 200
    assert client.get(reverse("admin:fleet_unit_add")).status_code == 200


def test_a_service_record_page_shows_its_replaced_parts_and_measurements(client, fleet):
    import datetime as dt

    from fleet.models import Measurement
    from front.workflows import service_record_recap

    record = service_record_recap(unit_id=fleet.unit.pk, performed_on=dt.date(2024, 3, 1),
                                  replacements={"C7": {"rated_life_h": 4000}}, technician_name="Ada Bench")
    Measurement.objects.create(service_record=record, quantity="rail", rail_name="-15V", value=-14.8)
    client.force_login(make_user("superuser", username="root"))
    response = client.get(reverse("admin:fleet_servicerecord_change", args=[record.pk]))
    assert response.status_code == 200
    text = response.content.decode()
    assert "-15V" in text and "4000" in text


def test_hires_are_read_only_in_the_admin(client, fleet):
    import datetime as dt

    from django.utils import timezone

    from front.workflows import rental_check_out

    rental = rental_check_out(unit_id=fleet.unit.pk, job_ref="JOB-3", out_at=timezone.now() - dt.timedelta(hours=1))
    client.force_login(make_user("superuser", username="root"))
    assert client.get(reverse("admin:fleet_rental_add")).status_code == 403
    response = client.get(reverse("admin:fleet_rental_change", args=[rental.pk]))
    assert response.status_code == 200
    assert 'name="job_ref"' not in response.content.decode()
