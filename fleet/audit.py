"""The register's audit history (django-simple-history), with its manager
class made once per model.

``Model.history`` (and every historical record written, which reaches the
manager through it) builds a new manager class from the queryset class on
each access in django-simple-history: about 0.2 ms of ``inspect.getmembers``
a time, three times in a desk check-in, and each class left for the garbage
collector's cycle detection.  ``KeptHistoryManager`` makes that class once
and hands out the same one; the manager itself is still made per access,
bound to its model and instance as before.
"""

import functools

from simple_history.manager import HistoryManager
from simple_history.models import HistoricalRecords


class KeptHistoryManager(HistoryManager):
    """``HistoryManager`` whose ``from_queryset`` class is made once per
    (manager class, queryset class, name)."""

    @classmethod
    @functools.cache
    def from_queryset(cls, queryset_class, class_name=None):
        return super(KeptHistoryManager, cls).from_queryset(queryset_class, class_name)


class AuditTrail(HistoricalRecords):
    """``HistoricalRecords`` with ``KeptHistoryManager`` (unless told another)."""

    def __init__(self, *args, history_manager=KeptHistoryManager, **kwargs):
        super().__init__(*args, history_manager=history_manager, **kwargs)
