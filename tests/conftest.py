"""Shared test set-up: tasks run inline, and the services some tests need.

Tests marked ``redis`` need a Redis server at TEST_REDIS_URL.  On CI (CI=true)
a missing server fails those tests; elsewhere they are skipped with a reason.
"""

import os
import socket
from urllib.parse import urlparse

import pytest

from config.celery import app as celery_app


@pytest.fixture(autouse=True)
def _tasks_run_inline():
    celery_app.conf.task_always_eager = True
    celery_app.conf.task_eager_propagates = True
    yield


def _reachable(url):
    parsed = urlparse(url)
    try:
        with socket.create_connection((parsed.hostname or "127.0.0.1", parsed.port or 6379), timeout=1):
            return True
    except OSError:
        return False


@pytest.fixture
def redis_url():
    url = os.environ.get("TEST_REDIS_URL", "")
    on_ci = os.environ.get("CI", "").lower() == "true"
    if not url or not _reachable(url):
        message = f"Redis not reachable at TEST_REDIS_URL={url or '(unset)'}"
        if on_ci:
            pytest.fail(message + " (CI must provide it)")
        pytest.skip(message)
    return url


def pytest_configure(config):
    # Password hashing is deliberately slow; the tests log users in by the hundred.
    from django.conf import settings

    settings.PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]
