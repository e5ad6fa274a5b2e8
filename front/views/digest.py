"""The weekly digest: subscribe or unsubscribe (technicians and managers), the
unsubscribe link every mail carries (no login: the signed token says who),
and for managers the schedule, "send now" and how the last digests went."""

from django import forms
from django.contrib import messages
from django.core import signing
from django.db import transaction
from django.shortcuts import redirect
from django.utils import timezone
from django.views.decorators.csrf import csrf_exempt
from django.views.decorators.http import require_POST

from fleet.roles import MANAGER, user_roles
from reports import schedule
from reports.digest import delivery
from reports.digest.period import period_of
from reports.digest.render import user_from_token
from reports.models import Digest, DigestDelivery

from .access import manager_required, page, technician_required

RECENT_DIGESTS = 6


class SubscriptionForm(forms.Form):
    subscribed = forms.BooleanField(required=False, label="Send me the weekly digest")
    email = forms.EmailField(label="To this address", max_length=254)


class ScheduleForm(forms.Form):
    digest_enabled = forms.BooleanField(required=False, label="Send the weekly digest")
    digest_weekday = forms.TypedChoiceField(label="on", coerce=int,
                                            choices=[(i, name) for i, name in enumerate(schedule.WEEKDAYS)])
    digest_time = forms.TimeField(label="at", widget=forms.TimeInput(attrs={"type": "time"}, format="%H:%M"))
    nightly_enabled = forms.BooleanField(required=False, label="Refresh every forecast each night")
    nightly_time = forms.TimeField(label="at", widget=forms.TimeInput(attrs={"type": "time"}, format="%H:%M"))


def _manager_context(schedule_form=None):
    state = schedule.schedule_state()
    digests = list(Digest.objects.defer("attachment", "snapshot", "content")[:RECENT_DIGESTS])
    counts = delivery.delivery_counts(digests)
    failed = list(DigestDelivery.objects.filter(state=DigestDelivery.State.FAILED, digest__in=digests)
                  .select_related("user")[:20])
    return {
        "schedule": state,
        "schedule_form": schedule_form or ScheduleForm(initial={
            "digest_enabled": state["digest_enabled"], "digest_weekday": state["digest_weekday"] or 0,
            "digest_time": state["digest_time"], "nightly_enabled": state["nightly_enabled"],
            "nightly_time": state["nightly_time"]}),
        "digests": [(d, counts[d.pk]) for d in digests],
        "failed": failed,
        "this_period": period_of(timezone.localdate()),
        "subscriber_count": delivery.subscribers().count(),
    }


@technician_required
def digest_settings(request):
    """Opt in or out; managers also set the schedule and may send now."""
    user = request.user
    is_manager = MANAGER in user_roles(user)
    sub_form, schedule_form = None, None
    if request.method == "POST" and request.POST.get("form") == "subscription":
        sub_form = SubscriptionForm(request.POST)
        if sub_form.is_valid():
            delivery.subscription_set(user=user, active=sub_form.cleaned_data["subscribed"],
                                      email=sub_form.cleaned_data["email"])
            messages.success(request, "You will receive the weekly digest." if sub_form.cleaned_data["subscribed"]
                             else "You will not receive the weekly digest.")
            return redirect("digest_settings")
    elif request.method == "POST" and request.POST.get("form") == "schedule" and is_manager:
        schedule_form = ScheduleForm(request.POST)
        if schedule_form.is_valid():
            c = schedule_form.cleaned_data
            schedule.schedule_update(digest_weekday=c["digest_weekday"], digest_time=c["digest_time"],
                                     digest_enabled=c["digest_enabled"], nightly_time=c["nightly_time"],
                                     nightly_enabled=c["nightly_enabled"])
            messages.success(request, "The schedule is saved; the worker picks it up within a few seconds.")
            return redirect("digest_settings")
    ctx = {
        "subscribed": delivery.is_subscribed(user),
        "sub_form": sub_form or SubscriptionForm(initial={"subscribed": delivery.is_subscribed(user),
                                                          "email": user.email}),
        "is_manager_page": is_manager,
    }
    if is_manager:
        ctx.update(_manager_context(schedule_form))
    status = 400 if (sub_form is not None or schedule_form is not None) else 200
    return page(request, "front/digest.html", ctx, status=status)


@manager_required
@require_POST
def digest_send_now(request):
    """Queue this week's digest now: each subscriber still gets it at most once
    this week (a second press reaches only those who have not had it)."""
    period = period_of(timezone.localdate())
    already = set(DigestDelivery.objects.filter(period=period, state=DigestDelivery.State.SENT)
                  .values_list("user_id", flat=True))
    waiting = [u for u in delivery.subscribers() if u.pk not in already]
    if not waiting:
        messages.info(request, f"Every subscriber has had the digest of week {period} already.")
        return redirect("digest_settings")
    from reports.tasks import digest_send

    transaction.on_commit(lambda: digest_send.delay(period))
    messages.success(request, f"The digest of week {period} is on its way to {len(waiting)} subscriber"
                              f"{'s' if len(waiting) != 1 else ''}; each gets it once.")
    return redirect("digest_settings")


@csrf_exempt
def digest_unsubscribe(request, token):
    """GET: a page with a button (mail scanners follow links; they must not
    unsubscribe anyone).  POST: unsubscribe, also as RFC 8058 one-click."""
    try:
        user_id = user_from_token(token)
    except signing.BadSignature:
        return page(request, "front/digest_unsubscribe.html", {"bad": True}, status=400)
    from django.contrib.auth import get_user_model

    user = get_user_model().objects.filter(pk=user_id).first()
    if user is None:
        return page(request, "front/digest_unsubscribe.html", {"bad": True}, status=400)
    done = False
    if request.method == "POST":
        delivery.subscription_set(user=user, active=False)
        done = True
    return page(request, "front/digest_unsubscribe.html", {"done": done, "who": user.email or user.get_username(),
                                                           "subscribed": delivery.is_subscribed(user)})
