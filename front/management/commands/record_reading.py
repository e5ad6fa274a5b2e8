"""manage.py record_reading: a bench reading, and the forecast at once.

    record_reading TAG --position C4 [--esr-ohm X] [--freq-hz F] [--capacitance VALUE] [--leakage-ua I]
    record_reading TAG --rail NAME --volts V --load-ma MA [--expected-v V] [--input-v V] [--pump C4]

A rail name that starts with a minus is written --rail=-5V (else it reads as an option).
"""

from django.core.exceptions import ValidationError
from django.core.management.base import BaseCommand, CommandError

from fleet import values
from fleet.services import ServiceError
from front.bench import bench_reading_record
from front.views.readings import reading_summary

from ._bench_args import add_technician, one_line, technician_or_error, unit_or_error


class Command(BaseCommand):
    help = ("Record a bench reading of a unit on the bench (a capacitor's ESR, capacitance, leakage; or a supply "
            "rail under load) and recompute its forecast.")

    def add_arguments(self, parser):
        parser.add_argument("tag", help="The unit's asset tag.")
        parser.add_argument("--position", metavar="DESIGNATOR", help="The capacitor measured, e.g. C4.")
        parser.add_argument("--esr-ohm", type=float, help="Measured ESR in ohm.")
        parser.add_argument("--freq-hz", type=float, help="ESR test frequency in Hz (default 100).")
        parser.add_argument("--capacitance", metavar="VALUE",
                            help="Measured capacitance: µF, or a code or unit such as 4u7, 470uF, 100n.")
        parser.add_argument("--leakage-ua", type=float, help="Leakage current in µA.")
        parser.add_argument("--rail", metavar="NAME", help="The supply rail measured, e.g. --rail=-5V.")
        parser.add_argument("--volts", type=float, help="Measured rail voltage (V, with its sign).")
        parser.add_argument("--load-ma", type=float, help="Load current while measuring (mA).")
        parser.add_argument("--expected-v", type=float, help="The rail's expected voltage (V).")
        parser.add_argument("--input-v", type=float, help="A charge pump's input rail, if measured (V).")
        parser.add_argument("--pump", metavar="DESIGNATOR", default="",
                            help="The flying capacitor of the pump making this rail, if the unit has several.")
        add_technician(parser)

    def handle(self, *args, **o):
        unit = unit_or_error(o["tag"])
        user = technician_or_error(o["technician"])
        if bool(o["position"]) == bool(o["rail"]):
            raise CommandError("Give either --position DESIGNATOR (a capacitor) or --rail NAME (a supply rail).")
        kwargs = {}
        if o["position"]:
            if all(o[k] is None for k in ("esr_ohm", "capacitance", "leakage_ua")):
                raise CommandError("Give --esr-ohm, --capacitance or --leakage-ua.")
            capacitance = None
            if o["capacitance"] is not None:
                try:
                    capacitance = values.parse_capacitance_uf(o["capacitance"], bare_unit="uF")
                except ValueError as exc:
                    raise CommandError(f"--capacitance: {exc}") from None
            kwargs = dict(designator=o["position"], esr_ohm=o["esr_ohm"], esr_freq_hz=o["freq_hz"],
                          capacitance_uf=capacitance, leakage_ua=o["leakage_ua"])
        else:
            if o["volts"] is None:
                raise CommandError("Give the measured rail voltage with --volts.")
            kwargs = dict(rail_name=o["rail"], rail_measured_v=o["volts"], rail_load_ma=o["load_ma"],
                          rail_expected_v=o["expected_v"], rail_input_v=o["input_v"], pump=o["pump"])
        try:
            outcome = bench_reading_record(unit_id=unit.pk, user=user, **kwargs)
        except (ServiceError, ValidationError) as exc:
            raise CommandError(one_line(exc)) from None
        self.stdout.write(f"{unit.asset_tag}: {reading_summary(outcome)}")
