"""The three kinds of user and what each may do.

Roles are Django groups; managers grant and take them away on the People
page (``fleet.people``).  The manager group holds the admin permissions of
the register and the engine, and of the sign-in lockouts (to release one
early).  A superuser counts as every role.
"""

from django.contrib.auth import get_user_model
from django.contrib.auth.backends import ModelBackend
from django.contrib.auth.models import Group, Permission
from django.core.exceptions import ValidationError
from django.db.models import Exists, OuterRef

from .compiled import compile_once

DESK = "desk"
TECHNICIAN = "technician"
MANAGER = "manager"
ROLES = (DESK, TECHNICIAN, MANAGER)
ROLE_LABELS = {DESK: "Rental desk", TECHNICIAN: "Technician", MANAGER: "Manager"}


#: Apps whose admin permissions the manager group holds.
MANAGER_APPS = ("fleet", "scheduling", "reports", "axes")


def ensure_groups():
    """Create the role groups if they are missing, the manager group with
    its admin permissions; returns {role: Group}."""
    groups = {}
    for role in ROLES:
        group, created = Group.objects.get_or_create(name=role)
        if role == MANAGER and (created or not group.permissions.exists()):
            group.permissions.set(Permission.objects.filter(content_type__app_label__in=MANAGER_APPS))
        groups[role] = group
    return groups


def groups_after_migrate(sender, **kwargs):
    """post_migrate: the role groups exist, with the manager's permissions
    (run for the last app, when every app's permissions have been made)."""
    from django.conf import settings

    last = settings.INSTALLED_APPS[-1].rsplit(".", 1)[-1]
    if sender.label == last:
        ensure_groups()


def user_roles(user):
    """The roles ``user`` holds (a set of ``ROLES``): read once per request,
    with the user when ``RolesBackend`` loaded it."""
    if not user.is_authenticated:
        return set()
    if user.is_superuser:
        return set(ROLES)
    cached = getattr(user, "_recap_roles", None)
    if cached is None:
        cached = set(user.groups.filter(name__in=ROLES).values_list("name", flat=True))
        user._recap_roles = cached
    return cached


def has_role(user, *roles):
    """True if the user holds any of ``roles``."""
    return bool(user_roles(user) & set(roles))


class RolesBackend(ModelBackend):
    """Django's own sign-in by username and password; the signed-in user of
    each request is read with the roles they hold in the same query (one
    ``EXISTS`` per role), where Django would read the user, then the page
    their groups.  Read on every request, as the groups would be: a role a
    manager grants or takes away holds from the user's next page.

    The query is the ORM's, compiled once per process and database (compiling
    its three subqueries took longer than both of Django's queries together:
    measured 2.6-3.3 ms against 1.4-1.7 ms on PostgreSQL here; run from its
    compiled SQL, 0.9 ms; on SQLite 0.09 ms against 0.49 ms)."""

    _compiled = {}  # {database alias: (sql, params, index of the user id among them)}

    def get_user(self, user_id):
        user_model = get_user_model()
        try:
            user_id = user_model._meta.pk.to_python(user_id)
        except ValidationError:
            return None
        manager = user_model._default_manager
        sql, params, at = self._query(user_model, manager.db)
        params = list(params)
        params[at] = user_id
        user = next(iter(manager.raw(sql, params)), None)
        if user is None or not self.user_can_authenticate(user):
            return None
        user._recap_roles = {role for role in ROLES if getattr(user, f"holds_role_{role}")}
        return user

    @classmethod
    def _query(cls, user_model, alias):
        if alias not in cls._compiled:
            memberships = user_model.groups.through.objects.filter(user_id=OuterRef("pk"))
            held = {f"holds_role_{role}": Exists(memberships.filter(group__name=role)) for role in ROLES}
            marker = -7_301_002  # no user has it: where the user id goes among the parameters
            query = user_model._default_manager.using(alias).annotate(**held).filter(pk=marker)
            sql, params, (at,) = compile_once(query, alias, (marker,))
            cls._compiled[alias] = (sql, params, at)
        return cls._compiled[alias]
