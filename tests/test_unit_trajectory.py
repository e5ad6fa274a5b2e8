"""The life chart's figures for one stored forecast agree with the forecast
itself: today's risk, and the day a part already past its limit crossed it."""

import datetime as dt

import numpy as np
from numpy.testing import assert_allclose

from fleet.models import UnitCapacitor
from scheduling.days import date_to_day
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh, stored_positions, unit_trajectory
from tests.base import build_fleet, make_unit


def _curves(unit):
    forecast = UnitForecast.objects.get(unit=unit)
    installed = {c.pk: c.installed_on for c in UnitCapacitor.objects.filter(unit=unit)}
    return forecast, unit_trajectory(forecast=forecast, installed_on=installed, damage_limit=1.0)


def test_todays_point_is_the_stored_forecast(db):
    fleet = build_fleet()
    old = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0050", year_made=1965,
                    joined_on=dt.date(1995, 1, 1), prior_powered_h_per_year=2000, prior_ambient_c=40)
    forecast_refresh()
    for unit in (fleet.unit, old):
        forecast, (curves, ids) = _curves(unit)
        today = np.flatnonzero(curves.days == curves.today_day)[0]
        # stored in single precision
        assert_allclose(curves.risk[today], forecast.risk, rtol=1e-5, atol=1e-7)
        rec = {int(r["capacitor_id"]): r for r in stored_positions(forecast)}
        assert_allclose(curves.damage[:, today], [rec[i]["damage"] for i in ids], rtol=1e-6)


def test_a_part_past_its_limit_crosses_it_on_the_stored_day(db):
    fleet = build_fleet()
    old = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0051", year_made=1960,
                    joined_on=dt.date(1990, 1, 1), prior_powered_h_per_year=3000, prior_ambient_c=45)
    forecast_refresh(unit_ids=[old.pk])
    forecast, (curves, ids) = _curves(old)
    rec = {int(r["capacitor_id"]): r for r in stored_positions(forecast)}
    past_limit = [i for i in ids if 0 < rec[i]["threshold"] <= rec[i]["damage"]]
    assert past_limit, "the fixture should put a drawn part past its limit"
    row = rec[past_limit[0]]
    i = ids.index(past_limit[0])
    past = curves.days < curves.today_day
    share = curves.damage[i, past] / curves.limit[i]
    crossing = curves.days[past][np.argmax(share >= 1.0)]
    step = np.diff(curves.days).max()
    assert abs(crossing - float(row["reaches_day"])) <= step + 1
    assert float(row["reaches_day"]) < date_to_day(dt.date.today())
