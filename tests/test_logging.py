"""The settings' logging: the folder broker's missing-host warning is dropped,
other warnings of the same logger still reach the log."""

import logging


def test_the_folder_brokers_missing_host_warning_is_dropped_and_others_pass(caplog):
    log = logging.getLogger("kombu.connection")
    with caplog.at_level(logging.WARNING):
        log.warning("No hostname was supplied. Reverting to default 'localhost'")
        log.warning("Connection to broker lost")
    messages = [r.getMessage() for r in caplog.records]
    assert messages == ["Connection to broker lost"]
