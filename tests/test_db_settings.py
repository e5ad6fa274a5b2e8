"""The database settings read from the environment (``config.settings.database_from_env``)."""

import os

import pytest
from django.core.exceptions import ImproperlyConfigured

from config.settings import database_from_env

PG = "postgres://someone@db.invalid:5432/recap"


@pytest.fixture
def env(monkeypatch):
    for name in ("DATABASE_URL", "DB_CONN_MAX_AGE", "DB_CONN_HEALTH_CHECKS", "DB_PREPARED"):
        monkeypatch.delenv(name, raising=False)
    return monkeypatch


def test_connections_are_kept_ten_minutes_and_checked_by_default(env):
    env.setenv("DATABASE_URL", PG)
    db = database_from_env("sqlite:///unused.sqlite3")
    assert db["ENGINE"] == "django.db.backends.postgresql"
    assert db["NAME"] == "recap" and db["HOST"] == "db.invalid"
    assert db["CONN_MAX_AGE"] == 600
    assert db["CONN_HEALTH_CHECKS"] is True


def test_postgresql_statements_are_prepared_unless_turned_off(env):
    env.setenv("DATABASE_URL", PG)
    db = database_from_env("sqlite:///unused.sqlite3")
    assert db["OPTIONS"]["server_side_binding"] is True
    assert db["OPTIONS"]["prepare_threshold"] == 2
    env.setenv("DB_PREPARED", "false")  # behind a pooler without prepared-statement support
    db = database_from_env("sqlite:///unused.sqlite3")
    assert "server_side_binding" not in db.get("OPTIONS", {}) and "prepare_threshold" not in db.get("OPTIONS", {})


def test_sqlite_takes_no_postgresql_options(env, tmp_path):
    db = database_from_env(f"sqlite:///{tmp_path / 'x.sqlite3'}")
    assert "server_side_binding" not in db.get("OPTIONS", {})


def test_the_default_address_is_used_without_database_url(env, tmp_path):
    db = database_from_env(f"sqlite:///{tmp_path / 'x.sqlite3'}")
    assert db["ENGINE"] == "django.db.backends.sqlite3"
    assert db["NAME"] == str(tmp_path / "x.sqlite3")
    assert db["CONN_MAX_AGE"] == 600 and db["CONN_HEALTH_CHECKS"] is True


def test_the_environment_can_turn_both_off(env):
    env.setenv("DATABASE_URL", PG)
    env.setenv("DB_CONN_MAX_AGE", "0")
    env.setenv("DB_CONN_HEALTH_CHECKS", "false")
    db = database_from_env("sqlite:///unused.sqlite3")
    assert db["CONN_MAX_AGE"] == 0
    assert db["CONN_HEALTH_CHECKS"] is False


def test_an_empty_variable_means_the_default(env):
    env.setenv("DATABASE_URL", PG)
    env.setenv("DB_CONN_MAX_AGE", "")
    env.setenv("DB_CONN_HEALTH_CHECKS", "")
    db = database_from_env("sqlite:///unused.sqlite3")
    assert (db["CONN_MAX_AGE"], db["CONN_HEALTH_CHECKS"]) == (600, True)


@pytest.mark.parametrize("name, value, words", [
    ("DB_CONN_MAX_AGE", "ten", "whole number"),
    ("DB_CONN_MAX_AGE", "-1", "0 or more"),
    ("DB_CONN_HEALTH_CHECKS", "perhaps", "true or false"),
    ("DATABASE_URL", "nosuch://x", "not a database address"),
])
def test_bad_values_are_refused_with_the_variable_named(env, name, value, words):
    if name != "DATABASE_URL":
        env.setenv("DATABASE_URL", PG)
    env.setenv(name, value)
    with pytest.raises(ImproperlyConfigured, match=words):
        database_from_env("sqlite:///unused.sqlite3")


@pytest.mark.skipif(bool(os.environ.get("DB_CONN_MAX_AGE") or os.environ.get("DB_CONN_HEALTH_CHECKS")),
                    reason="the suite runs with DB_CONN_* set")
def test_the_running_settings_keep_connections(settings):
    db = settings.DATABASES["default"]
    assert db["CONN_MAX_AGE"] == 600 and db["CONN_HEALTH_CHECKS"] is True
