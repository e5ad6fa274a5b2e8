"""Every page needs a login, and each page is only for its roles."""

import importlib.util

import pytest
from django.urls import reverse

from tests.base import make_user

def page_urls():
    return {
        "home": reverse("home"),
        "unit_list": reverse("unit_list"),
        "unit_detail": reverse("unit_detail", args=["NMB-0001"]),
        "desk_scan": reverse("desk_scan") + "?tag=NMB-0001",
        "check_out": reverse("check_out"),
        "check_in": reverse("check_in"),
        "workshop": reverse("workshop"),
        "csv_import": reverse("csv_import"),
        "csv_export": reverse("csv_export", args=["units"]),
    }


# fleet.csvio is written in parallel; until it exists the export answers 404.
HAVE_CSVIO = importlib.util.find_spec("fleet.csvio") is not None
OK = (200, 302)


def ok_codes(name):
    return OK if HAVE_CSVIO or name != "csv_export" else (404,)


# Which roles may open which page (a superuser may open them all).
ALLOWED = {
    "home": {"desk", "technician", "manager", "norole"},
    "unit_list": {"desk", "technician", "manager"},
    "unit_detail": {"desk", "technician", "manager"},
    "desk_scan": {"desk", "manager"},
    "check_out": {"desk", "manager"},
    "check_in": {"desk", "manager"},
    "workshop": {"technician", "manager"},
    "csv_import": {"manager"},
    "csv_export": {"manager"},
}


@pytest.mark.parametrize("name", sorted(ALLOWED))
def test_a_visitor_who_is_not_signed_in_is_sent_to_the_login_page(client, db, name):
    url = page_urls()[name]
    response = client.get(url)
    assert response.status_code == 302
    assert response["Location"].startswith(reverse("login") + "?next=")


@pytest.mark.parametrize("name", sorted(ALLOWED))
@pytest.mark.parametrize("role", ["desk", "technician", "manager", "norole"])
def test_each_role_gets_its_pages_and_a_clear_403_elsewhere(client, fleet, name, role):
    user = make_user(None if role == "norole" else role, username=f"u-{role}")
    client.force_login(user)
    response = client.get(page_urls()[name])
    if role in ALLOWED[name]:
        assert response.status_code in ok_codes(name), response.status_code
    else:
        assert response.status_code == 403
        text = response.content.decode()
        assert "not for your role" in text
        assert "This page is for" in text


@pytest.mark.parametrize("name", sorted(ALLOWED))
def test_a_superuser_may_open_every_page(client, fleet, name):
    client.force_login(make_user("superuser", username="root"))
    assert client.get(page_urls()[name]).status_code in ok_codes(name)


def test_the_403_page_names_who_the_page_is_for_and_the_users_role(client, users):
    client.force_login(users.desk)
    response = client.get(reverse("csv_import"))
    assert response.status_code == 403
    text = response.content.decode()
    assert "This page is for managers" in text
    assert "rental desk" in text
