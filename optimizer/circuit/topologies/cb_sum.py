"""``cb-sum``: a common-base summing stage — inputs summed into the emitter of Q1.

::

          vcc ──────────────┬
           │                │
           R bias_top       R collector
           │                │
           b (Q1 base)      c (Q1 collector) ── C output_cap ── out ── load
           │
           ├── C base_cap ── 0
           R bias_bottom ── 0

          e (Q1 emitter) ── R emitter ── 0
          e ── R input_series k ── [level_pot k] ── C input_cap k ── src k ── RS k ── in k

The divider holds the base and ``base_cap`` grounds it for signals; the emitter is then a
low-impedance node (about r_e = V_T / I_E, tens of ohms), so each input drives a current of
about v / (source + input_series) into it and the other inputs' jacks see almost nothing:
the isolation between inputs is high. The collector passes that current on to
``collector`` ∥ the load, for a gain of about (collector ∥ load) / (source + input_series)
from each source, non-inverting.

The PNP mirror image runs from the same positive supply: ``emitter`` goes to ``vcc`` and
``collector`` to ground; the divider and ``base_cap`` stay between the base and the rails.
"""

from __future__ import annotations

from ..netlist import GROUND, Circuit, Element
from . import Placed, Role
from ._common import Parts, front_end, input_roles, load, rails, supply_source

NAME = "cb-sum"
SUMMARY = "common-base stage, inputs summed into the low-impedance emitter"

ROLES = (
    Role("bias_top", "R", description="divider resistor from the supply to the base", lo=1e3, hi=10e6),
    Role("bias_bottom", "R", description="divider resistor from the base to ground", lo=1e3, hi=10e6),
    Role("base_cap", "C", prefix="C", description="capacitor from the base to ground (holds the base still)",
         lo=100e-9, hi=4.7e-3),
    Role("collector", "R", description="collector load resistor", lo=100.0, hi=1e6),
    Role("emitter", "R", description="emitter resistor (sets the current)", lo=10.0, hi=1e6),
    *input_roles("the emitter"),
    Role("output_cap", "C", prefix="C", description="output coupling capacitor", lo=10e-9, hi=1e-3),
)

ORDER = ("bias_top", "bias_bottom", "collector", "emitter", "input_series", "input_cap", "base_cap", "output_cap",
         "level_pot")


def build(parts: list[Placed], sources: list[float], load_r: float, load_c: float, model, supply: float) -> Circuit:
    """The netlist of a cb-sum stage (arguments as :func:`divider_ce.build`)."""
    ps = Parts(parts)
    rail_e, rail_c = rails(model)
    els: list[Element] = [supply_source(supply)]
    els.append(ps.R(ps["bias_top"], "vcc", "b"))
    els.append(ps.R(ps["bias_bottom"], "b", GROUND))
    els.append(ps.C(ps["base_cap"], "b", GROUND))
    els.append(ps.R(ps["collector"], rail_c, "c"))
    els.append(ps.R(ps["emitter"], "e", rail_e))
    els.append(Element("Q1", "Q", ("c", "b", "e"), role="transistor", model=model))
    els.append(ps.C(ps["output_cap"], "c", "out"))
    els.extend(load(load_r, load_c))
    els.extend(front_end(ps, sources, "e"))
    return Circuit(NAME, tuple(els), len(sources))
