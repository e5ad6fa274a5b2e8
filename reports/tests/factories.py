"""Builders of the report tests' invented fleet (see conftest.py)."""

import datetime as dt

from fleet.models import GearModel, Location, Mount, Position, Role
from fleet.services import unit_add

N_POSITIONS = 120
TODAY = dt.date(2026, 6, 1)


def make_bench_model(maker="Fennick Audio Works", model_name="Tallow 120"):
    gm = GearModel.objects.create(maker=maker, model_name=model_name, category=GearModel.Category.AMP,
                                  year_from=1982, year_to=1988, internal_rise_k=18.0, mains_voltage_v=230.0,
                                  hazard_mains=True, hazard_tube_hv=True,
                                  notes="Valve preamp with a solid-state effects loop.",
                                  hazard_notes="B+ about 380 V: the filter cans hold a lethal charge after "
                                               "unplugging.")
    Position.objects.create(gear_model=gm, designator="C1", role=Role.SUPPLY_RESERVOIR, capacitance_uf=100,
                            rated_voltage_v=400, rated_temp_c=85, rated_life_h=2000, tan_delta=0.15, diameter_mm=30,
                            length_mm=45, ripple_current_a=0.2, operating_voltage_v=350.0,
                            reservoir_load_a=0.05, reservoir_ripple_freq_hz=100, reservoir_ripple_limit_v=20)
    Position.objects.create(gear_model=gm, designator="C2", role=Role.SUPPLY_DECOUPLING, capacitance_uf=47,
                            rated_voltage_v=450, rated_temp_c=85, rated_life_h=2000, tan_delta=0.15, diameter_mm=25,
                            length_mm=40, operating_voltage_v=300.0, mount=Mount.AXIAL)
    pump = dict(pump_input_v=5.0, pump_load_a=0.01, pump_freq_hz=5000.0, pump_switch_ohm=46.0, pump_min_rail_v=4.0,
                rated_voltage_v=16, rated_temp_c=85, rated_life_h=1000, esr_ohm=0.1, capacitance_uf=10,
                diameter_mm=5, length_mm=11, operating_voltage_v=5.0)
    Position.objects.create(gear_model=gm, designator="C3", role=Role.PUMP_FLYING, pump_partner="C4", **pump)
    Position.objects.create(gear_model=gm, designator="C4", role=Role.PUMP_RESERVOIR, pump_partner="C3", **pump)
    for k in range(5, N_POSITIONS + 1):
        Position.objects.create(gear_model=gm, designator=f"C{k}", role=Role.GENERAL,
                                capacitance_uf=(10, 22, 47, 4.7)[k % 4], rated_voltage_v=(25, 16, 35, 50)[k % 4],
                                rated_temp_c=85, rated_life_h=1000, tan_delta=0.14, diameter_mm=(5, 5, 6.3, 4)[k % 4],
                                length_mm=11, operating_voltage_v=12.0,
                                mount=Mount.SMD if k % 10 == 0 else Mount.RADIAL)
    return gm


def make_bench_unit(gm, tag="FT-0120", **extra):
    loc = Location.objects.get_or_create(name="Loft store", defaults=dict(
        kind=Location.Kind.STORE, profile=Location.Profile.MONTHLY,
        monthly_temps_c=[6, 7, 10, 13, 17, 22, 27, 26, 20, 15, 10, 7]))[0]
    fields = dict(serial="FA-85-0042", year_made=1985, joined_on=dt.date(2012, 4, 1))
    fields.update(extra)
    return unit_add(asset_tag=tag, gear_model=gm, home_location=loc, **fields)
