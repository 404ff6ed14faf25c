"""``feedback-ce``: a common-emitter stage biased by a resistor from its collector to its base.

::

                        vcc
                         │
                         R collector
                         │
          ┌──────────────┴── c (Q1 collector) ── C output_cap ── out ── load
          │
          R feedback           split instead:  c ── R feedback ── f ── R feedback_split ── b
          │                                                       f ── C feedback_cap ── 0
          b (Q1 base) ── R bias_bottom ── 0  (optional)
          │
          └── R input_series k ── [RV level_pot k, bottom to 0] ── C input_cap k ── src k ── RS k ── in k

          Q1 emitter ── R emitter ── e2 ── R emitter_bypassed ∥ C bypass_cap ── 0

The feedback resistor is shunt feedback: it makes the base a low-impedance (virtual-earth)
summing node, so a signal summed into it through ``input_series`` leaks little into the
other inputs, and the stage's gain from each input is about −feedback / input_series.
Splitting the feedback resistor in two (``feedback`` from the collector to ``f``,
``feedback_split`` from ``f`` to the base) with ``feedback_cap`` from ``f`` to ground keeps
the DC bias but removes the AC feedback (and with it the virtual earth).

``bias_bottom`` (optional) goes from the base to the emitter's rail; the emitter parts are
those of ``divider-ce`` (either may be absent; with neither the emitter is grounded). The
PNP mirror image runs from the same positive supply: emitter parts and ``bias_bottom`` go to
``vcc``, the collector resistor to ground.
"""

from __future__ import annotations

from ..netlist import GROUND, Circuit, Element
from . import Placed, Role
from ._common import Parts, emitter_branch, emitter_roles, front_end, input_roles, load, rails, supply_source

NAME = "feedback-ce"
SUMMARY = "common-emitter stage, collector-to-base feedback bias, inputs summed at the virtual-earth base"

ROLES = (
    Role("feedback", "R", description="feedback resistor from the collector (toward the base)", lo=1e3, hi=10e6),
    Role("feedback_split", "R", optional=True, description="second half of a split feedback resistor, to the base",
         lo=1e3, hi=10e6),
    Role("feedback_cap", "C", optional=True, requires="feedback_split", prefix="C",
         description="capacitor from the feedback resistors' junction to ground (removes the AC feedback)",
         lo=10e-9, hi=1e-3),
    Role("bias_bottom", "R", optional=True,
         description="resistor from the base to the emitter's rail (ground; the supply for PNP)", lo=1e3, hi=10e6),
    Role("collector", "R", description="collector load resistor", lo=100.0, hi=1e6),
    *emitter_roles(),
    *input_roles("the base"),
    Role("output_cap", "C", prefix="C", description="output coupling capacitor", lo=10e-9, hi=1e-3),
)

ORDER = ("feedback", "feedback_split", "bias_bottom", "collector", "emitter", "emitter_bypassed", "input_series",
         "input_cap", "feedback_cap", "bypass_cap", "output_cap", "level_pot")


def build(parts: list[Placed], sources: list[float], load_r: float, load_c: float, model, supply: float) -> Circuit:
    """The netlist of a feedback-ce stage (arguments as :func:`divider_ce.build`)."""
    ps = Parts(parts)
    rail_e, rail_c = rails(model)
    els: list[Element] = [supply_source(supply)]
    split = ps.get("feedback_split")
    if split:
        els.append(ps.R(ps["feedback"], "c", "f"))
        els.append(ps.R(split, "f", "b"))
        cap = ps.get("feedback_cap")
        if cap:
            els.append(ps.C(cap, "f", GROUND))
    else:
        els.append(ps.R(ps["feedback"], "c", "b"))
    bottom = ps.get("bias_bottom")
    if bottom:
        els.append(ps.R(bottom, "b", rail_e))
    els.append(ps.R(ps["collector"], rail_c, "c"))
    em, emitter = emitter_branch(ps, "e", "e2", rail_e)
    els.extend(em)
    els.append(Element("Q1", "Q", ("c", "b", emitter), role="transistor", model=model))
    els.append(ps.C(ps["output_cap"], "c", "out"))
    els.extend(load(load_r, load_c))
    els.extend(front_end(ps, sources, "b"))
    return Circuit(NAME, tuple(els), len(sources))
