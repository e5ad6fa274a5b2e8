"""Whether a part's ratings could be a real part's, in words for the person
entering them (the admin, an import, a recorded recap).

The figures come from ``scheduling.physics.implausible_parts`` (charge per
can volume, the tan delta an ESR implies, ripple heating), whose bounds are
wide on purpose: they catch a value wrong by orders of magnitude (1 pF typed
for 1 uF, milliohms typed as ohms), not a poor part.  The life engine uses
the same function, so a part refused here is never forecast either.
"""

import math


def capacitance_words(uf):
    """A capacitance given in uF as parts are marked, to two figures: ``47 µF``, ``1 pF``."""
    from .values import format_capacitance

    try:
        return format_capacitance(uf, significant=2).replace("uF", "\u00b5F")
    except ValueError:
        return f"{uf:g} \u00b5F"


def ratings_implausible(part, ripple_current_a=0.0):
    """{field: message} for a part (anything with the ``CapacitorRatings``
    fields) whose figures no real aluminium electrolytic capacitor has, with
    ``ripple_current_a`` [A] through it.  Empty when plausible, or when a
    figure is missing or broken (the field rules say so already)."""
    from scheduling.physics import CHARGE_DENSITY_RANGE_UC_PER_CM3, implausible_parts

    ripple_current_a = ripple_current_a or 0.0
    figures = (part.capacitance_uf, part.rated_voltage_v, part.diameter_mm, part.length_mm, ripple_current_a)
    if any(v is None or not math.isfinite(v) for v in figures) or ripple_current_a < 0:
        return {}
    try:
        esr = part.initial_esr_ohm
        bad = implausible_parts(part.capacitance_uf * 1e-6, part.rated_voltage_v, esr, part.diameter_mm,
                                part.length_mm, ripple_current_a)
    except ValueError:
        return {}
    size = f"{part.diameter_mm:g} x {part.length_mm:g} mm"
    if bad["charge"][0]:
        volume = math.pi * part.diameter_mm**2 * part.length_mm / 4000.0
        low, high = (q * volume / part.rated_voltage_v for q in CHARGE_DENSITY_RANGE_UC_PER_CM3)
        return {"capacitance_uf": (
            f"{capacitance_words(part.capacitance_uf)} at {part.rated_voltage_v:g} V in a {size} can is far from "
            f"what an aluminium electrolytic capacitor of that size holds (about {capacitance_words(low)} to "
            f"{capacitance_words(high)}); check the capacitance and its unit.")}
    if bad["esr"][0]:
        field = "esr_ohm" if part.esr_ohm is not None else "tan_delta"
        given = f"ESR {part.esr_ohm:g} \u03a9" if part.esr_ohm is not None else f"tan delta {part.tan_delta:g}"
        return {field: (
            f"{given} with {capacitance_words(part.capacitance_uf)} means tan delta {bad['tan_delta'][0]:.2g} at "
            f"120 Hz, far from real parts (about 0.01 to 0.3); check the figure and its unit.")}
    if bad["ripple"][0]:
        rise = bad["ripple_rise_k"][0]
        heat = f"{rise:,.0f} K" if math.isfinite(rise) else "beyond measure"
        return {"ripple_current_a": (
            f"{ripple_current_a:g} A of ripple through {esr:.3g} \u03a9 would heat this {size} can {heat} above the "
            f"air around it, which no part survives (rated ripple heats a part by about 5 K); check the ripple "
            f"current, the ESR and the capacitance.")}
    return {}
