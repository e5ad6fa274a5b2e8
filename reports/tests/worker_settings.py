"""Settings of a test worker whose mail backend stalls in its first send
(reports/tests/test_digest_worker.py kills it there)."""

from config.settings import *  # noqa: F401,F403

EMAIL_BACKEND = "reports.tests.mailbox.StallOnceFileBackend"
