"""Addresses and posts no one means to send: never a server error.

PostgreSQL refuses a NUL character in any text it is given, so a NUL that
reached a lookup was a server error there; now it is a 400 before any view.
"""

import pytest
from django.urls import reverse


@pytest.mark.parametrize("url", [
    "/desk/scan/?tag=%00", "/desk/scan/?tag=NMB%000001", "/units/%00/", "/units/NMB-0001%00/",
    "/units/?q=%00", "/units/?gear_model=%00", "/desk/check-in/?tag=%00", "/desk/check-out/?tag=a%00b",
    "/admin/fleet/unit/?q=%00", "/data/import/?%00=1",
])
def test_a_nul_in_the_address_is_a_bad_request(client, users, fleet, url):
    client.force_login(users.manager)
    response = client.get(url)
    assert response.status_code == 400
    assert b"NUL character" in response.content


def test_a_nul_in_a_desk_form_is_a_field_message(client, users, fleet):
    client.force_login(users.desk)
    response = client.post(reverse("check_out"), {"asset_tag": "NMB-0001", "job_ref": "JOB\x001",
                                                  "expected_ambient_c": "24"})
    assert response.status_code == 200
    assert "Null characters are not allowed." in response.context["form"].errors["job_ref"]
    response = client.post(reverse("check_in"), {"asset_tag": "NMB\x00-0001", "venue_ambient_c": "24",
                                                 "powered_hours": "3"})
    assert response.status_code == 200
    assert response.context["form"].errors["asset_tag"]


def test_a_write_that_cannot_get_the_lock_says_try_again(client, users, fleet, monkeypatch):
    """SQLite refuses a write with "database is locked" when another writer held the lock for longer
    than the busy timeout: the desk gets 503 and words, not a server error, and nothing is saved."""
    from django.db import OperationalError

    from fleet.models import Rental
    from front.views import desk

    def locked(**kwargs):
        raise OperationalError("database is locked")

    monkeypatch.setattr(desk, "rental_check_out", locked)
    client.force_login(users.desk)
    response = client.post(reverse("check_out"), {"asset_tag": "NMB-0001", "job_ref": "J-1",
                                                  "expected_ambient_c": "24"})
    assert response.status_code == 503
    assert response["Retry-After"] == "5"
    text = response.content.decode()
    assert "The register is busy: try again" in text and "Nothing was saved." in text
    assert not Rental.objects.exists()


def test_the_server_error_page_says_try_again_for_a_busy_database(rf):
    from django.db import OperationalError

    from front.views.errors import server_error_or_busy

    request = rf.get("/")
    try:
        raise OperationalError("database is locked")
    except OperationalError:
        response = server_error_or_busy(request)
    assert response.status_code == 503 and b"try again" in response.content.lower()
    try:
        raise ValueError("something else")
    except ValueError:
        response = server_error_or_busy(request)
    assert response.status_code == 500
