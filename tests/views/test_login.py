"""The sign-in and sign-out pages."""

from django.urls import reverse

from tests.base import PASSWORD


def test_the_login_page_shows_our_own_form(client, db):
    response = client.get(reverse("login"))
    assert response.status_code == 200
    text = response.content.decode()
    assert "Sign in" in text
    assert 'name="username"' in text and 'name="password"' in text


def test_signing_in_lands_on_the_start_page(client, users):
    response = client.post(reverse("login"), {"username": "dora.desk", "password": PASSWORD}, follow=True)
    assert response.redirect_chain[-1][0] == reverse("home")
    assert "Scan or type an asset tag" in response.content.decode()


def test_a_wrong_password_is_refused_with_a_message(client, users):
    response = client.post(reverse("login"), {"username": "dora.desk", "password": "wrong"})
    assert response.status_code == 200
    assert "did not match" in response.content.decode()


def test_signing_in_returns_to_the_page_asked_for(client, users):
    url = reverse("login") + "?next=" + reverse("unit_list")
    response = client.post(url, {"username": "tomas.tech", "password": PASSWORD, "next": reverse("unit_list")})
    assert response.status_code == 302
    assert response["Location"] == reverse("unit_list")


def test_signing_out_ends_the_session(client, users):
    client.force_login(users.desk)
    response = client.post(reverse("logout"))
    assert response.status_code == 302
    assert client.get(reverse("home")).status_code == 302
