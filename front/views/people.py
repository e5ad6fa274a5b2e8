"""People: the manager adds logins and grants or takes away the app's roles."""

from django.contrib import messages
from django.contrib.auth import get_user_model
from django.core.exceptions import ValidationError
from django.shortcuts import get_object_or_404, redirect
from django.views.decorators.http import require_http_methods

from fleet import people
from fleet.roles import ROLE_LABELS, ROLES

from ..forms import PersonForm
from .access import manager_required, page


@manager_required
def people_list(request):
    rows = []
    for user in people.people_list():
        held = {g.name for g in user.groups.all()}
        rows.append({"user": user, "roles": [ROLE_LABELS[r] for r in ROLES if r in held or user.is_superuser]})
    return page(request, "front/people.html", {"rows": rows})


def _save(request, form, person):
    data = form.cleaned_data
    try:
        return people.person_save(
            by=request.user, user=person, username=data.get("username", ""), first_name=data["first_name"],
            last_name=data["last_name"], email=data["email"], roles=data["roles"],
            is_active=data["is_active"], password=data["password1"] or None)
    except people.PeopleError as exc:
        form.add_error(None, str(exc))
    except ValidationError as exc:
        if hasattr(exc, "error_dict"):
            for field, errors in exc.message_dict.items():
                form.add_error(field if field in form.fields else None, errors)
        else:
            form.add_error("password1", exc.messages)
    return None


@manager_required
@require_http_methods(["GET", "POST"])
def person_new(request):
    form = PersonForm(request.POST or None, initial={"is_active": True})
    if request.method == "POST" and form.is_valid():
        user = _save(request, form, None)
        if user is not None:
            messages.success(request, f"Added the login {user.get_username()}.")
            return redirect("people")
    return page(request, "front/person_form.html", {"form": form, "person": None})


@manager_required
@require_http_methods(["GET", "POST"])
def person_edit(request, pk):
    person = get_object_or_404(get_user_model(), pk=pk)
    if person.is_superuser:
        messages.warning(request, f"{person.get_username()} is a superuser and holds every role; "
                                  f"change it in the admin.")
        return redirect("people")
    initial = {"first_name": person.first_name, "last_name": person.last_name, "email": person.email,
               "is_active": person.is_active, "roles": [g.name for g in person.groups.filter(name__in=ROLES)]}
    form = PersonForm(request.POST or None, initial=initial, person=person)
    if request.method == "POST" and form.is_valid():
        user = _save(request, form, person)
        if user is not None:
            messages.success(request, f"Saved {user.get_username()}.")
            return redirect("people")
    return page(request, "front/person_form.html", {"form": form, "person": person})
