"""The signed-in user of each request is read with the roles they hold, in
one query (``fleet.roles.RolesBackend``), and a role granted or taken away
holds from the next request."""

import pytest
from django.contrib.auth.models import Group
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse

from fleet.roles import DESK, MANAGER, TECHNICIAN, RolesBackend, ensure_groups
from tests.base import make_user


def _user_reads(queries):
    """The queries of a request that read the user or their groups."""
    return [q["sql"] for q in queries if '"auth_user"' in q["sql"] or '"auth_group"' in q["sql"]]


def test_a_page_reads_the_user_and_their_roles_in_one_query(client, db):
    client.force_login(make_user(DESK, username="clerk"))
    with CaptureQueriesContext(connection) as ctx:
        response = client.get(reverse("check_in"))
    assert response.status_code == 200
    reads = _user_reads(ctx.captured_queries)
    assert len(reads) == 1, reads  # Django's ModelBackend and the role check: two
    assert response.context["is_desk"] and not response.context["is_technician"]


@pytest.mark.parametrize("held", [set(), {DESK}, {TECHNICIAN, MANAGER}, {DESK, TECHNICIAN, MANAGER}])
def test_the_roles_read_with_the_user_are_the_groups_they_belong_to(db, held):
    groups = ensure_groups()
    user = make_user(None, username="someone")
    user.groups.set([groups[r] for r in held] + [Group.objects.create(name="not-a-role")])
    loaded = RolesBackend().get_user(user.pk)
    assert loaded.pk == user.pk
    # What Django's own relation says, asked separately.
    assert loaded._recap_roles == set(user.groups.filter(name__in=[DESK, TECHNICIAN, MANAGER])
                                      .values_list("name", flat=True)) == held


def test_an_unknown_or_inactive_user_is_nobody(db):
    user = make_user(DESK, username="gone")
    assert RolesBackend().get_user(user.pk + 1000) is None
    user.is_active = False
    user.save(update_fields=["is_active"])
    assert RolesBackend().get_user(user.pk) is None


def test_a_role_taken_away_holds_from_the_next_request(client, db):
    user = make_user(DESK, username="clerk")
    client.force_login(user)
    assert client.get(reverse("check_in")).status_code == 200
    user.groups.clear()
    assert client.get(reverse("check_in")).status_code == 403
    user.groups.add(ensure_groups()[DESK])
    assert client.get(reverse("check_in")).status_code == 200


def test_signing_in_with_the_password_still_works_and_a_wrong_one_does_not(client, db):
    user = make_user(DESK, username="clerk")
    user.set_password("a-long-enough-password-26")
    user.save()
    wrong = client.post(reverse("login"), {"username": "clerk", "password": "not-it"})
    assert wrong.status_code == 200 and "_auth_user_id" not in client.session
    right = client.post(reverse("login"), {"username": "clerk", "password": "a-long-enough-password-26"})
    assert right.status_code == 302
    assert client.session["_auth_user_backend"] == "fleet.roles.RolesBackend"
    assert client.get(reverse("check_in")).status_code == 200


def test_a_user_id_that_is_not_a_number_is_nobody(db):
    make_user(DESK, username="clerk")
    assert RolesBackend().get_user("1; DROP TABLE auth_user") is None
    assert RolesBackend().get_user(None) is None


def test_the_query_compiled_once_reads_each_user_by_their_own_id(db):
    """The SQL is compiled once and reused: each user still comes back as
    themselves, with their own roles."""
    groups = ensure_groups()
    people = {}
    for k, held in enumerate([{DESK}, {TECHNICIAN}, set(), {DESK, MANAGER}]):
        user = make_user(None, username=f"person-{k}")
        user.groups.set([groups[r] for r in held])
        people[user.pk] = held
    for pk, held in reversed(list(people.items())):
        loaded = RolesBackend().get_user(pk)
        assert (loaded.pk, loaded.username, loaded._recap_roles) == (pk, f"person-{list(people).index(pk)}", held)
