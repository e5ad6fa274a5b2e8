"""Logging filters for the settings' LOGGING."""

import logging


class NotFolderBrokerHost(logging.Filter):
    """Drops the queue library's "No hostname was supplied" warning, which
    the embedded folder broker (no host by design) triggers at every task
    queued; everything else passes."""

    def filter(self, record):
        return not record.getMessage().startswith("No hostname was supplied")
