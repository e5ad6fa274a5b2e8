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


def test_a_service_record_names_its_unit_by_tag(client, fleet):
    import datetime as dt

    from front.workflows import service_record_recap

    record = service_record_recap(unit_id=fleet.unit.pk, performed_on=dt.date(2024, 3, 1),
                                  replacements={"C7": {"rated_life_h": 4000}}, technician_name="Ada Bench")
    client.force_login(make_user("superuser", username="root"))
    text = client.get(reverse("admin:fleet_servicerecord_change", args=[record.pk])).content.decode()
    assert str(record) == "NMB-0001 recap 2024-03-01"
    assert "NMB-0001 recap 2024-03-01" in text
    # the unit field shows the tag (autocomplete), not a box holding its database number
    assert f'<option value="{fleet.unit.pk}" selected>NMB-0001</option>' in text
    assert 'name="unit" value=' not in text
    listing = client.get(reverse("admin:fleet_servicerecord_changelist")).content.decode()
    assert "NMB-0001" in listing


def test_the_gear_model_list_counts_positions_and_units(client, fleet):
    from tests.base import make_unit

    make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002")
    client.force_login(make_user("superuser", username="root"))
    response = client.get(reverse("admin:fleet_gearmodel_changelist"))
    row = response.context["cl"].result_list[0]
    assert (row._positions, row._units) == (3, 2)


def test_the_busy_admin_lists_cost_the_same_queries_whatever_the_fleet(client, fleet):
    import datetime as dt

    from django.db import connection
    from django.test.utils import CaptureQueriesContext
    from django.utils import timezone

    from front.workflows import rental_check_in, rental_check_out
    from tests.base import make_unit

    client.force_login(make_user("superuser", username="root"))

    def counts():
        out = []
        for name in ("rental", "gearmodel", "unit", "servicerecord", "location"):
            with CaptureQueriesContext(connection) as ctx:
                assert client.get(reverse(f"admin:fleet_{name}_changelist")).status_code == 200
            out.append(len(ctx.captured_queries))
        return out

    def hire(unit, days_ago):
        rental_check_out(unit_id=unit.pk, job_ref="J", out_at=timezone.now() - dt.timedelta(days=days_ago))
        rental_check_in(unit_id=unit.pk, in_at=timezone.now() - dt.timedelta(days=days_ago - 1), venue_ambient_c=25,
                        powered_hours=3)

    hire(fleet.unit, 30)
    small = counts()
    for i in range(5):
        unit = make_unit(fleet.gear_model, fleet.location, asset_tag=f"NMB-5{i:03d}")
        hire(unit, 20 + i)
    assert counts() == small


def test_the_admin_wears_the_apps_look(client, fleet):
    client.force_login(make_user("superuser", username="root"))
    text = client.get(reverse("admin:index")).content.decode()
    assert "Recap Scheduler" in text and "front/admin.css" in text
    assert reverse("home") in text
    hires = client.get(reverse("admin:fleet_rental_changelist"))
    # no year list over every hire: that alone took seconds at 10,000 units
    assert hires.context["cl"].date_hierarchy is None
