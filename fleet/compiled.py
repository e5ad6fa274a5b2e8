"""A query compiled once and run many times.

Django compiles a queryset's SQL on every run; for the small reads every
request makes (the session, the signed-in user with their roles) compiling
cost as much as running them.  ``compile_once`` compiles a queryset built
with marker values where the varying values go, and tells where each marker
landed among the parameters; the caller puts its own values there and runs
the SQL (``Manager.raw``)."""

from django.core.exceptions import ImproperlyConfigured
from django.db import connections


def compile_once(queryset, alias, markers):
    """(sql, params, indices): ``queryset``'s SQL and parameters for the
    database ``alias``, and the index of each of ``markers`` (values as the
    queryset was given them, adapted as the database's compiler adapts them)
    among the parameters.  Raises ImproperlyConfigured unless each marker
    occurs exactly once."""
    sql, params = queryset.query.get_compiler(alias).as_sql()
    ops = connections[alias].ops
    indices = []
    for marker in markers:
        adapted = ops.adapt_datetimefield_value(marker) if hasattr(marker, "tzinfo") else marker
        found = [k for k, value in enumerate(params) if value == adapted]
        if len(found) != 1:
            raise ImproperlyConfigured(f"The marker {marker!r} occurs {len(found)} times in the compiled query.")
        indices.append(found[0])
    return sql, tuple(params), indices
