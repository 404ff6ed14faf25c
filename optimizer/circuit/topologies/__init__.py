"""Topologies: recipes that turn part values (by role) into a netlist.

Each topology module defines ``NAME``, ``SUMMARY``, ``ROLES`` (what parts it has), ``ORDER``
(the builder's designator order) and ``build(parts, sources, load_r, load_c, model, supply)``.
:data:`TOPOLOGIES` names them; :func:`get_topology` gives the module of a name.

=================  ============================================================================
``divider-ce``     common-emitter stage, divider bias, inputs summed at the base
``feedback-ce``    common-emitter stage, collector-to-base feedback bias, virtual-earth summing
``follower-ce``    bootstrapped emitter-follower input buffer (Q1) into a divider-ce gain stage (Q2)
``ce-follower``    divider-ce gain stage (Q1) directly coupled into an emitter-follower buffer (Q2)
``cb-sum``         common-base stage, inputs summed into the emitter
=================  ============================================================================
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Placed", "Role", "TOPOLOGIES", "get_topology"]


@dataclass(frozen=True)
class Role:
    """One part a topology has.

    ``kind`` is ``R``, ``C`` or ``POT``; ``per_input`` roles exist once per input;
    ``optional`` roles may be absent; ``requires`` names a role that must then be present
    too (a bypass capacitor needs its resistor); ``prefix`` is the designator letter(s).
    ``lo``/``hi`` bound the values the search considers, in SI.
    """

    name: str
    kind: str
    per_input: bool = False
    optional: bool = False
    requires: str | None = None
    prefix: str = "R"
    lo: float = 0.0
    hi: float = float("inf")
    description: str = ""


@dataclass(frozen=True)
class Placed:
    """A part placed in a role: designator, value (SI), tolerance and, for pots, rotation."""

    ref: str
    role: str
    value: float
    input: int | None = None
    tolerance: float = 0.05
    type: str = ""
    position: float = 1.0
    taper: str = "log"


def _registry():
    from . import cb_sum, ce_follower, divider_ce, feedback_ce, follower_ce

    return {m.NAME: m for m in (divider_ce, feedback_ce, follower_ce, ce_follower, cb_sum)}


TOPOLOGIES = ("divider-ce", "feedback-ce", "follower-ce", "ce-follower", "cb-sum")


def get_topology(name: str):
    """The topology module of a name (``divider-ce`` …)."""
    reg = _registry()
    if name not in reg:
        from ...errors import ValueSyntaxError

        raise ValueSyntaxError(name, "topology", "there is no such topology", "use one of " + ", ".join(reg))
    return reg[name]
