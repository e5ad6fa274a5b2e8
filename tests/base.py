"""Shared helpers for the view tests: one login per role and a tiny invented fleet.

Everything here is made up: maker "Brindle Acoustics", model "Nimbus 4".
"""

import datetime as dt
from types import SimpleNamespace

from django.contrib.auth import get_user_model

from fleet.models import GearModel, Location, Position, Role
from fleet.roles import DESK, MANAGER, TECHNICIAN, ensure_groups
from front.workflows import unit_create

PASSWORD = "not-a-real-password-42"


def make_user(role=None, username=None, **extra):
    """A user holding ``role`` (desk, technician, manager), no role (None) or
    every role (``"superuser"``)."""
    User = get_user_model()
    username = username or (role or "norole")
    if role == "superuser":
        return User.objects.create_superuser(username=username, password=PASSWORD, email=f"{username}@example.org")
    user = User.objects.create_user(username=username, password=PASSWORD, **extra)
    if role is not None:
        user.groups.add(ensure_groups()[role])
    return user


def make_role_users():
    """One user per role: desk, technician, manager, plus one without a role."""
    return SimpleNamespace(
        desk=make_user(DESK, "dora.desk"),
        technician=make_user(TECHNICIAN, "tomas.tech"),
        manager=make_user(MANAGER, "mina.manager"),
        norole=make_user(None, "nobody"),
    )


def make_location(name="Back Store", temp_c=19.0):
    return Location.objects.create(name=name, kind=Location.Kind.STORE, profile=Location.Profile.CONSTANT,
                                   constant_temp_c=temp_c)


def make_gear_model(maker="Brindle Acoustics", model_name="Nimbus 4", **fields):
    """A gear model with three capacitor positions: C1 reservoir, C7 decoupling, C12 coupling."""
    defaults = dict(category=GearModel.Category.EFFECTS, year_from=1979, year_to=1986, internal_rise_k=12.0,
                    mains_voltage_v=230.0, hazard_mains=True)
    defaults.update(fields)
    gm = GearModel.objects.create(maker=maker, model_name=model_name, **defaults)
    Position.objects.create(
        gear_model=gm, designator="C1", role=Role.SUPPLY_RESERVOIR, capacitance_uf=2200, rated_voltage_v=35,
        rated_temp_c=85, rated_life_h=2000, esr_ohm=0.05, diameter_mm=16, length_mm=31,
        ripple_current_a=0.9, operating_voltage_v=24, reservoir_load_a=0.3, reservoir_ripple_freq_hz=100,
        reservoir_ripple_limit_v=2.0,
    )
    Position.objects.create(
        gear_model=gm, designator="C7", role=Role.SUPPLY_DECOUPLING, capacitance_uf=4.7, rated_voltage_v=50,
        rated_temp_c=85, rated_life_h=1000, tan_delta=0.12, diameter_mm=5, length_mm=11,
    )
    Position.objects.create(
        gear_model=gm, designator="C12", role=Role.SIGNAL_COUPLING, capacitance_uf=0.47, rated_voltage_v=63,
        rated_temp_c=105, rated_life_h=5000, tan_delta=0.08, diameter_mm=5, length_mm=11,
        coupling_load_ohm=10000, coupling_max_corner_hz=20,
    )
    return gm


def make_unit(gear_model, location, asset_tag="NMB-0001", **fields):
    defaults = dict(serial="BA-79-1123", year_made=1981, joined_on=dt.date(2015, 3, 1), hour_meter_h=None)
    defaults.update(fields)
    return unit_create(asset_tag=asset_tag, gear_model=gear_model, home_location=location, **defaults)


def build_fleet():
    """A location, a gear model with three positions and one unit made through the service."""
    location = make_location()
    gear_model = make_gear_model()
    unit = make_unit(gear_model, location)
    return SimpleNamespace(location=location, gear_model=gear_model, unit=unit)
