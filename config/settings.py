"""Settings for Recap Scheduler, read from the environment with safe defaults.

Every setting a deployment may change is read here, once, through the small
helpers below; nothing else in the project reads ``os.environ``.  With no
environment at all the app runs on one machine: SQLite under ``var/``, the
in-process task runner instead of Redis, and e-mail written to ``var/mail/``.
"""

from datetime import timedelta
from pathlib import Path
import os

import dj_database_url
from django.core.exceptions import ImproperlyConfigured

BASE_DIR = Path(__file__).resolve().parent.parent
VAR_DIR = Path(os.environ.get("RECAP_VAR_DIR", BASE_DIR / "var"))


def env_str(name, default=""):
    return os.environ.get(name, default)


def env_bool(name, default=False):
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return default
    value = raw.strip().lower()
    if value in ("1", "true", "yes", "on"):
        return True
    if value in ("0", "false", "no", "off"):
        return False
    raise ImproperlyConfigured(f"{name} must be true or false, not {raw!r}")


def env_int(name, default):
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return default
    try:
        return int(raw)
    except ValueError:
        raise ImproperlyConfigured(f"{name} must be a whole number, not {raw!r}") from None


def env_list(name, default):
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return list(default)
    return [item.strip() for item in raw.split(",") if item.strip()]


DEBUG = env_bool("DEBUG", False)
SECRET_KEY = env_str("SECRET_KEY")
if not SECRET_KEY:
    if DEBUG or env_bool("RECAP_ALLOW_DEV_KEY", True):
        # A fixed key is fine for a laptop demo; production sets SECRET_KEY and
        # RECAP_ALLOW_DEV_KEY=false, and `check --deploy` flags a short key.
        SECRET_KEY = "dev-only-insecure-key-set-SECRET_KEY-in-production"
    else:
        raise ImproperlyConfigured("SECRET_KEY must be set")

ALLOWED_HOSTS = env_list("ALLOWED_HOSTS", ["127.0.0.1", "localhost", "testserver"])
CSRF_TRUSTED_ORIGINS = env_list("CSRF_TRUSTED_ORIGINS", [])

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "simple_history",
    "django_celery_beat",
    "axes",
    "fleet",
    "scheduling",
    "reports",
    "front",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "whitenoise.middleware.WhiteNoiseMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "front.middleware.RefuseNulMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
    "front.middleware.BusyDatabaseMiddleware",
    # Who changed what: the audit trail records the signed-in user of a page's request.
    "simple_history.middleware.HistoryRequestMiddleware",
    # Last, as django-axes asks: it answers a locked-out sign-in.
    "axes.middleware.AxesMiddleware",
]

# Sign-in throttling (django-axes, a well-kept library): after
# RECAP_LOGIN_FAILURE_LIMIT wrong passwords in a row for one username, that
# username is locked out for RECAP_LOGIN_COOLOFF_MINUTES (a manager can release
# it sooner in the admin, Axes -> Access attempts); a right password resets the
# count.  Locking the username, not the address, keeps one mistyping person from
# locking out a whole office behind one address.
AUTHENTICATION_BACKENDS = [
    "axes.backends.AxesStandaloneBackend",
    # Django's ModelBackend, the user's roles read with the user (one query a request).
    "fleet.roles.RolesBackend",
]
AXES_FAILURE_LIMIT = env_int("RECAP_LOGIN_FAILURE_LIMIT", 5)
AXES_COOLOFF_TIME = timedelta(minutes=env_int("RECAP_LOGIN_COOLOFF_MINUTES", 15))
AXES_LOCKOUT_PARAMETERS = ["username"]
AXES_RESET_ON_SUCCESS = True
AXES_LOCKOUT_CALLABLE = "front.views.errors.locked_out"
AXES_CLIENT_IP_CALLABLE = "front.middleware.client_ip"
AXES_VERBOSE = False
# axes.W006 warns that a lockout without the address can be dodged by changing
# browser or cookies; a lockout by username holds whatever the browser.
SILENCED_SYSTEM_CHECKS = ["axes.W006"]

# Sessions in the database, as Django's own engine keeps them, read from SQL
# compiled once per process (front/sessions.py).
SESSION_ENGINE = "front.sessions"

ROOT_URLCONF = "config.urls"

TEMPLATES = [
    {
        "BACKEND": "django.template.backends.django.DjangoTemplates",
        "DIRS": [BASE_DIR / "templates"],
        "APP_DIRS": True,
        "OPTIONS": {
            "context_processors": [
                "django.template.context_processors.request",
                "django.contrib.auth.context_processors.auth",
                "django.contrib.messages.context_processors.messages",
                "front.context_processors.roles",
            ],
        },
    },
]

WSGI_APPLICATION = "config.wsgi.application"

_default_db = f"sqlite:///{VAR_DIR / 'recap.sqlite3'}"


#: psycopg prepares a statement once it has run more than this many times on a connection.
PREPARE_AFTER_RUNS = 2


def database_from_env(default_url):
    """The default database from ``DATABASE_URL``, its connections kept.

    On PostgreSQL the statements are prepared (``DB_PREPARED``, true).
    A web or worker process keeps its connection between requests for
    ``DB_CONN_MAX_AGE`` seconds (600; 0 closes it after every request, as
    Django does by default) and, with ``DB_CONN_HEALTH_CHECKS`` (true), checks
    a kept connection with a cheap query before the first use in a request, so
    a connection the server dropped meanwhile is replaced instead of failing
    the request.
    """
    max_age = env_int("DB_CONN_MAX_AGE", 600)
    if max_age < 0:
        raise ImproperlyConfigured(f"DB_CONN_MAX_AGE must be 0 or more seconds, not {max_age}")
    try:
        db = dj_database_url.parse(
            env_str("DATABASE_URL", default_url), conn_max_age=max_age,
            conn_health_checks=env_bool("DB_CONN_HEALTH_CHECKS", True),
        )
    except ValueError as exc:
        raise ImproperlyConfigured(f"DATABASE_URL is not a database address: {exc}") from None
    if db["ENGINE"] == "django.db.backends.postgresql" and env_bool("DB_PREPARED", True):
        # Parameters travel apart from the SQL (psycopg's server-side binding)
        # and a statement run a third time on a connection is kept prepared
        # (parsed and planned once): the desk's check-in about 6 ms quicker
        # here.  DB_PREPARED=false behind a pooler that hands one client's
        # statements to several server connections (PgBouncer's transaction
        # pooling without prepared-statement support).
        options = db.setdefault("OPTIONS", {})
        options.setdefault("server_side_binding", True)
        options.setdefault("prepare_threshold", PREPARE_AFTER_RUNS)
    return db


DATABASES = {"default": database_from_env(_default_db)}
if env_str("TEST_DATABASE_NAME"):
    # Two test runs against one server at once need test databases of their own.
    DATABASES["default"].setdefault("TEST", {})["NAME"] = env_str("TEST_DATABASE_NAME")
if DATABASES["default"]["ENGINE"] == "django.db.backends.sqlite3":
    # SQLite cannot create its file in a folder that does not exist yet.
    VAR_DIR.mkdir(parents=True, exist_ok=True)
    DATABASES["default"].setdefault("OPTIONS", {})
    # WAL lets the web process read while a background job writes.
    DATABASES["default"]["OPTIONS"].setdefault(
        "init_command", "PRAGMA journal_mode=WAL; PRAGMA synchronous=NORMAL;"
    )
    # Several web workers and the background worker write to one file: every
    # transaction takes the write lock when it begins (BEGIN IMMEDIATE), so a
    # writer that finds the lock taken waits for it (up to the busy timeout,
    # in seconds) instead of failing when it upgrades from reading to writing.
    DATABASES["default"]["OPTIONS"].setdefault("transaction_mode", "IMMEDIATE")
    DATABASES["default"]["OPTIONS"].setdefault("timeout", env_int("SQLITE_BUSY_TIMEOUT", 20))
    # A file test database, so a worker process in an integration test sees it.
    DATABASES["default"].setdefault("TEST", {})["NAME"] = str(VAR_DIR / f"test-{os.getpid()}.sqlite3")

DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.UserAttributeSimilarityValidator"},
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator"},
    {"NAME": "django.contrib.auth.password_validation.CommonPasswordValidator"},
    {"NAME": "django.contrib.auth.password_validation.NumericPasswordValidator"},
]

LANGUAGE_CODE = "en-gb"
TIME_ZONE = env_str("TIME_ZONE", "Europe/London")
USE_I18N = True
USE_TZ = True

STATIC_URL = "static/"
STATIC_ROOT = VAR_DIR / "static"
STORAGES = {
    "default": {"BACKEND": "django.core.files.storage.FileSystemStorage"},
    "staticfiles": {
        "BACKEND": (
            "whitenoise.storage.CompressedManifestStaticFilesStorage"
            if not DEBUG and env_bool("RECAP_MANIFEST_STATIC", False)
            else "django.contrib.staticfiles.storage.StaticFilesStorage"
        )
    },
}
WHITENOISE_USE_FINDERS = True

LOGIN_URL = "login"
LOGIN_REDIRECT_URL = "home"
LOGOUT_REDIRECT_URL = "login"

# Largest upload the CSV import page accepts (bytes).  The importer streams the
# file row by row, so the limit is about disk and patience, not memory; larger
# files are imported with `manage.py import_fleet`.  Uploads up to
# RECAP_IMPORT_INLINE_BYTES are imported while the browser waits (a few
# seconds); larger ones run as a background job with a page of their own, so
# no web worker is kept past its timeout.
FILE_UPLOAD_MAX_MEMORY_SIZE = 2_621_440
RECAP_UPLOAD_MAX_BYTES = env_int("RECAP_UPLOAD_MAX_BYTES", 50 * 1024 * 1024)
RECAP_IMPORT_INLINE_BYTES = env_int("RECAP_IMPORT_INLINE_BYTES", 512 * 1024)

# E-mail: by default messages are written as files under var/mail/ so a user
# of the demo can read them.  Set EMAIL_HOST to send through SMTP.
EMAIL_HOST = env_str("EMAIL_HOST")
if EMAIL_HOST:
    EMAIL_BACKEND = "django.core.mail.backends.smtp.EmailBackend"
    EMAIL_PORT = env_int("EMAIL_PORT", 587)
    EMAIL_HOST_USER = env_str("EMAIL_HOST_USER")
    EMAIL_HOST_PASSWORD = env_str("EMAIL_HOST_PASSWORD")
    EMAIL_USE_TLS = env_bool("EMAIL_USE_TLS", True)
else:
    EMAIL_BACKEND = "django.core.mail.backends.filebased.EmailBackend"
    EMAIL_FILE_PATH = VAR_DIR / "mail"
DEFAULT_FROM_EMAIL = env_str("DEFAULT_FROM_EMAIL", "recap-scheduler@localhost")
# Links in e-mail (the digest's unsubscribe link, the app) start with this.
RECAP_BASE_URL = env_str("RECAP_BASE_URL", "http://127.0.0.1:8000")
# The digest: a failed send is tried again after this many seconds, doubling
# up to an hour; a send a worker left half-done is taken up again after the lease.
DIGEST_RETRY_BASE_SECONDS = env_int("RECAP_DIGEST_RETRY_BASE_SECONDS", 60)
DIGEST_LEASE_SECONDS = env_int("RECAP_DIGEST_LEASE_SECONDS", 300)

# Background jobs.  REDIS_URL set: Redis is the Celery broker and result
# store (production; any number of workers on any hosts).  Unset: the embedded
# default, a broker in folders under var/celery that one machine's worker
# (`make run` starts it, with the schedule) reads; no Redis needed.
REDIS_URL = env_str("REDIS_URL")
CELERY_FOLDER = VAR_DIR / "celery"
if REDIS_URL:
    CELERY_BROKER_URL = REDIS_URL
    CELERY_RESULT_BACKEND = REDIS_URL
else:
    CELERY_BROKER_URL = "filesystem://"
    CELERY_BROKER_TRANSPORT_OPTIONS = {
        "data_folder_in": str(CELERY_FOLDER / "queue"),
        "data_folder_out": str(CELERY_FOLDER / "queue"),
        "processed_folder": str(CELERY_FOLDER / "processed"),
        "control_folder": str(CELERY_FOLDER / "control"),
        "store_processed": False,
        "polling_interval": 0.2,
    }
    CELERY_RESULT_BACKEND = None
    for _sub in ("queue", "processed", "control"):  # the folder broker needs them before the first message
        try:
            (CELERY_FOLDER / _sub).mkdir(parents=True, exist_ok=True)
        except OSError:
            pass
CELERY_TASK_ALWAYS_EAGER = env_bool("CELERY_TASK_ALWAYS_EAGER", False)
# The nightly refresh sends its batches to all workers (a chord; needs the
# Redis result backend) when on; else one worker goes through the batches.
RECAP_PARALLEL_REFRESH = env_bool("RECAP_PARALLEL_REFRESH", bool(REDIS_URL))
# The cache carries a background import's rows-read figure to the page (the
# import's own transaction holds SQLite's write lock): Redis with REDIS_URL,
# else files under var/cache that every process on the machine reads.
if REDIS_URL:
    CACHES = {"default": {"BACKEND": "django.core.cache.backends.redis.RedisCache", "LOCATION": REDIS_URL}}
else:
    CACHES = {"default": {"BACKEND": "django.core.cache.backends.filebased.FileBasedCache",
                          "LOCATION": str(VAR_DIR / "cache")}}
# The schedule lives in the database (django-celery-beat), so managers edit it
# in the app; reports/schedule.py makes the default entries after migrate.
CELERY_BEAT_SCHEDULER = "django_celery_beat.schedulers:DatabaseScheduler"
CELERY_TASK_EAGER_PROPAGATES = True
CELERY_TASK_ACKS_LATE = True
CELERY_TASK_TIME_LIMIT = env_int("CELERY_TASK_TIME_LIMIT", 900)
CELERY_TASK_SOFT_TIME_LIMIT = env_int("CELERY_TASK_SOFT_TIME_LIMIT", 840)
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
CELERY_TIMEZONE = TIME_ZONE

# Production hardening: on when DEBUG is off, so `check --deploy` passes.
if not DEBUG:
    SECURE_SSL_REDIRECT = env_bool("SECURE_SSL_REDIRECT", True)
    SESSION_COOKIE_SECURE = env_bool("SESSION_COOKIE_SECURE", True)
    CSRF_COOKIE_SECURE = env_bool("CSRF_COOKIE_SECURE", True)
    SECURE_HSTS_SECONDS = env_int("SECURE_HSTS_SECONDS", 31536000)
    SECURE_HSTS_INCLUDE_SUBDOMAINS = env_bool("SECURE_HSTS_INCLUDE_SUBDOMAINS", True)
    SECURE_HSTS_PRELOAD = env_bool("SECURE_HSTS_PRELOAD", True)

# A reverse proxy in front (it terminates TLS and sets X-Forwarded-Proto and
# X-Forwarded-For): only then are those headers believed; without a proxy any
# client could send them.
RECAP_BEHIND_PROXY = env_bool("RECAP_BEHIND_PROXY", False)
if RECAP_BEHIND_PROXY:
    SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https")

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": env_str("LOG_LEVEL", "WARNING")},
    # The folder broker has no host, and the queue library says so at every
    # task queued ("No hostname was supplied"): true and harmless, so dropped.
    "filters": {"folder_broker_host": {"()": "config.logfilters.NotFolderBrokerHost"}},
    "loggers": {"kombu.connection": {"filters": ["folder_broker_host"]}},
}
