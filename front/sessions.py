"""Sessions kept in the database, as Django's own ``db`` engine keeps them
(``SESSION_ENGINE = "front.sessions"``), each request's read run from SQL
compiled once per process and database: compiling the ORM's query cost about
as much as running it (the signed-in user's read does the same,
``fleet.roles.RolesBackend``).  Writing, ending and clearing sessions are
Django's."""

import datetime as dt

from django.contrib.sessions.backends import db
from django.db import connections, router
from django.utils import timezone

from fleet.compiled import compile_once

#: Values no session has, that show where the key and the moment go among the
#: compiled query's parameters.
_KEY_MARKER = "recap-session-key-marker-7301003"
_NOW_MARKER = dt.datetime(2001, 2, 3, 4, 5, 6, 789012, tzinfo=dt.timezone.utc)


class SessionStore(db.SessionStore):
    _compiled = {}  # {database alias: (sql, params, (index of the key, index of the moment))}

    def _get_session_from_db(self):
        model = self.model
        alias = router.db_for_read(model)
        if alias not in self._compiled:
            query = model.objects.using(alias).filter(session_key=_KEY_MARKER, expire_date__gt=_NOW_MARKER)
            self._compiled[alias] = compile_once(query, alias, (_KEY_MARKER, _NOW_MARKER))
        sql, params, (at_key, at_now) = self._compiled[alias]
        params = list(params)
        params[at_key] = self.session_key
        params[at_now] = connections[alias].ops.adapt_datetimefield_value(timezone.now())
        session = next(iter(model.objects.using(alias).raw(sql, params)), None)
        if session is None:
            self._session_key = None
        return session
