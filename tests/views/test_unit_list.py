"""The unit list: search, filters, forecast column, pagination and a flat query count."""

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone

from fleet.models import Unit
from scheduling.models import UnitForecast
from tests.base import make_gear_model, make_location, make_unit


@pytest.fixture
def mixed_fleet(fleet):
    store = make_location("Upstairs Store", 21.0)
    other = make_gear_model(maker="Quillfeather Audio", model_name="Tarn 12")
    make_unit(fleet.gear_model, store, asset_tag="NMB-0002", serial="BA-80-2001", status=Unit.Status.HOLD)
    tarn = make_unit(other, fleet.location, asset_tag="TRN-0001", serial="QF-5521")
    UnitForecast.objects.create(unit=tarn, computed_at=timezone.now(), status="watch", due_date="2031-04-01",
                                risk=0.05, horizon_days=90, max_damage_ratio=0.6, reasons=[], positions=b"")
    return fleet, store, other


def tags(response):
    return [u.asset_tag for u in response.context["units"]]


def test_the_list_shows_every_unit_with_its_status_and_forecast(client, users, mixed_fleet):
    client.force_login(users.desk)
    response = client.get(reverse("unit_list"))
    assert tags(response) == ["NMB-0001", "NMB-0002", "TRN-0001"]
    text = response.content.decode()
    assert "not yet forecast" in text
    assert "Watch" in text and "1 Apr 2031" in text
    assert "Held" in text


@pytest.mark.parametrize("query, expected", [
    ("trn-0001", ["TRN-0001"]),      # asset tag, any case
    ("QF-55", ["TRN-0001"]),         # serial
    ("quillfeather", ["TRN-0001"]),  # maker
    ("nimbus", ["NMB-0001", "NMB-0002"]),  # model
    ("brindle nimbus", ["NMB-0001", "NMB-0002"]),  # every word must match somewhere
    ("nothing-like-this", []),
])
def test_search_matches_tag_serial_maker_and_model(client, users, mixed_fleet, query, expected):
    client.force_login(users.technician)
    assert tags(client.get(reverse("unit_list"), {"q": query})) == expected


def test_filters_narrow_by_status_model_location_and_forecast(client, users, mixed_fleet):
    fleet, store, other = mixed_fleet
    client.force_login(users.manager)
    url = reverse("unit_list")
    assert tags(client.get(url, {"status": "hold"})) == ["NMB-0002"]
    assert tags(client.get(url, {"gear_model": other.pk})) == ["TRN-0001"]
    assert tags(client.get(url, {"location": store.pk})) == ["NMB-0002"]
    assert tags(client.get(url, {"forecast": "watch"})) == ["TRN-0001"]
    assert tags(client.get(url, {"forecast": "none"})) == ["NMB-0001", "NMB-0002"]
    assert tags(client.get(url, {"status": "available", "location": fleet.location.pk})) == ["NMB-0001", "TRN-0001"]


def test_the_list_pages_fifty_units_at_a_time_and_keeps_the_filters(client, users, fleet, monkeypatch):
    monkeypatch.setattr("front.views.units.UNITS_PER_PAGE", 2)
    for i in range(2, 6):
        make_unit(fleet.gear_model, fleet.location, asset_tag=f"NMB-000{i}")
    client.force_login(users.desk)
    first = client.get(reverse("unit_list"), {"q": "nmb"})
    assert tags(first) == ["NMB-0001", "NMB-0002"]
    assert "Page 1 of 3" in first.content.decode()
    assert "q=nmb&amp;page=2" in first.content.decode()
    assert tags(client.get(reverse("unit_list"), {"q": "nmb", "page": 3})) == ["NMB-0005"]


def test_the_query_count_does_not_grow_with_the_number_of_units(client, users, fleet):
    client.force_login(users.desk)

    def count():
        with CaptureQueriesContext(connection) as ctx:
            assert client.get(reverse("unit_list")).status_code == 200
        return len(ctx.captured_queries)

    few = count()
    for i in range(2, 9):
        unit = make_unit(fleet.gear_model, fleet.location, asset_tag=f"NMB-000{i}")
        if i % 2:
            UnitForecast.objects.create(unit=unit, computed_at=timezone.now(), status="ok", risk=0.01,
                                        horizon_days=90, max_damage_ratio=0.1, reasons=[], positions=b"")
    assert count() == few
