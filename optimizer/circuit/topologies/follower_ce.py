"""``follower-ce``: a bootstrapped emitter-follower input buffer (Q1) into a common-emitter
gain stage (Q2) with divider bias.

::

          vcc ──┬──────────────────────── Q1 collector
                │
                R bias_top
                │
                bs ── R bootstrap ── b (Q1 base) ── R input_series k ── [level_pot k] ── C input_cap k ── src k ── …
                │
                R bias_bottom ── 0

          e (Q1 emitter) ── R follower_emitter ── 0
          e ── C bootstrap_cap ── bs
          e ── C coupling_cap ── b_q2

          vcc ──┬──────────────────┐
                │                  │
                R gain_bias_top    R gain_collector
                │                  │
                b_q2 (Q2 base)     c_q2 (Q2 collector) ── C output_cap ── out ── load
                │
                R gain_bias_bottom ── 0

          e_q2 (Q2 emitter) ── R gain_emitter ── e2_q2 ── R gain_emitter_bypassed ∥ C gain_bypass_cap ── 0

Q1 is biased from the divider node ``bs`` through ``bootstrap``; ``bootstrap_cap`` drives
``bs`` with Q1's emitter, which follows the base, so the AC current through ``bootstrap``
is only (1 − A)·v (A the follower's gain, just below 1) and the resistor looks about
1/(1 − A) times larger. The input impedance is then set mostly by β of Q1 times the
resistance its emitter drives (``follower_emitter`` ∥ the divider ∥ the gain stage), so a
high-β Q1 and light loading reach about 1 MΩ for a guitar or piezo pickup.

The gain stage is ``divider-ce`` without inputs: its roles carry the prefix ``gain_``.
The PNP mirror image runs from the same positive supply: the collector of Q1 goes to
ground, emitter parts of both transistors to ``vcc``, the gain stage's collector resistor
to ground; the dividers stay between ``vcc`` and ground.
"""

from __future__ import annotations

from ..netlist import GROUND, Circuit, Element
from . import Placed, Role
from ._common import Parts, emitter_branch, emitter_roles, front_end, input_roles, load, rails, supply_source

NAME = "follower-ce"
SUMMARY = "bootstrapped emitter-follower input buffer into a divider-biased common-emitter gain stage"

ROLES = (
    Role("bias_top", "R", description="follower's bias divider, supply to the bootstrap node", lo=1e3, hi=10e6),
    Role("bias_bottom", "R", description="follower's bias divider, bootstrap node to ground", lo=1e3, hi=10e6),
    Role("bootstrap", "R", description="bias resistor from the bootstrap node to the follower's base", lo=1e3, hi=10e6),
    Role("bootstrap_cap", "C", prefix="C", description="bootstrap capacitor from the follower's emitter to the bootstrap node",
         lo=10e-9, hi=1e-3),
    Role("follower_emitter", "R", description="follower's emitter resistor", lo=100.0, hi=1e6),
    Role("coupling_cap", "C", prefix="C", description="coupling capacitor from the follower to the gain stage",
         lo=10e-9, hi=1e-3),
    Role("gain_bias_top", "R", description="gain stage's divider resistor from the supply to its base", lo=1e3, hi=10e6),
    Role("gain_bias_bottom", "R", description="gain stage's divider resistor from its base to ground", lo=1e3, hi=10e6),
    Role("gain_collector", "R", description="gain stage's collector load resistor", lo=100.0, hi=1e6),
    *emitter_roles("gain_", "the gain stage"),
    *input_roles("the follower's base"),
    Role("output_cap", "C", prefix="C", description="output coupling capacitor", lo=10e-9, hi=1e-3),
)

ORDER = ("bias_top", "bias_bottom", "bootstrap", "follower_emitter", "gain_bias_top", "gain_bias_bottom",
         "gain_collector", "gain_emitter", "gain_emitter_bypassed", "input_series", "input_cap", "bootstrap_cap",
         "coupling_cap", "gain_bypass_cap", "output_cap", "level_pot")


def build(parts: list[Placed], sources: list[float], load_r: float, load_c: float, model, supply: float) -> Circuit:
    """The netlist of a follower-ce stage (arguments as :func:`divider_ce.build`)."""
    ps = Parts(parts)
    rail_e, rail_c = rails(model)
    els: list[Element] = [supply_source(supply)]
    # The follower.
    els.append(ps.R(ps["bias_top"], "vcc", "bs"))
    els.append(ps.R(ps["bias_bottom"], "bs", GROUND))
    els.append(ps.R(ps["bootstrap"], "bs", "b"))
    els.append(ps.C(ps["bootstrap_cap"], "e", "bs"))
    els.append(ps.R(ps["follower_emitter"], "e", rail_e))
    els.append(Element("Q1", "Q", (rail_c, "b", "e"), role="transistor", model=model))
    # The gain stage.
    els.append(ps.C(ps["coupling_cap"], "e", "b_q2"))
    els.append(ps.R(ps["gain_bias_top"], "vcc", "b_q2"))
    els.append(ps.R(ps["gain_bias_bottom"], "b_q2", GROUND))
    els.append(ps.R(ps["gain_collector"], rail_c, "c_q2"))
    em, emitter = emitter_branch(ps, "e_q2", "e2_q2", rail_e, prefix="gain_")
    els.extend(em)
    els.append(Element("Q2", "Q", ("c_q2", "b_q2", emitter), role="transistor", model=model))
    els.append(ps.C(ps["output_cap"], "c_q2", "out"))
    els.extend(load(load_r, load_c))
    els.extend(front_end(ps, sources, "b"))
    return Circuit(NAME, tuple(els), len(sources))
