"""The demo scenario (fixtures/demo_fleet.py) and ``manage.py demo_setup``."""

import datetime as dt
import io
import re

from django.contrib.auth import get_user_model
from django.core.management import call_command
from django.db import transaction
from django.db.models import Count, Q
from django.http import HttpRequest
from django.test import TestCase
from django.utils import timezone

from fixtures import demo_fleet
from fixtures.demo_fleet import DEMO_USERS, GEAR_MODELS, MAKERS, DemoFleetExists, build_demo_fleet
from fleet.models import (
    BenchVisit, GearModel, Location, MaintenancePolicy, Measurement, Position, Reading, Rental, Role, ServiceRecord, Unit,
    UnitCapacitor,
)
from scheduling.models import HistogramSnapshot, ThermalHistory

TODAY = dt.date(2026, 6, 15)


def pump_threshold(flying, reservoir):
    """Damage of the flying capacitor at which the inverter's rail reaches its minimum.

    The design brief's inverter model: |Vout| = Vin - I*Rout with
    Rout = Rsw + 1/(f*C1) + 4*ESR1 + ESR2, ESR(D) = ESR0*2**D, C(D) = C0*(1 - 0.2*D);
    the reservoir is left fresh.  Bisection, so the test does not depend on the life engine.
    """
    esr2 = reservoir.initial_esr_ohm

    def margin(damage):
        c1 = flying.capacitance_uf * 1e-6 * (1 - 0.2 * damage)
        rout = flying.pump_switch_ohm + 1 / (flying.pump_freq_hz * c1) + 4 * flying.initial_esr_ohm * 2 ** damage + esr2
        return flying.pump_input_v - flying.pump_load_a * rout - flying.pump_min_rail_v

    low, high = 0.0, 4.0
    assert margin(low) > 0 > margin(high)
    for _ in range(60):
        mid = (low + high) / 2
        low, high = (mid, high) if margin(mid) > 0 else (low, mid)
    return low


class DemoFleetTests(TestCase):
    @classmethod
    def setUpTestData(cls):
        cls.counts = build_demo_fleet(today=TODAY)

    def test_it_writes_a_fleet_of_the_documented_size(self):
        self.assertGreaterEqual(GearModel.objects.count(), 8)
        self.assertTrue(55 <= Unit.objects.count() <= 70)
        self.assertEqual(self.counts["units"], Unit.objects.count())
        self.assertEqual(self.counts["rentals"], Rental.objects.count())
        for gm in GearModel.objects.annotate(n=Count("positions")):
            self.assertTrue(20 <= gm.n <= 120, f"{gm} has {gm.n} positions")
            self.assertGreater(gm.units.count(), 0)

    def test_every_unit_has_its_models_population(self):
        for unit in Unit.objects.annotate(n=Count("capacitors")).select_related("gear_model"):
            self.assertEqual(unit.n, unit.gear_model.positions.count(), unit.asset_tag)

    def test_designators_are_unique_per_model(self):
        for recipe in GEAR_MODELS:
            designators = [d for d, _, _ in demo_fleet.iter_positions(recipe)]
            self.assertEqual(len(designators), len(set(designators)), recipe["model_name"])

    def test_rows_pass_the_registers_validation(self):
        for gm in GearModel.objects.all():
            gm.full_clean()
        for unit in Unit.objects.all():
            unit.full_clean()
        for pos in Position.objects.all():
            pos.clean_fields(exclude=["gear_model"])
            pos.clean()
        for cap in UnitCapacitor.objects.all():
            cap.clean_fields(exclude=["unit", "position"])
            cap.clean()

    def test_makers_and_models_come_from_the_scenario(self):
        names = {(r["maker"], r["model_name"]) for r in GEAR_MODELS}
        for maker, model_name in GearModel.objects.values_list("maker", "model_name"):
            self.assertIn(maker, MAKERS)
            self.assertIn((maker, model_name), names)

    def test_the_effects_unit_has_a_charge_pump_that_is_its_weak_point(self):
        flying = Position.objects.filter(role=Role.PUMP_FLYING)
        self.assertTrue(flying.exists())
        for pos in flying:
            partner = Position.objects.get(gear_model=pos.gear_model, designator=pos.pump_partner)
            self.assertEqual(partner.role, Role.PUMP_RESERVOIR)
            self.assertEqual(partner.pump_partner, pos.designator)
            self.assertTrue(0.3 <= pump_threshold(pos, partner) <= 0.6)

    def test_the_valve_amp_carries_the_high_voltage_hazard(self):
        amps = GearModel.objects.filter(category=GearModel.Category.AMP)
        self.assertTrue(amps.exists())
        for amp in amps:
            self.assertTrue(amp.hazard_tube_hv)
            self.assertGreaterEqual(amp.internal_rise_k, 20)
            hv = amp.positions.filter(role=Role.SUPPLY_RESERVOIR, rated_voltage_v__gte=450)
            self.assertGreaterEqual(hv.count(), 2)
        self.assertFalse(GearModel.objects.filter(hazard_tube_hv=True).exclude(category=GearModel.Category.AMP)
                         .exists())

    def test_the_synth_has_many_coupling_capacitors(self):
        synth = GearModel.objects.get(category=GearModel.Category.SYNTH)
        self.assertGreaterEqual(synth.positions.filter(role=Role.SIGNAL_COUPLING).count(), 30)

    def test_valve_amps_live_mostly_in_the_attic(self):
        amps = Unit.objects.filter(gear_model__hazard_tube_hv=True)
        self.assertGreater(amps.filter(home_location__name="Attic store").count(), amps.count() / 2)

    def test_stores_have_the_documented_profiles(self):
        basement = Location.objects.get(name="Basement store")
        attic = Location.objects.get(name="Attic store")
        bench = Location.objects.get(kind=Location.Kind.BENCH)
        self.assertTrue(all(12 <= t <= 16 for t in basement.monthly_temps_c))
        self.assertEqual((min(attic.monthly_temps_c), max(attic.monthly_temps_c)), (18.0, 34.0))
        self.assertEqual(bench.constant_temp_c, 22.0)
        for loc in Location.objects.all():
            loc.full_clean()

    def test_no_unit_has_two_open_hires_and_statuses_match(self):
        open_counts = Rental.objects.filter(in_at__isnull=True).values("unit").annotate(n=Count("id"))
        self.assertTrue(all(row["n"] == 1 for row in open_counts))
        out = set(Unit.objects.filter(status=Unit.Status.OUT).values_list("pk", flat=True))
        self.assertEqual(out, {row["unit"] for row in open_counts})
        self.assertGreaterEqual(len(out), 2)

    def test_closed_hires_are_consistent(self):
        for rental in Rental.objects.filter(in_at__isnull=False):
            self.assertLessEqual(rental.powered_hours, rental.elapsed_hours)
            self.assertTrue(1 <= (rental.in_at.date() - rental.out_at.date()).days <= 7)
            self.assertTrue(18 <= rental.venue_ambient_c <= 35)
            self.assertLess(rental.in_at.date(), TODAY)
        # Hires of one unit never overlap.
        previous = {}
        for rental in Rental.objects.order_by("unit_id", "out_at"):
            if rental.unit_id in previous:
                self.assertGreater(rental.out_at, previous[rental.unit_id].in_at)
            previous[rental.unit_id] = rental

    def test_history_spans_two_to_five_years(self):
        for unit in Unit.objects.all():
            self.assertTrue(dt.date(2021, 1, 1) <= unit.joined_on <= dt.date(2024, 12, 31))
            years = (TODAY - unit.joined_on).days / 365.25
            self.assertTrue(1.9 <= years <= 5.1, unit.asset_tag)
            first = unit.rentals.order_by("out_at").first()
            self.assertGreaterEqual(first.out_at.date(), unit.joined_on)

    def test_held_units_have_a_reported_fault_and_some_are_retired(self):
        held = Unit.objects.filter(status=Unit.Status.HOLD)
        self.assertGreaterEqual(held.count(), 2)
        for unit in held:
            last = unit.rentals.order_by("-out_at").first()
            self.assertTrue(last.reported_faults)
        self.assertTrue(1 <= Unit.objects.filter(status=Unit.Status.RETIRED).count() <= 2)

    def test_past_recaps_fit_new_parts_with_a_baseline(self):
        recaps = ServiceRecord.objects.filter(kind=ServiceRecord.Kind.RECAP)
        self.assertGreaterEqual(recaps.count(), 10)
        replaced = UnitCapacitor.objects.filter(is_original=False)
        self.assertTrue(replaced.exists())
        # Each replaced part counts its damage from a snapshot taken on its install date.
        snapshots = set(HistogramSnapshot.objects.values_list("unit_id", "taken_on"))
        for unit_id, day in replaced.values_list("unit_id", "installed_on"):
            self.assertIn((unit_id, day), snapshots)
        self.assertTrue(replaced.filter(rated_temp_c=105).exists())
        self.assertTrue(Measurement.objects.filter(quantity=Measurement.Quantity.RAIL).exists())
        # No recap while the unit was out on hire.
        for record in recaps.select_related("unit"):
            noon = dt.datetime.combine(record.performed_on, dt.time(12), tzinfo=dt.timezone.utc)
            self.assertFalse(record.unit.rentals.filter(Q(out_at__lte=noon), Q(in_at__gte=noon) | Q(in_at=None))
                             .exists())

    def test_the_unit_on_the_bench_has_readings_predicted_against_measured(self):
        unit = Unit.objects.get(status=Unit.Status.BENCH)
        self.assertEqual(unit.bench_visits.get().closed_at, None)
        readings = list(unit.readings.all())
        self.assertEqual(len(readings), 4)
        esr = [r for r in readings if r.esr_ohm is not None]
        self.assertTrue(esr and all(r.predicted_esr_ohm for r in esr))
        # the readings moved the stored forecast: its blob dates C1's damage from the reading
        from scheduling.services import stored_positions

        blob = stored_positions(unit.forecast)
        c1 = unit.capacitors.get(position__designator="C1")
        row = blob[blob["capacitor_id"] == c1.pk][0]
        self.assertFalse(row["measured_day"] != row["measured_day"])  # not NaN

    def test_the_bench_readings_name_the_demo_technician(self):
        unit = Unit.objects.get(status=Unit.Status.BENCH)
        username, first_name = next((u[0], u[3]) for u in DEMO_USERS if u[2] == "technician")
        self.assertEqual({(r.taken_by.username, r.taken_by.get_full_name()) for r in unit.readings.all()},
                         {(username, first_name)})
        self.assertEqual(unit.bench_visits.get().opened_by.username, username)

    def test_every_unit_has_a_thermal_history_to_today(self):
        self.assertEqual(ThermalHistory.objects.count(), Unit.objects.count())
        # one snapshot per (unit, date) on which parts went in or were read at the bench
        wanted = {(u, d) for u, d in UnitCapacitor.objects.filter(is_original=False)
                  .values_list("unit_id", "installed_on")}
        wanted |= {(r.unit_id, timezone.localdate(r.taken_at)) for r in Reading.objects.filter(part_removed=False)}
        self.assertEqual(set(HistogramSnapshot.objects.values_list("unit_id", "taken_on")), wanted)
        out = set(Unit.objects.filter(status=Unit.Status.OUT).values_list("pk", flat=True))
        for history in ThermalHistory.objects.all():
            if history.unit_id not in out:
                self.assertEqual(history.accounted_until.date(), TODAY)

    def test_the_maintenance_policy_is_active(self):
        policy = MaintenancePolicy.objects.get(active=True)
        self.assertEqual((policy.risk_limit, policy.horizon_days, policy.damage_limit, policy.calendar_age_years,
                          policy.storage_reform_months), (0.10, 90, 1.0, 40.0, 24.0))

    def test_asset_tags_suit_a_barcode_scanner(self):
        for tag in Unit.objects.values_list("asset_tag", flat=True):
            self.assertRegex(tag, r"^[A-Z0-9][A-Z0-9-]{1,23}$")

    def test_it_refuses_to_build_twice(self):
        with self.assertRaises(DemoFleetExists):
            build_demo_fleet(today=TODAY)

    def test_the_same_seed_gives_the_same_fleet(self):
        def signature():
            return list(Rental.objects.order_by("unit__asset_tag", "out_at").values_list(
                "unit__asset_tag", "job_ref", "out_at", "in_at", "powered_hours", "venue_ambient_c"))

        first = signature()
        with transaction.atomic():
            Reading.objects.all().delete()
            Rental.objects.all().delete()
            ServiceRecord.objects.all().delete()
            BenchVisit.objects.all().delete()
            UnitCapacitor.objects.all().delete()
            Unit.objects.all().delete()
            Position.objects.all().delete()
            GearModel.objects.all().delete()
            build_demo_fleet(today=TODAY)
            self.assertEqual(signature(), first)
            transaction.set_rollback(True)


def run_demo_setup():
    out = io.StringIO()
    call_command("demo_setup", stdout=out)
    return out.getvalue()


class DemoSetupCommandTests(TestCase):
    @classmethod
    def setUpTestData(cls):
        cls.first_output = run_demo_setup()  # on an empty database
        cls.units = Unit.objects.count()

    def assert_logins_printed(self, output):
        logins = re.search(r"Demo logins: (.*)", output).group(1)
        for username, password, _, _ in DEMO_USERS:
            self.assertIn(f"{username} / {password}", logins)

    def test_the_first_run_builds_the_fleet_and_prints_the_logins(self):
        self.assertIn("Built the demo fleet", self.first_output)
        self.assertTrue(55 <= self.units <= 70)
        self.assert_logins_printed(self.first_output)

    def test_a_second_run_builds_nothing_and_prints_the_logins_again(self):
        second = run_demo_setup()
        self.assertEqual(Unit.objects.count(), self.units)
        self.assertNotIn("Built the demo fleet", second)
        self.assert_logins_printed(second)
        self.assertEqual(get_user_model().objects.filter(username__in=[u[0] for u in DEMO_USERS]).count(), 3)

    def test_demo_users_can_log_in_with_their_roles(self):
        for username, password, role, _ in DEMO_USERS:
            user = get_user_model().objects.get(username=username)
            self.assertTrue(user.groups.filter(name=role).exists())
            self.assertEqual(user.is_staff, role == "manager")
            # The sign-in throttle (django-axes) needs the request the password came with.
            self.assertTrue(self.client.login(request=HttpRequest(), username=username, password=password))
            self.client.logout()

    def test_it_records_one_check_out_against_the_forecast_for_the_manager(self):
        from fleet.models import CheckoutOverride
        from fixtures.demo_fleet import DEMO_OVERRIDE_REASON

        override = CheckoutOverride.objects.select_related("unit", "rental").get()
        self.assertEqual(override.reason, DEMO_OVERRIDE_REASON)
        self.assertEqual(override.unit.status, Unit.Status.OUT)
        self.assertIsNone(override.rental.in_at)
        self.assertIn(override.forecast_status, ("due", "overdue"))
        run_demo_setup()
        self.assertEqual(CheckoutOverride.objects.count(), 1)

    def test_the_demo_readings_name_the_technician_even_from_an_older_demo(self):
        from fleet.models import Reading

        technician = get_user_model().objects.get(username="technician")
        self.assertTrue(Reading.objects.exists())
        self.assertFalse(Reading.objects.exclude(taken_by=technician).exists())
        Reading.objects.update(taken_by=None)   # as an older demo_setup left them
        self.assertIn("Named Idris on the demo's bench readings", run_demo_setup())
        self.assertFalse(Reading.objects.exclude(taken_by=technician).exists())

    def test_a_second_run_resets_a_changed_password(self):
        desk = get_user_model().objects.get(username="desk")
        desk.set_password("something-else-entirely")
        desk.save()
        run_demo_setup()
        self.assertTrue(self.client.login(request=HttpRequest(), username="desk", password=DEMO_USERS[0][1]))


class DemoForecastTests(TestCase):
    """What a technician should read in the demo fleet's forecast.  These check
    the scenario's story, not physics numbers (those are in scheduling/tests)."""

    @classmethod
    def setUpTestData(cls):
        from scheduling.services import forecast_compute

        build_demo_fleet(today=TODAY)
        cls.forecast = forecast_compute(today=TODAY)
        cls.units = {tag: u for u, tag in enumerate(cls.forecast.fleet.asset_tag)}

    def unit(self, tag):
        return self.forecast.unit_dict(self.units[tag])

    def test_the_list_spreads_over_the_statuses(self):
        statuses = set(self.forecast.result.status)
        self.assertIn("overdue", statuses)
        self.assertIn("ok", statuses)
        self.assertLess(self.forecast.result.status.count("overdue"), len(self.forecast.result.status))

    def test_no_unit_is_called_certain_to_fail_while_it_works(self):
        # Given that it works now, no unit's 90-day risk is near certainty.
        self.assertLess(max(self.forecast.result.risk), 0.6)

    def test_an_effects_units_pump_pair_stands_out_first(self):
        # On the effects units whose pump parts are as old as the rest, the pump
        # pair is the first position named in the reasons (the units whose pump
        # was changed on its own later are left out).
        fa = self.forecast.fleet
        named_first = []
        for unit in Unit.objects.filter(gear_model__model_name__startswith="Spectrelle"):
            if unit.asset_tag not in self.units:
                continue
            rows = self.forecast.rows_of(self.units[unit.asset_tag])
            pump = [i for i in rows if fa.pos_designator[fa.position_index[i]] == "C4"][0]
            if fa.installed_day[pump] > fa.installed_day[rows].min():
                continue
            d = self.unit(unit.asset_tag)
            positions = [r for r in d["reasons"] if re.match(r"C\d+ ", r)]
            if positions:  # due soon or past: the words name the pump first
                named_first.append(positions[0].split(" ")[1])
            # Either way the pump pair is the first to reach its limit.
            first = min(d["positions"], key=lambda p: p["reaches_threshold_on"] or "9999")
            self.assertIn(first["role"], ("pump_flying", "pump_reservoir"), unit.asset_tag)
        self.assertTrue(named_first)
        self.assertEqual(set(named_first), {"pump"})

    def test_valve_amp_parts_age_faster_in_the_hot_attic(self):
        # Same position, same kind of part, different store: the attic's rate
        # of damage is the higher one.
        fa, r = self.forecast.fleet, self.forecast.result
        amps = Unit.objects.filter(gear_model__model_name__startswith="Emberline").select_related("home_location")
        rates = {"Attic store": [], "Basement store": []}
        for unit in amps:
            if unit.asset_tag not in self.units or unit.home_location.name not in rates:
                continue
            rows = self.forecast.rows_of(self.units[unit.asset_tag])
            first = [i for i in rows if fa.pos_designator[fa.position_index[i]] == "C1"]
            part = (fa.rated_temp_c[first[0]], fa.rated_life_h[first[0]])
            rates[unit.home_location.name].append((part, r.rate_per_day[first[0]]))
        pairs = [(a, b) for pa, a in rates["Attic store"] for pb, b in rates["Basement store"] if pa == pb]
        self.assertTrue(pairs, "the scenario needs an amp of the same filter part in each store")
        self.assertTrue(all(a > b for a, b in pairs))
