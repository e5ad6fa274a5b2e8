"""Template filters that write numbers, values and dates in the house style
(``reports.formatting``): ``{% load recap %}`` then ``{{ d|day }}``,
``{{ t|moment }}``, ``{{ d|month }}``, ``{{ uf|uf }}``, ``{{ ohm|ohm }}``,
``{{ v|volts }}``, ``{{ c|degc }}``, ``{{ h|hours }}``, ``{{ p|pct }}``."""

import datetime as dt

from django import template
from django.utils import timezone

from reports import formatting as fmt

register = template.Library()


def _local(value):
    if isinstance(value, dt.datetime) and timezone.is_aware(value):
        return timezone.localtime(value)
    return value


@register.filter
def day(value):
    """``2 Dec 2026`` (a datetime is read in local time first)."""
    value = _local(value)
    if isinstance(value, dt.datetime):
        value = value.date()
    return fmt.date(value) if value else ""


@register.filter
def moment(value):
    return fmt.moment(_local(value)) if value else ""


@register.filter
def month(value):
    return fmt.month(_local(value)) if value else ""


@register.filter
def uf(value):
    return fmt.capacitance(value)


@register.filter
def ohm(value):
    return fmt.resistance(value)


@register.filter
def volts(value):
    return fmt.volts(value)


@register.filter
def degc(value):
    return fmt.temperature(value)


@register.filter
def hours(value):
    return fmt.hours(value)


@register.filter
def pct(value):
    return fmt.percent(value)


@register.filter
def duration(value):
    """Hours as a duration: ``3 days 4 h``."""
    return fmt.duration(value)


@register.filter
def actby(value):
    """An act-by date: ``now`` when already due, ``not within 20 years`` far
    out, else the date."""
    return fmt.today_or_date(value, timezone.localdate()) if value else "nothing due"


@register.filter
def out_for(value):
    """How long since ``value`` (a moment): ``3 days 4 h``."""
    if not value:
        return ""
    return fmt.duration((timezone.now() - value).total_seconds() / 3600)


@register.filter
def meter(value):
    """An hour-meter reading: ``1,234.5 h``."""
    return fmt.meter(value)
