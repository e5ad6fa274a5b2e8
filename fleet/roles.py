"""The three kinds of user and what each may do.

Roles are Django groups, so a manager can grant them in the admin.  A
superuser counts as every role.
"""

from django.contrib.auth.models import Group

DESK = "desk"
TECHNICIAN = "technician"
MANAGER = "manager"
ROLES = (DESK, TECHNICIAN, MANAGER)
ROLE_LABELS = {DESK: "Rental desk", TECHNICIAN: "Technician", MANAGER: "Manager"}


def ensure_groups():
    """Create the role groups if they are missing; returns {role: Group}."""
    return {role: Group.objects.get_or_create(name=role)[0] for role in ROLES}


def user_roles(user):
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
