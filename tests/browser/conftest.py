import pytest


@pytest.fixture(scope="session")
def _plain_http():
    """The live server speaks plain http on 127.0.0.1: no https redirect or
    secure-only cookies (production settings).  Set before the server starts,
    since its middleware reads them once."""
    from django.conf import settings

    names = ("SECURE_SSL_REDIRECT", "SESSION_COOKIE_SECURE", "CSRF_COOKIE_SECURE", "SECURE_HSTS_SECONDS")
    saved = {name: getattr(settings, name, None) for name in names}
    settings.SECURE_SSL_REDIRECT = False
    settings.SESSION_COOKIE_SECURE = False
    settings.CSRF_COOKIE_SECURE = False
    settings.SECURE_HSTS_SECONDS = 0
    yield
    for name, value in saved.items():
        setattr(settings, name, value)


@pytest.fixture(scope="session")
def live_server(_plain_http, live_server):
    return live_server
