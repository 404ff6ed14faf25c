"""What every topology's netlist shares: the supply, the per-input front end, the load.

The front end of input *k* is the same in every topology: the source EMF ``in{k}`` (an ideal
voltage source ``VIN{k}``), its source resistance ``RS{k}`` into the jack ``src{k}``, the
``input_cap`` to ``a{k}``, an optional ``level_pot`` (top ``a{k}``, wiper ``w{k}``, bottom
to ground) and the ``input_series`` resistor from ``a{k}`` (or the wiper) to the node the
topology sums its inputs into. The load ``RL`` (and ``CL`` when it has capacitance) hangs on
``out``; ``VCC`` drives ``vcc``.
"""

from __future__ import annotations

from ..netlist import GROUND, Element
from . import Placed, Role

__all__ = ["Parts", "emitter_branch", "emitter_roles", "front_end", "input_roles", "load", "rails", "supply_source"]


class Parts:
    """The placed parts of a design by role, and elements made from them."""

    def __init__(self, parts: list[Placed]):
        self.by = {(p.role, p.input): p for p in parts}

    def get(self, role: str, k: int | None = None) -> Placed | None:
        return self.by.get((role, k))

    def __getitem__(self, role: str) -> Placed:
        return self.by[(role, None)]

    @staticmethod
    def R(p: Placed, a: str, b: str) -> Element:
        return Element(p.ref, "R", (a, b), p.value, p.role, p.input, p.tolerance, type=p.type)

    @staticmethod
    def C(p: Placed, a: str, b: str) -> Element:
        return Element(p.ref, "C", (a, b), p.value, p.role, p.input, p.tolerance, type=p.type)


def rails(model) -> tuple[str, str]:
    """(emitter rail, collector rail): where a stage's emitter and collector branches return.

    NPN: emitter parts to ground, collector resistor to the supply. PNP (the mirror image
    from a positive supply): emitter parts to the supply, collector resistor to ground.
    """
    pnp = model.polarity == "pnp"
    return ("vcc", GROUND) if pnp else (GROUND, "vcc")


def supply_source(volts: float) -> Element:
    return Element("VCC", "VSUPPLY", ("vcc", GROUND), volts, role="supply", part=False)


def emitter_branch(ps: Parts, node: str, split: str, rail: str, prefix: str = "") -> tuple[list[Element], str]:
    """The emitter parts of a common-emitter stage (unbypassed ``emitter`` to ``split``, then
    ``emitter_bypassed`` ∥ ``bypass_cap`` to the rail; either may be absent).

    Returns the elements and the node the transistor's emitter goes to (the rail itself when
    there is no emitter part). ``prefix`` is the roles' prefix (``gain_`` …).
    """
    re1 = ps.get(prefix + "emitter")
    re2 = ps.get(prefix + "emitter_bypassed")
    ce = ps.get(prefix + "bypass_cap")
    els: list[Element] = []
    if re1 and re2:
        els.append(ps.R(re1, node, split))
        els.append(ps.R(re2, split, rail))
        if ce:
            els.append(ps.C(ce, split, rail))
    elif re1:
        els.append(ps.R(re1, node, rail))
    elif re2:
        els.append(ps.R(re2, node, rail))
        if ce:
            els.append(ps.C(ce, node, rail))
    return els, (node if (re1 or re2) else rail)


def front_end(ps: Parts, sources: list[float], into: str) -> list[Element]:
    """Every input's source, coupling capacitor, optional level pot and summing resistor."""
    els: list[Element] = []
    for k, rs in enumerate(sources, start=1):
        els.append(Element(f"VIN{k}", "VSIG", (f"in{k}", GROUND), 0.0, role="source_emf", input=k, part=False))
        els.append(Element(f"RS{k}", "R", (f"in{k}", f"src{k}"), max(rs, 1.0), role="source", input=k, part=False))
        els.append(ps.C(ps.by[("input_cap", k)], f"src{k}", f"a{k}"))
        pot = ps.get("level_pot", k)
        series = ps.by[("input_series", k)]
        if pot:
            els.append(Element(pot.ref, "POT", (f"a{k}", f"w{k}", GROUND), pot.value, pot.role, k, pot.tolerance,
                               position=pot.position, taper=pot.taper, type=pot.type))
            els.append(ps.R(series, f"w{k}", into))
        else:
            els.append(ps.R(series, f"a{k}", into))
    return els


def load(load_r: float, load_c: float) -> list[Element]:
    els = [Element("RL", "R", ("out", GROUND), load_r, role="load", part=False)]
    if load_c > 0:
        els.append(Element("CL", "C", ("out", GROUND), load_c, role="load_cap", part=False))
    return els


def input_roles(into: str) -> tuple[Role, ...]:
    """The per-input roles every topology has (``into`` names the node they are summed at)."""
    return (
        Role("input_cap", "C", per_input=True, prefix="C", description="input coupling capacitor", lo=10e-9, hi=1e-3),
        Role("level_pot", "POT", per_input=True, optional=True, prefix="RV", description="level control (volume pot)",
             lo=1e3, hi=2e6),
        Role("input_series", "R", per_input=True, description=f"summing resistor into {into}", lo=100.0, hi=2e6),
    )


def emitter_roles(prefix: str = "", what: str = "") -> tuple[Role, ...]:
    """The emitter parts of a common-emitter stage: unbypassed, bypassed, bypass capacitor."""
    of = f" of {what}" if what else ""
    return (
        Role(prefix + "emitter", "R", optional=True, description=f"unbypassed emitter resistor{of} (sets the gain)",
             lo=1.0, hi=100e3),
        Role(prefix + "emitter_bypassed", "R", optional=True,
             description=f"bypassed emitter resistor{of} (sets the current)", lo=10.0, hi=100e3),
        Role(prefix + "bypass_cap", "C", optional=True, requires=prefix + "emitter_bypassed", prefix="C",
             description=f"emitter bypass capacitor{of}", lo=1e-6, hi=4.7e-3),
    )
