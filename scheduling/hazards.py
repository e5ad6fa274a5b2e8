"""The charged parts of a unit: which capacitors can hold a dangerous charge
after it is unplugged, how much energy, and how long they take to fall to a
safe level through a stated resistor (pure).

A position counts when its part is rated above ``SAFE_VOLTAGE_V`` (60 V d.c.,
the level this app treats as safe to touch, references.md §7).  It is taken
charged to its rated voltage: the most it may hold, whatever the circuit
normally puts across it.  Stored energy ``E = C V**2 / 2``
(``physics.stored_energy_j``); the time to fall to the safe level through
``DISCHARGE_RESISTOR_OHM``, ``t = R C ln(V0 / V_safe)``
(``physics.discharge_time_s``).
"""

from dataclasses import dataclass

import numpy as np

from . import parameters as P
from . import physics


@dataclass(frozen=True)
class ChargedPart:
    designator: str
    capacitance_uf: float
    voltage_v: float       # rated: the most it may hold
    energy_j: float
    discharge_s: float     # to SAFE_VOLTAGE_V through DISCHARGE_RESISTOR_OHM


def charged_parts(*, designators, capacitance_uf, rated_voltage_v, safe_voltage_v=P.SAFE_VOLTAGE_V,
                  resistor_ohm=P.DISCHARGE_RESISTOR_OHM):
    """The parts rated above ``safe_voltage_v``, most energy first."""
    c_f = np.asarray(capacitance_uf, dtype=float) * 1e-6
    v = np.asarray(rated_voltage_v, dtype=float)
    over = np.flatnonzero(v > safe_voltage_v)
    if over.size == 0:
        return []
    energy = np.atleast_1d(physics.stored_energy_j(c_f[over], v[over]))
    seconds = np.atleast_1d(physics.discharge_time_s(c_f[over], resistor_ohm, v[over], safe_voltage_v))
    order = np.lexsort((over, -energy))
    return [ChargedPart(designator=designators[over[i]], capacitance_uf=float(c_f[over[i]] * 1e6),
                        voltage_v=float(v[over[i]]), energy_j=float(energy[i]), discharge_s=float(seconds[i]))
            for i in order]
