"""The digest as an e-mail: a plain-text part, an HTML part (inline styles,
no images, so it reads in any mail program) and the due list as a PDF.

Each message carries an unsubscribe link with a signed token for its
subscriber (``django.core.signing``, salted; no expiry: an old digest's link
still works), also as ``List-Unsubscribe`` headers with one-click POST
(RFC 8058), and a Message-ID fixed by period and subscriber, so a message a
mail server already took is recognised if it ever arrives twice.
"""

from django.conf import settings
from django.core import signing
from django.core.mail import EmailMultiAlternatives
from django.template.loader import render_to_string
from django.urls import reverse

UNSUBSCRIBE_SALT = "reports.digest.unsubscribe"
BAR_WIDTH_PX = 260
TEXT_BAR = 30


def unsubscribe_token(user_id):
    return signing.dumps({"u": int(user_id)}, salt=UNSUBSCRIBE_SALT, compress=True)


def user_from_token(token):
    """The user id a token was made for; ``signing.BadSignature`` if forged."""
    data = signing.loads(token, salt=UNSUBSCRIBE_SALT)
    return int(data["u"])


def absolute(path):
    return settings.RECAP_BASE_URL.rstrip("/") + path


def message_id(period, user_id):
    domain = settings.DEFAULT_FROM_EMAIL.rsplit("@", 1)[-1].strip("> ") or "localhost"
    return f"<digest-{period}-{user_id}@{domain}>"


def _chart_rows(chart):
    top = max([bar["count"] for bar in chart] + [1])
    return [dict(bar, px=round(BAR_WIDTH_PX * bar["count"] / top), text="#" * round(TEXT_BAR * bar["count"] / top))
            for bar in chart]


def subject(content):
    c = content["counts"]
    overdue = next(n for v, _, n in c["forecast"] if v == "overdue")
    due = next(n for v, _, n in c["forecast"] if v == "due")
    return (f"Recap digest {content['period']}: {content['need_work']} units need work, "
            f"{overdue} overdue, {due} due")


def build_message(*, content, attachment, user, email, connection=None):
    """The EmailMultiAlternatives for one subscriber."""
    unsubscribe = absolute(reverse("digest_unsubscribe", args=[unsubscribe_token(user.pk)]))
    ctx = {
        "c": content, "name": user.get_full_name() or user.get_username(), "unsubscribe_url": unsubscribe,
        "app_url": absolute(reverse("home")), "workshop_url": absolute(reverse("workshop")),
        "settings_url": absolute(reverse("digest_settings")), "chart": _chart_rows(content["chart"]),
        "bar_width": BAR_WIDTH_PX,
    }
    text = render_to_string("reports/email/digest.txt", ctx)
    html = render_to_string("reports/email/digest.html", ctx)
    msg = EmailMultiAlternatives(
        subject=subject(content), body=text, from_email=settings.DEFAULT_FROM_EMAIL, to=[email],
        connection=connection,
        headers={"Message-ID": message_id(content["period"], user.pk), "List-Unsubscribe": f"<{unsubscribe}>",
                 "List-Unsubscribe-Post": "List-Unsubscribe=One-Click", "Auto-Submitted": "auto-generated"})
    msg.attach_alternative(html, "text/html")
    if attachment:
        msg.attach(f"due-list-{content['period']}.pdf", bytes(attachment), "application/pdf")
    return msg
