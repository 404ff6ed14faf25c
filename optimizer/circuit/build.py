"""From a design (roles and values) to the netlist of its topology."""

from __future__ import annotations

from .netlist import Circuit
from .topologies import get_topology

__all__ = ["build_circuit"]


def build_circuit(design, model=None) -> Circuit:
    """The netlist of a :class:`~optimizer.spec.designfile.Design` at its nominal supply.

    ``model`` replaces the design's transistor model (a substitution check).
    """
    topo = get_topology(design.topology)
    return topo.build(
        list(design.parts),
        list(design.sources),
        design.load.resistance,
        design.load.capacitance,
        model or design.model,
        design.supply.nominal,
    )
