"""``manage.py make_fleet``: the synthetic benchmark fleet."""

import io

import numpy as np
from django.core.management import call_command
from django.core.management.base import CommandError
from django.db.models import Count
from django.test import TestCase

from scheduling.management.commands.make_fleet import population_roles
from fleet.models import GearModel, Position, Rental, Role, Unit, UnitCapacitor
from scheduling import histogram as H
from scheduling.models import ThermalHistory
from scheduling.thermal import thermal_rebuild


def make_fleet(*args):
    out = io.StringIO()
    call_command("make_fleet", *args, stdout=out)
    return out.getvalue()


class MakeFleetTests(TestCase):
    @classmethod
    def setUpTestData(cls):
        cls.output = make_fleet("--units", "20", "--positions", "30", "--years", "1", "--seed", "3")

    def test_it_builds_the_requested_counts(self):
        self.assertEqual(Unit.objects.count(), 20)
        self.assertEqual(GearModel.objects.count(), 3)
        for gm in GearModel.objects.annotate(n=Count("positions")):
            self.assertEqual(gm.n, 30)
        self.assertEqual(UnitCapacitor.objects.count(), 20 * 30)
        per_unit = Rental.objects.values("unit").annotate(n=Count("id")).values_list("n", flat=True)
        self.assertEqual(len(per_unit), 20)
        self.assertTrue(all(2 * 11 <= n <= 4 * 12 for n in per_unit))  # 2-4 a month, 11-12 whole months
        self.assertIn("20 units", self.output)

    def test_roles_that_have_requirements_are_present_and_valid(self):
        roles = set(Position.objects.values_list("role", flat=True))
        self.assertTrue({Role.SUPPLY_RESERVOIR, Role.PUMP_FLYING, Role.PUMP_RESERVOIR, Role.SIGNAL_COUPLING,
                         Role.TIMING, Role.GENERAL, Role.SUPPLY_DECOUPLING} <= roles)
        for pos in Position.objects.all():
            pos.clean_fields(exclude=["gear_model"])
            pos.clean()
        for unit in Unit.objects.all():
            unit.full_clean()

    def test_hires_are_closed_and_consistent(self):
        self.assertFalse(Rental.objects.filter(in_at__isnull=True).exists())
        previous = {}
        for rental in Rental.objects.order_by("unit_id", "out_at"):
            rental.clean_fields(exclude=["unit", "checked_out_by", "checked_in_by"])
            rental.clean()
            self.assertEqual(rental.out_at.month, rental.in_at.month)
            if rental.unit_id in previous:
                self.assertGreater(rental.out_at, previous[rental.unit_id].in_at)
            previous[rental.unit_id] = rental

    def test_thermal_histories_exist_and_equal_a_rebuild_from_the_records(self):
        histories = {h.unit_id: h for h in ThermalHistory.objects.all()}
        self.assertEqual(set(histories), set(Unit.objects.values_list("pk", flat=True)))
        until = next(iter(histories.values())).accounted_until
        thermal_rebuild(until=until)
        for rebuilt in ThermalHistory.objects.all():
            made = histories[rebuilt.unit_id]
            np.testing.assert_allclose(H.from_bytes(made.powered), H.from_bytes(rebuilt.powered), rtol=1e-9, atol=1e-6)
            np.testing.assert_allclose(H.from_bytes(made.unpowered), H.from_bytes(rebuilt.unpowered),
                                       rtol=1e-9, atol=1e-6)
            self.assertEqual(made.accounted_until, rebuilt.accounted_until)
            self.assertEqual(made.last_powered_at, rebuilt.last_powered_at)

    def test_it_refuses_a_database_that_has_units(self):
        with self.assertRaisesMessage(CommandError, "already has 20 units"):
            make_fleet("--units", "5")
        self.assertEqual(Unit.objects.count(), 20)

    def test_force_add_adds_with_fresh_tags_and_names(self):
        make_fleet("--units", "4", "--positions", "10", "--years", "1", "--force-add")
        self.assertEqual(Unit.objects.count(), 24)
        self.assertEqual(Unit.objects.values("asset_tag").distinct().count(), 24)
        self.assertEqual(ThermalHistory.objects.count(), 24)


class MakeFleetArgumentTests(TestCase):
    def test_bad_arguments_are_refused(self):
        for args, message in (
            (("--units", "0"), "--units must be between 1"),
            (("--units", "-5"), "--units must be between 1"),
            (("--positions", "0"), "--positions must be between 1"),
            (("--positions", "501"), "--positions must be between 1"),
            (("--years", "0"), "--years must be between 1"),
            (("--units", "2", "--models", "3"), "cannot be more than --units"),
            (("--units", "ten"), "invalid int value"),
        ):
            with self.subTest(args=args), self.assertRaisesMessage(CommandError, message):
                make_fleet(*args)
        self.assertFalse(Unit.objects.exists())

    def test_small_populations_still_get_their_roles_in_order(self):
        self.assertEqual(population_roles(1, with_pump=True), [Role.SUPPLY_RESERVOIR])
        self.assertEqual(population_roles(4, with_pump=True)[:4],
                         [Role.SUPPLY_RESERVOIR, Role.SUPPLY_RESERVOIR, Role.PUMP_FLYING, Role.PUMP_RESERVOIR])
        self.assertNotIn(Role.PUMP_FLYING, population_roles(30, with_pump=False))
