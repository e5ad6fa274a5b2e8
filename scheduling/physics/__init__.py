"""Capacitor life, drift, circuit and risk formulas (pure, vectorised numpy).

No Django, no I/O, no logging.  Every function takes scalars or numpy arrays
that broadcast against each other and returns a ``float`` (all inputs scalar)
or an ``ndarray``.  Invalid arguments raise ``ValueError`` naming the
argument.  Units: hours [h], degC, kelvin differences [K], ohm, farad [F],
hertz [Hz], volt [V], ampere [A], millimetre [mm].

"Damage" D is Palmgren-Miner damage in units of rated-condition life: D = 1
is the end-of-life limit of the endurance test (ESR 2x, capacitance -20 %).
Sources are those of the shared ``docs/references.md`` (section numbers
quoted as "refs §n"); "from memory" marks what that file marks [M].

One module per topic, one function per published model:

- :mod:`.life`: life laws (10 K rule, Arrhenius), ripple self-heating,
  Palmgren-Miner damage over histograms;
- :mod:`.drift`: ESR and capacitance against damage and their inverses, damage
  with ESR feedback;
- :mod:`.circuits`: the switched-capacitor inverter, coupling corner, reservoir
  ripple and the role-aware damage thresholds;
- :mod:`.risk`: Weibull scatter, series systems, the shared frailty;
- :mod:`.safety`: stored energy and discharge time;
- :mod:`.plausibility`: whether a part's figures could be a real part's
  (charge per can volume, tan delta implied by its ESR, ripple heating);
- :mod:`.findings`: bench readings: damage from a measured ESR, capacitance
  or pump rail, the unit's frailty after readings, a read part's rate;
- :mod:`.validation`: the argument checks they share.

Everything public is importable from here: ``from scheduling.physics import
life_hours_10k``.
"""

from .circuits import (
    charge_share_fraction,
    coupling_corner_hz,
    inverter_output_resistance_ohm,
    inverter_output_v,
    inverter_ripple_vpp,
    reservoir_ripple_vpp,
    threshold_coupling,
    threshold_pump,
    threshold_reservoir,
)
from .drift import (
    capacitance_at_damage,
    damage_from_capacitance,
    damage_from_esr,
    damage_with_esr_feedback,
    esr_at_damage,
)
from .findings import (
    damage_from_readings,
    frailty_posterior,
    leakage_limit_ua,
    pump_damage_from_rail,
    rate_factor,
)
from .life import (
    can_area_cm2,
    damage_from_histogram,
    esr_from_tan_delta_ohm,
    life_hours_10k,
    life_hours_arrhenius,
    miner_damage,
    ripple_rise_k,
)
from .risk import (
    conditional_failure_probability,
    cumulative_hazard,
    failure_probability,
    frailty_log_laplace,
    unit_conditional_hazard,
    unit_conditional_risk,
    unit_failure_probability,
)
from .plausibility import (
    CHARGE_DENSITY_RANGE_UC_PER_CM3,
    can_volume_cm3,
    charge_density_uc_per_cm3,
    implausible_parts,
    tan_delta_from_esr,
)
from .safety import discharge_time_s, stored_energy_j

__all__ = [
    "life_hours_10k", "life_hours_arrhenius", "can_area_cm2", "esr_from_tan_delta_ohm",
    "ripple_rise_k", "miner_damage", "damage_from_histogram", "esr_at_damage",
    "capacitance_at_damage", "damage_from_esr", "damage_from_capacitance",
    "damage_with_esr_feedback", "inverter_output_resistance_ohm", "inverter_output_v",
    "inverter_ripple_vpp", "charge_share_fraction", "coupling_corner_hz",
    "reservoir_ripple_vpp", "stored_energy_j", "discharge_time_s", "failure_probability",
    "conditional_failure_probability", "unit_failure_probability", "threshold_pump",
    "threshold_coupling", "threshold_reservoir", "can_volume_cm3", "charge_density_uc_per_cm3",
    "tan_delta_from_esr", "implausible_parts", "CHARGE_DENSITY_RANGE_UC_PER_CM3",
    "damage_from_readings", "pump_damage_from_rail", "frailty_posterior", "rate_factor", "leakage_limit_ua",
]

# The docstring examples of the topic modules, for ``doctest.testmod`` on this package.
__test__ = {
    name: obj for name, obj in list(globals().items())
    if callable(obj) and getattr(obj, "__module__", "").startswith(__name__ + ".")
}
