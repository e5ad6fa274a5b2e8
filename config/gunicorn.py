"""gunicorn's settings for the app's web server:
``gunicorn -c python:config.gunicorn config.wsgi`` (``make web``, the
Procfile and ``manage.py bench_desk`` use it).

``post_worker_init``: once a worker has loaded the app, it imports every
view (the URLconf, and through it the life engine with numpy and scipy),
then moves everything made so far out of the cyclic garbage collector's way
(``gc.freeze``).  Those hundred thousand objects live as long as the
worker, yet each full collection walked them all: about 75 ms, once in a
few dozen requests, landing on some desk clerk's check-in (measured
in-process on the 10,000-unit benchmark fleet: 60 check-ins, max 105 ms
with one full collection, 37 ms frozen).  Objects made while serving
requests are collected as before.
"""

import gc


def post_worker_init(worker):
    from django.urls import get_resolver

    get_resolver().url_patterns  # noqa: B018 - imports every view now, not on a clerk's first request
    gc.collect()
    gc.freeze()
