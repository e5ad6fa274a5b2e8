"""The bench check of a switched-capacitor inverter's negative rail (no Django).

Diagnosis order, common practice (references.md §6): measure the negative
rail first; if it is wrong, measure the input rail; if the input is right,
look for the switching square wave at the pump before suspecting its
capacitors.  The values to expect come from the inverter model
(``scheduling.physics.inverter_output_v`` and ``inverter_ripple_vpp``, a
classic converter data sheet): the rail with today's predicted ESR and
capacitance of both parts, and with new parts (the original part's ESR and
capacitance).  The pump frequency is half the oscillator's.
"""

from dataclasses import dataclass

from scheduling import physics

from . import formatting as fmt


@dataclass(frozen=True)
class PumpPart:
    designator: str
    capacitance_uf: float       # as fitted (new)
    esr0_ohm: float             # new
    capacitance_now_uf: float   # predicted today
    esr_now_ohm: float          # predicted today


@dataclass(frozen=True)
class PumpCheck:
    flying: PumpPart
    reservoir: PumpPart
    input_v: float
    load_a: float
    pump_hz: float
    switch_ohm: float
    min_rail_v: float
    rail_today_v: float
    rail_new_v: float
    ripple_today_vpp: float
    ripple_new_vpp: float

    @property
    def oscillator_hz(self):
        return 2.0 * self.pump_hz

    @property
    def today_short(self):
        """True when today's predicted rail is shallower than the minimum."""
        return abs(self.rail_today_v) < self.min_rail_v

    def steps(self):
        """The check in order, as (what to measure, where, what to expect)."""
        fly, res = self.flying.designator, self.reservoir.designator
        return [
            ("1. Negative rail", f"across {res} (pump reservoir), unit powered, normal load",
             f"about {fmt.volts(self.rail_new_v)} with new parts; the model predicts "
             f"{fmt.volts(self.rail_today_v)} today; below {fmt.volts(self.min_rail_v)} in magnitude the "
             f"circuit stops working; ripple about {fmt.volts(self.ripple_new_vpp)} p-p new, "
             f"{fmt.volts(self.ripple_today_vpp)} p-p today"),
            ("2. Input rail", "at the converter's supply pin, only if step 1 is wrong",
             f"{fmt.volts(self.input_v)}; if it is low, look upstream before the pump"),
            ("3. Switching waveform", f"oscilloscope at {fly} (pump flying), only if steps 1 and 2 do not "
                                      "explain the fault",
             f"a square wave of about {fmt.volts(self.input_v)} peak-to-peak at {fmt.frequency(self.pump_hz)} "
             f"(oscillator {fmt.frequency(self.oscillator_hz)}); with it present and the rail low, suspect "
             f"{fly} and {res}"),
        ]


def pump_check(*, flying, reservoir, input_v, load_a, pump_hz, switch_ohm, min_rail_v):
    """Expected figures for one inverter; ``flying`` and ``reservoir`` are
    :class:`PumpPart`.  ``switch_ohm`` None counts as 0 (as the engine does)."""
    rsw = float(switch_ohm or 0.0)

    def rail(c1_uf, c2_uf, e1, e2):
        return float(physics.inverter_output_v(input_v, load_a, pump_hz, c1_uf * 1e-6, c2_uf * 1e-6, e1, e2, rsw))

    def ripple(c2_uf, e2):
        return float(physics.inverter_ripple_vpp(load_a, pump_hz, c2_uf * 1e-6, e2))

    return PumpCheck(
        flying=flying, reservoir=reservoir, input_v=float(input_v), load_a=float(load_a), pump_hz=float(pump_hz),
        switch_ohm=rsw, min_rail_v=float(min_rail_v),
        rail_today_v=rail(flying.capacitance_now_uf, reservoir.capacitance_now_uf, flying.esr_now_ohm,
                          reservoir.esr_now_ohm),
        rail_new_v=rail(flying.capacitance_uf, reservoir.capacitance_uf, flying.esr0_ohm, reservoir.esr0_ohm),
        ripple_today_vpp=ripple(reservoir.capacitance_now_uf, reservoir.esr_now_ohm),
        ripple_new_vpp=ripple(reservoir.capacitance_uf, reservoir.esr0_ohm),
    )
