"""Candidate values for every role of a topology: standard series and stock items.

Each role of the topology gets a list of :class:`Item` — a value with where it comes from
(``series``: bought; ``stock``: a line of the stock list, with its quantity), its tolerance,
type and price. ``use: stock-only`` keeps stock items only, ``series-only`` ignores the stock,
``stock-first`` offers both (the search prefers stock). Values outside the spec's range or
the role's sensible range are dropped, and so are values the analysis can rule out on their
own (a coupling capacitor too small to reach the low corner even with the largest resistance
it could see).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..catalog.parts import capacitor_values, default_capacitor_type, pot_values
from ..catalog.series import get_series
from ..catalog.transistors import TransistorType, transistor_types
from ..circuit.topologies import Role, get_topology
from ..errors import FileProblems, Problem
from ..spec.quantities import format_code
from ..spec.specfile import Spec
from ..spec.stockfile import Stock, load_stock

__all__ = ["Item", "RoleSlot", "Candidates", "build_candidates"]


@dataclass(frozen=True)
class Item:
    """One value a part may take."""

    value: float  # SI; 0 means the part is absent
    source: str  # "series", "stock" or "absent"
    tolerance: float
    type: str = ""
    stock_line: int | None = None  # index into Stock.items
    price: float | None = None
    code: str = ""

    @property
    def absent(self) -> bool:
        return self.source == "absent"


@dataclass(frozen=True)
class RoleSlot:
    """One designator to fill: a role (and input), with its candidate items."""

    role: Role
    input: int | None
    items: tuple[Item, ...]

    @property
    def key(self) -> tuple[str, int | None]:
        return (self.role.name, self.input)

    @property
    def kind(self) -> str:
        return self.role.kind


@dataclass
class Candidates:
    """Everything the model chooses from."""

    topology: str
    slots: list[RoleSlot]
    transistors: list[tuple[str, TransistorType]]
    stock: Stock | None
    stock_qty: dict[int, int] = field(default_factory=dict)

    def slot(self, role: str, input: int | None = None) -> RoleSlot | None:
        for s in self.slots:
            if s.role.name == role and s.input == input:
                return s
        return None

    def stock_ok(self, pick: dict) -> bool:
        """No stock line used more often than the drawer holds (``pick``: slot key → item index)."""
        used: dict[int, int] = {}
        for s in self.slots:
            it = s.items[pick[s.key]]
            if it.stock_line is not None:
                used[it.stock_line] = used.get(it.stock_line, 0) + 1
        return all(n <= self.stock_qty[line] for line, n in used.items())

    def size(self) -> float:
        """How many combinations there are (for reporting)."""
        n = float(len(self.transistors))
        for s in self.slots:
            n *= len(s.items)
        return n


def _series_items(kind: str, series: str, lo: float, hi: float, tol: float) -> list[Item]:
    s = get_series(series)
    vals = s.values_between(lo, hi)
    if kind == "C":
        out = []
        for v in vals:
            t = default_capacitor_type(v)
            out.append(Item(v, "series", tol, t, code=format_code(v, "capacitance")))
        return out
    return [Item(v, "series", tol, "", code=format_code(v, "resistance")) for v in vals]


def build_candidates(spec: Spec, topology: str, stock: Stock | None = None) -> Candidates:
    """Candidate items for every slot of ``topology`` under the spec's parts policy."""
    topo = get_topology(topology)
    pp = spec.parts
    use = pp.use
    if stock is None and pp.stock is not None and use != "series-only":
        stock = load_stock(pp.stock)
    if use == "series-only":
        stock = None
    if use == "stock-only" and stock is None:
        raise FileProblems([Problem(str(spec.path), 0, "parts.use", "stock-only needs a stock list (parts.stock or --stock)")])
    slots: list[RoleSlot] = []
    n = len(spec.inputs)
    for role in topo.ROLES:
        keys = [k for k in range(1, n + 1)] if role.per_input else [None]
        for k in keys:
            if role.kind == "POT":
                if k is None or not spec.inputs[k - 1].level_control:
                    continue
            items = _items_for(role, spec, stock, use, k)
            if role.optional and role.kind != "POT":
                items = [Item(0.0, "absent", 0.0)] + items
            if not items:
                raise FileProblems([Problem(str(spec.path), 0, "parts",
                                            f"no value is available for role {role.name}"
                                            + (f" of input {k}" if k else "")
                                            + (" in the stock list (use stock-first to allow buying)" if use == "stock-only" else ""))])
            slots.append(RoleSlot(role, k, tuple(items)))
    known = transistor_types()
    names = list(pp.transistors)
    if stock is not None:
        for it in stock.of_kind("transistor"):
            if it.value not in names and use in ("stock-only", "stock-first"):
                names.append(str(it.value))
    if use == "stock-only" and stock is not None:
        in_stock = {str(it.value) for it in stock.of_kind("transistor")}
        names = [nm for nm in names if nm in in_stock]
        if not names:
            raise FileProblems([Problem(str(spec.path), 0, "parts.transistors",
                                        "stock-only: none of the transistor types is in the stock list")])
    transistors = [(nm, known[nm]) for nm in dict.fromkeys(names)]
    qty = {i: it.quantity for i, it in enumerate(stock.items)} if stock else {}
    return Candidates(topology, slots, transistors, stock, qty)


def _in_range(role: Role, spec: Spec, kind: str) -> tuple[float, float]:
    pp = spec.parts
    if kind == "R" or kind == "POT":
        return max(role.lo, pp.resistor_min), min(role.hi, pp.resistor_max)
    return max(role.lo, pp.capacitor_min), min(role.hi, pp.capacitor_max)


def _items_for(role: Role, spec: Spec, stock: Stock | None, use: str, k: int | None) -> list[Item]:
    pp = spec.parts
    lo, hi = _in_range(role, spec, role.kind)
    lo, hi = _prune(role, spec, lo, hi, k)
    items: list[Item] = []
    if use != "stock-only" and lo <= hi:
        if role.kind == "R":
            items += _series_items("R", pp.resistor_series, lo, hi, pp.resistor_tolerance)
        elif role.kind == "C":
            vals = capacitor_values(pp.capacitor_series, lo, hi, None)
            items += [Item(v, "series", pp.capacitor_tolerance, default_capacitor_type(v), code=format_code(v, "capacitance"))
                      for v in vals]
        elif role.kind == "POT":
            items += [Item(v, "series", pp.pot_tolerance, "log", code=format_code(v, "resistance"))
                      for v in pot_values(pp.pot_style, lo, hi)]
    if stock is not None and use in ("stock-only", "stock-first"):
        kind = {"R": "resistor", "C": "capacitor", "POT": "pot"}[role.kind]
        for i, it in enumerate(stock.items):
            if it.kind != kind or not (lo * (1 - 1e-9) <= it.value <= hi * (1 + 1e-9)):
                continue
            tol = it.tolerance if it.tolerance is not None else (
                pp.resistor_tolerance if role.kind == "R" else pp.capacitor_tolerance if role.kind == "C" else pp.pot_tolerance)
            ctype = it.type or (default_capacitor_type(it.value) if role.kind == "C" else "")
            code = format_code(it.value, "capacitance" if role.kind == "C" else "resistance")
            items.append(Item(it.value, "stock", tol, ctype, i, it.price, code))
    items.sort(key=lambda x: (x.value, x.source != "stock"))
    return items


def _prune(role: Role, spec: Spec, lo: float, hi: float, k: int | None) -> tuple[float, float]:
    """Tighten a role's range with bounds that hold for every design."""
    t = spec.targets
    if role.kind == "C" and t.low_cutoff_max is not None:
        # The largest resistance a coupling capacitor can see is bounded by the largest
        # resistor values; a capacitor whose corner is above the target even then is useless.
        rmax = 2 * spec.parts.resistor_max + spec.load.resistance + max(i.source_resistance for i in spec.inputs)
        cmin = 1 / (2 * math.pi * t.low_cutoff_max * rmax) / 1.5
        lo = max(lo, cmin)
    if role.name == "bypass_cap" and t.low_cutoff_max is not None:
        lo = max(lo, 1 / (2 * math.pi * t.low_cutoff_max * spec.parts.resistor_max))
    return lo, hi
