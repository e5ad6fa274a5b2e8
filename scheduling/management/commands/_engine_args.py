"""Arguments shared by the life-engine commands."""

import datetime as dt

from django.core.management.base import CommandError

from scheduling.forecast import EngineOptions


def add_engine_arguments(parser):
    parser.add_argument("--today", help="Forecast as of this date (YYYY-MM-DD); default today.")
    parser.add_argument("--law", choices=["10k", "arrhenius"], help="Life law (default: the 10 K rule).")
    parser.add_argument("--activation-energy", type=float, dest="activation_energy_ev",
                        help="Activation energy in eV, for --law arrhenius.")
    parser.add_argument("--esr-feedback", action="store_true",
                        help="Let ripple heating grow as ESR drifts (slower, more pessimistic).")
    parser.add_argument("--weibull-shape", type=float, dest="weibull_shape",
                        help="Weibull shape of the scatter in damage at failure (default 3).")
    parser.add_argument("--frailty-sigma", type=float, dest="frailty_sigma",
                        help="Spread (log-sd) of a unit's true damage around the prediction (default 0.4; "
                             "0: no spread, the plain Weibull series system).")


def engine_options(options):
    today = None
    if options.get("today"):
        try:
            today = dt.date.fromisoformat(options["today"])
        except ValueError:
            raise CommandError(f"--today must be a date like 2026-12-01, not {options['today']!r}") from None
    law = options.get("law")
    ea = options.get("activation_energy_ev")
    if law == "arrhenius" and (ea is None or ea <= 0):
        raise CommandError("--law arrhenius needs --activation-energy above zero (in eV, e.g. 0.8315)")
    if law != "arrhenius" and ea is not None:
        raise CommandError("--activation-energy only applies with --law arrhenius")
    shape, sigma = options.get("weibull_shape"), options.get("frailty_sigma")
    if shape is not None and not shape > 0:
        raise CommandError("--weibull-shape must be above zero")
    if sigma is not None and not sigma >= 0:
        raise CommandError("--frailty-sigma must be zero or above")
    try:  # the engine's own limits (e.g. shape x sigma), as a command error
        EngineOptions(**{k: v for k, v in (("weibull_shape", shape), ("frailty_sigma", sigma)) if v is not None})
    except ValueError as exc:
        raise CommandError(str(exc)) from None
    return {"today": today, "law": law, "activation_energy_ev": ea, "esr_feedback": options.get("esr_feedback", False),
            "weibull_shape": shape, "frailty_sigma": sigma}
