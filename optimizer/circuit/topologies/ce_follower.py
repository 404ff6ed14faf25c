"""``ce-follower``: the ``divider-ce`` gain stage (Q1) directly coupled into an
emitter-follower output buffer (Q2).

::

          vcc ──────────────┬──────────────────── Q2 collector
           │                │
           R bias_top       R collector
           │                │
           b (Q1 base)      c (Q1 collector) ── Q2 base
           │
           R bias_bottom ── 0
           │
           └── R input_series k ── [level_pot k] ── C input_cap k ── src k ── RS k ── in k

          Q1 emitter ── R emitter ── e2 ── R emitter_bypassed ∥ C bypass_cap ── 0
          e_q2 (Q2 emitter) ── R buffer_emitter ── 0
          e_q2 ── C output_cap ── out ── load

Q2's base sits on Q1's collector, so the follower adds no coupling capacitor; the output
impedance is about (collector / β + r_e) ∥ buffer_emitter, tens of ohms, so the stage can
drive a long cable or a 10 kΩ ∥ 1 nF load without losing treble. Q2's base current is
taken from the collector node, so the gain stage sees the buffer's input (about β times
buffer_emitter ∥ the load) in parallel with its collector resistor.

The PNP mirror image runs from the same positive supply: Q2's collector goes to ground,
the emitter parts of both transistors to ``vcc``, ``collector`` to ground.
"""

from __future__ import annotations

from ..netlist import Circuit, Element
from . import Placed, Role
from ._common import Parts, emitter_branch, emitter_roles, front_end, input_roles, load, rails, supply_source

NAME = "ce-follower"
SUMMARY = "divider-ce gain stage directly coupled into an emitter-follower output buffer"

ROLES = (
    Role("bias_top", "R", description="divider resistor from the supply to the base", lo=1e3, hi=10e6),
    Role("bias_bottom", "R", description="divider resistor from the base to ground", lo=1e3, hi=10e6),
    Role("collector", "R", description="gain stage's collector load resistor (also biases the buffer)", lo=100.0, hi=1e6),
    *emitter_roles(),
    Role("buffer_emitter", "R", description="output buffer's emitter resistor", lo=100.0, hi=1e6),
    *input_roles("the base"),
    Role("output_cap", "C", prefix="C", description="output coupling capacitor from the buffer's emitter", lo=10e-9, hi=1e-3),
)

ORDER = ("bias_top", "bias_bottom", "collector", "emitter", "emitter_bypassed", "buffer_emitter", "input_series",
         "input_cap", "bypass_cap", "output_cap", "level_pot")


def build(parts: list[Placed], sources: list[float], load_r: float, load_c: float, model, supply: float) -> Circuit:
    """The netlist of a ce-follower stage (arguments as :func:`divider_ce.build`)."""
    ps = Parts(parts)
    rail_e, rail_c = rails(model)
    els: list[Element] = [supply_source(supply)]
    els.append(ps.R(ps["bias_top"], "vcc", "b"))
    els.append(ps.R(ps["bias_bottom"], "b", "0"))
    els.append(ps.R(ps["collector"], rail_c, "c"))
    em, emitter = emitter_branch(ps, "e", "e2", rail_e)
    els.extend(em)
    els.append(Element("Q1", "Q", ("c", "b", emitter), role="transistor", model=model))
    els.append(Element("Q2", "Q", (rail_c, "c", "e_q2"), role="transistor", model=model))
    els.append(ps.R(ps["buffer_emitter"], "e_q2", rail_e))
    els.append(ps.C(ps["output_cap"], "e_q2", "out"))
    els.extend(load(load_r, load_c))
    els.extend(front_end(ps, sources, "b"))
    return Circuit(NAME, tuple(els), len(sources))
