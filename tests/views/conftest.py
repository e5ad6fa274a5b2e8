import pytest

from tests.base import build_fleet, make_role_users


@pytest.fixture(autouse=True)
def plain_http(settings):
    """Production settings redirect http to https; the test client speaks http."""
    settings.SECURE_SSL_REDIRECT = False


@pytest.fixture
def users(db):
    return make_role_users()


@pytest.fixture
def fleet(db):
    return build_fleet()


@pytest.fixture
def as_user(client):
    """Log the test client in as the given user and return it."""

    def login(user):
        client.force_login(user)
        return client

    return login
