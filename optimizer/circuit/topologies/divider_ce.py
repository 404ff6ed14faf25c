"""``divider-ce``: one common-emitter stage with divider bias and inputs summed at the base.

::

    vcc ──┬───────────────┬
          R bias_top       R collector
          │                ├── C output_cap ── out ── load
    in k ─RS─ src k ─C input_cap─┬─ [level_pot top..wiper] ─ R input_series ─┐
                                 │                                           │
                                 (pot bottom to 0)                    base ──┤ Q1
          R bias_bottom ── 0  (from the base)                                │
                                                              emitter ── R emitter ── e2
                                                              e2 ── R emitter_bypassed ∥ C bypass_cap ── 0

Either emitter part may be absent; with neither, the emitter is grounded. The PNP mirror
image swaps the rails of the emitter and collector branches: emitter parts go to vcc and
the collector resistor to ground, so the stage still runs from a positive supply.
"""

from __future__ import annotations

from ..netlist import GROUND, Circuit, Element
from . import Placed, Role

NAME = "divider-ce"
SUMMARY = "common-emitter stage, divider bias, inputs summed at the base"

ROLES = (
    Role("bias_top", "R", description="divider resistor from the supply to the base", lo=1e3, hi=10e6),
    Role("bias_bottom", "R", description="divider resistor from the base to ground", lo=1e3, hi=10e6),
    Role("collector", "R", description="collector load resistor", lo=100.0, hi=1e6),
    Role("emitter", "R", optional=True, description="unbypassed emitter resistor (sets the gain)", lo=1.0, hi=100e3),
    Role("emitter_bypassed", "R", optional=True, description="bypassed emitter resistor (sets the current)", lo=10.0, hi=100e3),
    Role("bypass_cap", "C", optional=True, requires="emitter_bypassed", prefix="C", description="emitter bypass capacitor", lo=1e-6, hi=4.7e-3),
    Role("input_cap", "C", per_input=True, prefix="C", description="input coupling capacitor", lo=10e-9, hi=1e-3),
    Role("level_pot", "POT", per_input=True, optional=True, prefix="RV", description="level control (volume pot)", lo=1e3, hi=2e6),
    Role("input_series", "R", per_input=True, description="summing resistor into the base", lo=100.0, hi=2e6),
    Role("output_cap", "C", prefix="C", description="output coupling capacitor", lo=10e-9, hi=1e-3),
)

#: Designators in the order a builder expects them (used when the search names parts).
ORDER = ("bias_top", "bias_bottom", "collector", "emitter", "emitter_bypassed", "input_series",
         "input_cap", "bypass_cap", "output_cap", "level_pot")


def build(parts: list[Placed], sources: list[float], load_r: float, load_c: float, model, supply: float) -> Circuit:
    """The netlist of a divider-ce stage.

    Parameters
    ----------
    parts
        The placed parts, by role (per-input roles carry their input number).
    sources
        Source resistance of each input, ohms (below 1 Ω is taken as 1 Ω).
    load_r, load_c
        The load: resistance (ohms) and capacitance (farads, 0 for none).
    model
        The transistor's :class:`~optimizer.catalog.transistors.BjtModel`.
    supply
        The nominal supply voltage (V).
    """
    by = {(p.role, p.input): p for p in parts}
    pnp = model.polarity == "pnp"
    rail_e = "vcc" if pnp else GROUND  # where the emitter branch returns
    rail_c = GROUND if pnp else "vcc"  # where the collector resistor returns
    els: list[Element] = [Element("VCC", "VSUPPLY", ("vcc", GROUND), supply, role="supply", part=False)]

    def R(p: Placed, a: str, b: str) -> Element:
        return Element(p.ref, "R", (a, b), p.value, p.role, p.input, p.tolerance, type=p.type)

    def C(p: Placed, a: str, b: str) -> Element:
        return Element(p.ref, "C", (a, b), p.value, p.role, p.input, p.tolerance, type=p.type)

    els.append(R(by[("bias_top", None)], "vcc", "b"))
    els.append(R(by[("bias_bottom", None)], "b", GROUND))
    els.append(R(by[("collector", None)], rail_c, "c"))
    re1 = by.get(("emitter", None))
    re2 = by.get(("emitter_bypassed", None))
    ce = by.get(("bypass_cap", None))
    emitter = "e" if (re1 or re2) else rail_e
    if re1 and re2:
        els.append(R(re1, "e", "e2"))
        els.append(R(re2, "e2", rail_e))
        if ce:
            els.append(C(ce, "e2", rail_e))
    elif re1:
        els.append(R(re1, "e", rail_e))
    elif re2:
        els.append(R(re2, "e", rail_e))
        if ce:
            els.append(C(ce, "e", rail_e))
    els.append(Element("Q1", "Q", ("c", "b", emitter), role="transistor", model=model))
    els.append(C(by[("output_cap", None)], "c", "out"))
    els.append(Element("RL", "R", ("out", GROUND), load_r, role="load", part=False))
    if load_c > 0:
        els.append(Element("CL", "C", ("out", GROUND), load_c, role="load_cap", part=False))
    for k, rs in enumerate(sources, start=1):
        els.append(Element(f"VIN{k}", "VSIG", (f"in{k}", GROUND), 0.0, role="source_emf", input=k, part=False))
        els.append(Element(f"RS{k}", "R", (f"in{k}", f"src{k}"), max(rs, 1.0), role="source", input=k, part=False))
        els.append(C(by[("input_cap", k)], f"src{k}", f"a{k}"))
        pot = by.get(("level_pot", k))
        series = by[("input_series", k)]
        if pot:
            els.append(Element(pot.ref, "POT", (f"a{k}", f"w{k}", GROUND), pot.value, pot.role, k, pot.tolerance,
                               position=pot.position, taper=pot.taper, type=pot.type))
            els.append(R(series, f"w{k}", "b"))
        else:
            els.append(R(series, f"a{k}", "b"))
    return Circuit(NAME, tuple(els), len(sources))
