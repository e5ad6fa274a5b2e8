"""What the bench commands share: the unit by tag, the technician by
username, and refusals as one-line command errors."""

from django.contrib.auth import get_user_model
from django.core.exceptions import ValidationError
from django.core.management.base import CommandError

from fleet.roles import MANAGER, TECHNICIAN, has_role
from fleet.services import ServiceError
from front.bench import unit_by_tag_or_error


def unit_or_error(tag):
    try:
        return unit_by_tag_or_error(tag)
    except ServiceError as exc:
        raise CommandError(str(exc)) from None


def technician_or_error(username):
    if not username:
        return None
    user = get_user_model().objects.filter(username=username).first()
    if user is None:
        raise CommandError(f"No user is called {username!r}.")
    if not has_role(user, TECHNICIAN, MANAGER) and not user.is_superuser:
        raise CommandError(f"{username} is not a technician.")
    return user


def one_line(exc):
    """A refusal of the register or the workflows as one line."""
    if isinstance(exc, ValidationError) and hasattr(exc, "error_dict"):
        return "; ".join(f"{field.replace('_', ' ')}: {' '.join(msgs)}" for field, msgs in exc.message_dict.items())
    if isinstance(exc, ValidationError):
        return " ".join(exc.messages)
    return " ".join(str(exc).split())


def add_technician(parser):
    parser.add_argument("--technician", metavar="USERNAME", help="Who did it (a technician's login).")
