"""The figures and cautions of a service sheet's safety box (no Django).

The charged parts are those of ``scheduling.hazards.charged_parts`` (the unit
page shows the same): parts rated above the safe-to-touch level, taken charged
to their rated voltage (the most they may hold), with the stored energy
``E = C V**2 / 2`` and the time to fall below that level through the stated
resistor, ``t = R C ln(V0 / V_safe)`` (references.md §7; the tests reproduce
its worked values on the printed sheet).  60 V d.c. is the house's
safe-to-touch level (``parameters.SAFE_VOLTAGE_V``: SELV per IEC 60335-1 as
quoted in IEC Electropedia).  The cautions are common practice; the last one
says the sheet replaces neither local electrical codes, the maker's service
information nor licensed practice.
"""

from dataclasses import dataclass, field

import numpy as np

from scheduling import parameters as P
from scheduling import physics
from scheduling.hazards import charged_parts

from . import formatting as fmt


@dataclass
class SafetyBox:
    resistor_ohm: float
    safe_v: float
    charged: list = field(default_factory=list)       # scheduling.hazards.ChargedPart, most energy first
    largest: object = None                            # the largest stored energy
    slowest: object = None                            # the longest discharge to the safe level
    largest_low: tuple = None                         # none above the safe level: (designator, uF, V, J) of the
                                                      # largest energy at the rated voltage
    peak_current_a: float = 0.0                       # through the resistor from the highest voltage
    peak_power_w: float = 0.0
    cautions: list = field(default_factory=list)      # (heading, words)

    @property
    def above_safe(self):
        return [c.designator for c in self.charged]


def safety_box(*, designators, capacitance_uf, rated_voltage_v, mains_v=0.0, hazard_mains=True, tube_hv=False,
               smps=False, has_smd=False, storage_reform=False, model_notes="",
               resistor_ohm=P.DISCHARGE_RESISTOR_OHM, safe_v=P.SAFE_VOLTAGE_V):
    """The safety box of one unit: see the module notes."""
    box = SafetyBox(resistor_ohm=resistor_ohm, safe_v=safe_v)
    if designators:
        box.charged = charged_parts(designators=list(designators), capacitance_uf=capacitance_uf,
                                    rated_voltage_v=rated_voltage_v, safe_voltage_v=safe_v,
                                    resistor_ohm=resistor_ohm)
    if box.charged:
        box.largest = box.charged[0]
        box.slowest = max(box.charged, key=lambda c: c.discharge_s)
        v_top = max(c.voltage_v for c in box.charged)
        box.peak_current_a = v_top / resistor_ohm
        box.peak_power_w = v_top ** 2 / resistor_ohm
    elif designators:
        c_uf = np.asarray(capacitance_uf, dtype=float)
        v = np.asarray(rated_voltage_v, dtype=float)
        energy = np.atleast_1d(physics.stored_energy_j(c_uf * 1e-6, v))
        k = int(np.argmax(energy))
        box.largest_low = (designators[k], float(c_uf[k]), float(v[k]), float(energy[k]))
    box.cautions = cautions(box, mains_v=mains_v, hazard_mains=hazard_mains, tube_hv=tube_hv, smps=smps,
                            has_smd=has_smd, storage_reform=storage_reform, model_notes=model_notes)
    return box


def cautions(box, *, mains_v, hazard_mains, tube_hv, smps, has_smd, storage_reform, model_notes):
    """The cautions in working order, as (heading, words); common practice."""
    safe = fmt.volts(box.safe_v)
    out = []
    if hazard_mains:
        inside = f" ({fmt.plain_number(mains_v)} V a.c. inside)" if mains_v else ""
        out.append(("Isolate", f"Switch off, unplug the mains lead and keep the plug in sight{inside}. "
                               "Mains-side parts are not in the capacitor list."))
    else:
        out.append(("Isolate", "Disconnect the external supply and any batteries before opening."))
    if box.above_safe:
        out.append(("Discharge", f"{len(box.above_safe)} capacitor(s) rated above {safe} d.c. "
                                 f"({', '.join(box.above_safe[:8])}{' ...' if len(box.above_safe) > 8 else ''}). "
                                 f"Discharge each through a {fmt.resistance(box.resistor_ohm)} resistor rated for "
                                 f"{fmt.plain_number(box.peak_power_w)} W peak; never short the terminals."))
    else:
        out.append(("Discharge", f"No listed capacitor is rated above {safe} d.c.; still discharge the "
                                 "reservoirs: a shorted can delivers a large current and burns."))
    out.append(("Verify", "Measure across every large capacitor with a meter set to d.c. volts before you "
                          "touch it, and again after a pause: a can may recover some charge."))
    if tube_hv:
        out.append(("High voltage", "Tube circuit: the B+ and its filter cans carry lethal voltages even "
                                    "switched off and unplugged. Work one hand behind your back."))
    if smps:
        out.append(("Switch-mode supply", "The primary bulk capacitor sits at rectified mains voltage; treat "
                                          "the primary side as live until measured."))
    if model_notes:
        out.append(("This model", model_notes))
    out.append(("Polarity and rating", "Fit electrolytics the way round the board marks them, with a "
                                       "voltage rating at least the original's."))
    reform = ("This unit has been unpowered for long: " if storage_reform else "After long unpowered storage ")
    out.append(("Bring up slowly", reform + "reform the capacitors, or bring the unit up on a current-limited "
                                            "or variable supply, before full voltage."))
    if has_smd:
        out.append(("Surface mount", "Heat surface-mount pads gently and lift nothing by force: the pads and "
                                     "tracks come away; clean off any leaked electrolyte."))
    out.append(("ESD", "Wear a wrist strap and work on a grounded mat: many vintage chips are static-sensitive."))
    out.append(("Not a substitute", "This sheet does not replace local electrical codes, the maker's service "
                                    "information or licensed practice."))
    return out
