"""config/gunicorn.py: a worker freezes what it loaded before serving."""

import gc
import sys

from config import gunicorn as web


def test_a_worker_imports_every_view_and_freezes_what_it_loaded():
    gc.unfreeze()
    try:
        web.post_worker_init(worker=None)
        assert "front.views.desk" in sys.modules and "scheduling.forecast" in sys.modules
        # Everything loaded so far (the app, its views, the engine) is out of the collector's way.
        assert gc.get_freeze_count() > 10_000
    finally:
        gc.unfreeze()
