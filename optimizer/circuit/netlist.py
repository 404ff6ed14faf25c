"""Circuits as netlists of elements, each with a designator and a role.

A topology (see :mod:`optimizer.circuit.topologies`) turns part values into a
:class:`Circuit`; the analysis works on any circuit, so a new topology is a new netlist,
not new analysis code.

Node names: ground is ``0``; the supply rail is ``vcc``; source *k* (1-based) has its EMF
node ``in{k}`` (an ideal voltage source ``VIN{k}``) and its jack ``src{k}`` after the source
resistance ``RS{k}``; the load hangs on ``out``. The rest are the topology's own: the
first transistor's terminals are ``b``, ``c``, ``e`` (``e2`` between its unbypassed and
bypassed emitter resistors), each input's coupling capacitor ends on ``a{k}`` (the level
pot's wiper is ``w{k}``), and a second transistor's terminals are ``b_q2``, ``c_q2``, ``e_q2``
(``e2_q2``). A terminal may sit on a rail (a follower's collector on ``vcc``).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

from ..catalog.transistors import BjtModel

__all__ = ["Circuit", "Element", "GROUND", "KINDS"]

GROUND = "0"

#: Element kinds: resistor, capacitor, potentiometer (top, wiper, bottom), bipolar
#: transistor (collector, base, emitter), the supply source (vcc, 0) and a signal EMF (in k, 0).
KINDS = ("R", "C", "POT", "Q", "VSUPPLY", "VSIG")


@dataclass(frozen=True)
class Element:
    """One element of a netlist.

    ``value`` is ohms, farads or volts (0 for a transistor). ``position`` is a pot's
    rotation (0 = wiper at the bottom end, 1 = at the top end) and ``taper`` its law.
    ``part`` is False for what the builder does not fit: source resistances, the load,
    the supply and signal sources.
    """

    ref: str
    kind: str
    nodes: tuple[str, ...]
    value: float = 0.0
    role: str = ""
    input: int | None = None
    tolerance: float = 0.0
    position: float = 1.0
    taper: str = "log"
    model: BjtModel | None = None
    part: bool = True
    type: str = ""  # dielectric or resistor construction, for the BOM

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"kind must be one of {', '.join(KINDS)} (got {self.kind!r})")
        want = {"R": 2, "C": 2, "POT": 3, "Q": 3, "VSUPPLY": 2, "VSIG": 2}[self.kind]
        if len(self.nodes) != want:
            raise ValueError(f"{self.ref}: a {self.kind} has {want} nodes (got {self.nodes})")
        if self.kind in ("R", "C", "POT") and not self.value > 0:
            raise ValueError(f"{self.ref}: value must be positive (got {self.value!r})")
        if self.kind == "Q" and self.model is None:
            raise ValueError(f"{self.ref}: a transistor needs a model")


@dataclass(frozen=True)
class Circuit:
    """A netlist plus what the analyses need to know about it."""

    topology: str
    elements: tuple[Element, ...]
    n_inputs: int
    supply_node: str = "vcc"
    output_node: str = "out"
    notes: tuple[str, ...] = field(default_factory=tuple)

    def __post_init__(self) -> None:
        refs = [e.ref for e in self.elements]
        dup = {r for r in refs if refs.count(r) > 1}
        if dup:
            raise ValueError(f"designators used twice: {', '.join(sorted(dup))}")

    def element(self, ref: str) -> Element:
        for e in self.elements:
            if e.ref == ref:
                return e
        raise KeyError(ref)

    def by_role(self, role: str, input: int | None = None) -> tuple[Element, ...]:
        return tuple(e for e in self.elements if e.role == role and (input is None or e.input == input))

    @property
    def parts(self) -> tuple[Element, ...]:
        """The elements the builder fits (not sources, source resistances or the load)."""
        return tuple(e for e in self.elements if e.part)

    @property
    def transistors(self) -> tuple[Element, ...]:
        return tuple(e for e in self.elements if e.kind == "Q")

    @property
    def nodes(self) -> tuple[str, ...]:
        seen: dict[str, None] = {}
        for e in self.elements:
            for n in e.nodes:
                seen.setdefault(n, None)
        return tuple(seen)

    def neighbours(self, node: str) -> tuple[tuple[Element, int], ...]:
        """The (element, terminal index) pairs that touch a node."""
        return tuple((e, i) for e in self.elements for i, n in enumerate(e.nodes) if n == node)

    def with_values(self, values: dict[str, float]) -> "Circuit":
        """A copy with some element values replaced (by designator)."""
        els = tuple(replace(e, value=values[e.ref]) if e.ref in values else e for e in self.elements)
        return replace(self, elements=els)

    def with_model(self, model: BjtModel) -> "Circuit":
        els = tuple(replace(e, model=model) if e.kind == "Q" else e for e in self.elements)
        return replace(self, elements=els)

    def with_positions(self, position: float) -> "Circuit":
        """A copy with every level control at one rotation (0..1)."""
        els = tuple(replace(e, position=position) if e.kind == "POT" else e for e in self.elements)
        return replace(self, elements=els)

    def describe_node(self, node: str) -> str:
        """A node in circuit terms, e.g. 'the node between C1 and R6'."""
        if node == GROUND:
            return "ground"
        touching = sorted({e.ref for e, _ in self.neighbours(node)})
        if node in ("vcc", "out") or node.startswith(("in", "src")):
            return f"node {node!r} ({', '.join(touching)})"
        if len(touching) == 2:
            return f"the node between {touching[0]} and {touching[1]} ({node!r})"
        return f"node {node!r} (joining {', '.join(touching)})"
