"""Logins and their roles, as a manager keeps them (the People page).

A manager may add a login, change its name and e-mail, set a new password,
grant and take away the app's three roles, and switch a login off; nothing
else: no superuser is touched here, no other permission is given, and a
manager cannot take away their own manager role or switch off their own
login (another manager must).  A login with the manager role may use the
admin (``is_staff``), with the manager group's permissions.
"""

from django.contrib.auth import get_user_model
from django.contrib.auth.password_validation import validate_password
from django.core.exceptions import ValidationError
from django.db import transaction

from .roles import MANAGER, ROLES, ensure_groups, user_roles


class PeopleError(Exception):
    """A change the rules refuse; the message is meant for the manager."""


def people_list():
    """Every login with its groups, by username (two queries)."""
    return get_user_model().objects.prefetch_related("groups").order_by("username")


def _check_manager(by):
    if MANAGER not in user_roles(by):
        raise PeopleError("Only a manager may change logins and roles.")


@transaction.atomic
def person_save(*, by, user=None, username="", first_name="", last_name="", email="", roles=(), is_active=True,
                password=None):
    """Create a login (``user`` None) or change one; returns the user.

    Raises ``PeopleError`` for what the rules refuse and ``ValidationError``
    (by field) for a username or password the site's validators refuse.
    Nothing is saved when either is raised.
    """
    _check_manager(by)
    User = get_user_model()
    roles = set(roles)
    unknown = roles - set(ROLES)
    if unknown:
        raise PeopleError(f"Unknown role: {', '.join(sorted(unknown))}.")
    if user is not None:
        user = User.objects.select_for_update().get(pk=user.pk)
        if user.is_superuser:
            raise PeopleError(f"{user.get_username()} is a superuser and holds every role; change it in the admin.")
        if user.pk == by.pk and MANAGER not in roles:
            raise PeopleError("You cannot take away your own manager role; ask another manager.")
        if user.pk == by.pk and not is_active:
            raise PeopleError("You cannot switch off your own login; ask another manager.")
    else:
        user = User(username=username)
    user.first_name, user.last_name, user.email = first_name.strip(), last_name.strip(), email.strip()
    user.is_active = bool(is_active)
    user.is_staff = MANAGER in roles
    if password:
        validate_password(password, user)
        user.set_password(password)
    elif user.pk is None:
        user.set_unusable_password()
    user.full_clean(exclude=["password"])
    user.save()
    groups = ensure_groups()
    user.groups.remove(*[groups[r] for r in ROLES if r not in roles])
    user.groups.add(*[groups[r] for r in ROLES if r in roles])
    user.__dict__.pop("_recap_roles", None)
    return user


def password_problems(password, user=None):
    """The site's password rules' messages for ``password`` (empty when it passes)."""
    try:
        validate_password(password, user)
    except ValidationError as exc:
        return list(exc.messages)
    return []
