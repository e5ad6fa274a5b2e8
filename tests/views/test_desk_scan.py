"""The start page's tag box sends the desk to the form that fits the unit."""

import datetime as dt

from django.urls import reverse
from django.utils import timezone

from fleet.models import Unit
from front.workflows import rental_check_out

URL = reverse("desk_scan")


def test_a_unit_in_the_store_goes_to_check_out(client, users, fleet):
    client.force_login(users.desk)
    response = client.get(URL, {"tag": " nmb-0001 "})
    assert response["Location"] == reverse("check_out") + "?tag=NMB-0001"


def test_a_unit_out_on_hire_goes_to_check_in(client, users, fleet):
    rental_check_out(unit_id=fleet.unit.pk, job_ref="J-1", out_at=timezone.now() - dt.timedelta(hours=2))
    client.force_login(users.desk)
    assert client.get(URL, {"tag": "NMB-0001"})["Location"] == reverse("check_in") + "?tag=NMB-0001"


def test_a_held_unit_goes_to_its_page_with_a_warning(client, users, fleet):
    Unit.objects.filter(pk=fleet.unit.pk).update(status=Unit.Status.HOLD)
    client.force_login(users.desk)
    response = client.get(URL, {"tag": "NMB-0001"}, follow=True)
    assert response.redirect_chain[-1][0] == reverse("unit_detail", args=["NMB-0001"])
    assert "NMB-0001 is held; it cannot go out until the workshop releases it." in response.content.decode()


def test_an_unknown_tag_returns_to_the_start_page_with_a_message(client, users, fleet):
    client.force_login(users.desk)
    response = client.get(URL, {"tag": "qq-1"}, follow=True)
    assert response.redirect_chain[-1][0] == reverse("home")
    assert "No unit has the asset tag QQ-1" in response.content.decode()


def test_a_tag_is_found_by_its_index_and_one_stored_in_small_letters_still_is(client, users, fleet,
                                                                           django_assert_num_queries):
    """A scanned tag is looked up by the tag's unique index (one query, no
    case-blind read of every unit); a tag stored in small letters around the
    validator (by SQL, say) is still found, with one query more."""
    from front import selectors

    with django_assert_num_queries(1):
        assert selectors.unit_by_tag(" nmb-0001 ").pk == fleet.unit.pk
    Unit.objects.filter(pk=fleet.unit.pk).update(asset_tag="nmb-0001")
    with django_assert_num_queries(2):
        assert selectors.unit_by_tag("NMB-0001").pk == fleet.unit.pk
    client.force_login(users.desk)
    assert client.get(URL, {"tag": "NMB-0001"})["Location"] == reverse("check_out") + "?tag=nmb-0001"
