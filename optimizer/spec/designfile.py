"""Design files: a topology, its conditions and one value per part.

Each part names a role of the file's topology (``optimizer.circuit.topologies``: the
``ROLES`` of ``divider-ce``, ``feedback-ce``, ``follower-ce``, ``ce-follower`` or ``cb-sum``);
a role the topology does not have, a missing required role, a role taken twice or a part
whose ``requires`` partner is absent is reported as ``file:line: field: message``.

``stagefit check`` reads them; ``stagefit design`` writes them (``design-N.yaml``). Example::

    topology: divider-ce
    supply: {nominal: 9 V, min: 7 V, max: 9.6 V}   # or 9 V
    ambient: {min: 5 °C, max: 35 °C}               # or 25 °C
    load: {resistance: 10k, capacitance: 300p}
    transistor: 2N3904                              # or an inline model, see below
    inputs: [{source_resistance: 1k}, {source_resistance: 1k}]
    parts:
      R1: {role: bias_top, value: 47k, tolerance: 5 %}
      C1: {role: input_cap, input: 1, value: 10u}
      RV1: {role: level_pot, input: 1, value: 10k, taper: log, position: 1}

An inline transistor model is ``{polarity: npn, is: 1e-14, beta: 200, va: 100,
beta_reverse: 2, cjc: 4p, cje: 8p, tf: 0.4n}`` (optionally ``beta_min``, ``beta_max``,
``xtb``, ``name``). Tolerances default to 5 % for resistors and 20 % for capacitors and
pots; ``thd_limit`` (default 1 %) and ``level`` (the output level THD is stated at) are
optional.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field, replace
from pathlib import Path

from ..catalog.transistors import BjtModel, parse_model_fields, transistor_types
from ..circuit.topologies import Placed, get_topology
from ..errors import display_path
from .quantities import parse_quantity, parse_tolerance, parse_value
from .source import Node, Reader, load_yaml
from .specfile import Ambient, Load, Supply, _ambient, _load, _SpecReader, _supply

__all__ = ["Design", "load_design", "DEFAULT_TOLERANCE"]

DEFAULT_TOLERANCE = {"R": 0.05, "C": 0.20, "POT": 0.20}
FIELDS = ["topology", "supply", "ambient", "load", "transistor", "inputs", "parts", "thd_limit", "level", "spec", "note"]
PART_FIELDS = ["role", "input", "value", "tolerance", "type", "taper", "position", "source", "code", "rating"]


@dataclass(frozen=True)
class Design:
    """A design: everything ``check`` needs to analyse one stage, in SI units."""

    topology: str
    supply: Supply
    ambient: Ambient
    load: Load
    transistor: str  # type name (or the inline model's name)
    model: BjtModel
    sources: tuple[float, ...]  # source resistance of each input, ohms
    parts: tuple[Placed, ...]
    thd_limit: float = 0.01
    level: float | None = None  # V peak at the load that THD is stated at
    input_names: tuple[str, ...] = ()
    spec_path: Path | None = None
    path: Path | None = None
    extra: dict = field(default_factory=dict)  # what the design was chosen from (stock marks)

    @property
    def n_inputs(self) -> int:
        return len(self.sources)

    def part(self, ref: str) -> Placed:
        for p in self.parts:
            if p.ref == ref:
                return p
        raise KeyError(ref)

    def with_model(self, name: str, model: BjtModel) -> "Design":
        return replace(self, transistor=name, model=model)


_REF = re.compile(r"^(R|C|RV|VR|P)(\d+)$")


def _check_roles(r: Reader, node: Node, topology: str, parts: list[Placed], n_inputs: int) -> bool:
    topo = get_topology(topology)
    roles = {ro.name: ro for ro in topo.ROLES}
    ok = True
    seen: dict[tuple[str, int | None], str] = {}
    for p in parts:
        ro = roles[p.role]
        key = (p.role, p.input)
        if key in seen:
            r.problem(node.key_lines.get(p.ref, node.line), f"parts.{p.ref}", f"role {p.role}" + (f" of input {p.input}" if p.input else "") + f" is already taken by {seen[key]}")
            ok = False
        seen[key] = p.ref
    for ro in topo.ROLES:
        if ro.optional:
            continue
        targets = [(ro.name, k) for k in range(1, n_inputs + 1)] if ro.per_input else [(ro.name, None)]
        for t in targets:
            if t not in seen:
                r.problem(node, "parts", f"no part has role {ro.name}" + (f" for input {t[1]}" if t[1] else "") + f" ({ro.description})")
                ok = False
    for ro in topo.ROLES:
        if ro.requires:
            for (name, k), ref in seen.items():
                if name == ro.name and (ro.requires, k) not in seen:
                    r.problem(node.key_lines.get(ref, node.line), f"parts.{ref}", f"role {ro.name} needs a part with role {ro.requires}")
                    ok = False
    # A bypassed resistor without its capacitor is just an emitter resistor: allowed.
    return ok


def _topologies_with_role(role: str) -> list[str]:
    from ..circuit.topologies import TOPOLOGIES

    return [t for t in TOPOLOGIES if any(ro.name == role for ro in get_topology(t).ROLES)]


def _part(r: _SpecReader, ref: str, node: Node, topology: str, n_inputs: int) -> Placed | None:
    topo = get_topology(topology)
    roles = {ro.name: ro for ro in topo.ROLES}
    m = r.keys(node, PART_FIELDS, ["role", "value"])
    if m is None:
        return None
    if not _REF.match(ref):
        r.problem(node.key_lines and node or node, f"parts.{ref}", "a designator is letters and a number, e.g. R1, C2, RV1")
        return None
    rnode = m.get("role")
    if rnode is not None and isinstance(rnode.value, str) and rnode.value not in roles:
        elsewhere = _topologies_with_role(rnode.value)
        if elsewhere:
            # A role of another topology: say so, and list this topology's roles.
            r.problem(rnode, rnode.path, f"{rnode.plain()!r} is not allowed: it is a role of {', '.join(elsewhere)}, "
                                         f"not of {topology} (allowed: {', '.join(roles)})")
            return None
    role = r.choice(rnode, list(roles))
    if role is None:
        return None
    ro = roles[role]
    inp = None
    if ro.per_input:
        if "input" not in m:
            r.problem(node, f"parts.{ref}.input", f"is missing (role {role} belongs to one input, 1 to {n_inputs})")
            return None
        inp = r.integer(m["input"], 1, n_inputs)
        if inp is None:
            return None
    elif "input" in m:
        r.problem(m["input"], f"parts.{ref}.input", f"role {role} is not per input; remove input")
        return None
    kind = "capacitance" if ro.kind == "C" else "resistance"
    pv = r.parse(m.get("value"), lambda t: parse_value(t, kind))
    if pv is None:
        return None
    tol = pv.tolerance if pv.tolerance is not None else DEFAULT_TOLERANCE[ro.kind]
    if "tolerance" in m:
        tol = r.parse(m["tolerance"], parse_tolerance)
        if tol is None:
            return None
    taper, pos = "log", 1.0
    if ro.kind == "POT":
        if "taper" in m:
            taper = r.choice(m["taper"], ["linear", "log"])
            if taper is None:
                return None
        if "position" in m:
            pos = r.number(m["position"], 0.0, 1.0)
            if pos is None:
                return None
    elif "taper" in m or "position" in m:
        r.problem(node, f"parts.{ref}", "taper and position apply to pots only")
        return None
    ptype = str(m["type"].value) if "type" in m and m["type"].value is not None else ""
    expected_prefix = {"R": ("R",), "C": ("C",), "POT": ("RV", "VR", "P")}[ro.kind]
    if not any(ref.startswith(pf) and ref[len(pf):].isdigit() for pf in expected_prefix):
        r.problem(node, f"parts.{ref}", f"a {role} part is named {expected_prefix[0]}<number> (got {ref})")
        return None
    return Placed(ref, role, pv.value, inp, tol, ptype, pos, taper)


def transistor_from(r: _SpecReader, node: Node) -> tuple[str, BjtModel] | None:
    """A transistor type name from the catalog, or an inline model."""
    if node.is_map:
        model = parse_model_fields(r, node)
        return (model.name, model) if model else None
    name = r.text(node)
    if name is None:
        return None
    known = transistor_types()
    if name not in known:
        import difflib

        close = difflib.get_close_matches(name, list(known), n=1, cutoff=0.6)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        r.problem(node, node.path, f"unknown transistor type {name!r}{hint} (known: {', '.join(sorted(known))}; or give an inline model)")
        return None
    return name, known[name].model()


def load_design(path: str | Path) -> Design:
    """Read and check a design file.

    Raises
    ------
    FileProblems
        Listing every problem with file, line, field, bad value and what is allowed.
    """
    p = Path(path)
    root = load_yaml(p)
    r = _SpecReader(display_path(p))
    m = r.keys(root, FIELDS, ["topology", "supply", "load", "transistor", "inputs", "parts"])
    if m is None:
        r.raise_if_any()
    from ..circuit.topologies import TOPOLOGIES

    topology = r.choice(m.get("topology"), TOPOLOGIES)
    supply = _supply(r, m.get("supply"))
    ambient = _ambient(r, m.get("ambient"))
    load = _load(r, m.get("load"))
    tr = transistor_from(r, m["transistor"]) if "transistor" in m else None
    sources, names = [], []
    seq = r.seq(m.get("inputs"), "a list of inputs, e.g. [{source_resistance: 1k}]")
    for i, n in enumerate(seq or []):
        im = r.keys(n, ["source_resistance", "name", "max_level", "level_control"], ["source_resistance"])
        if im is None:
            continue
        rs = r.resistance(im.get("source_resistance"), "source_resistance")
        if rs is not None:
            sources.append(rs)
            names.append(str(im["name"].value) if "name" in im else str(i + 1))
    if seq is not None and not 1 <= len(seq) <= 16:
        r.problem(m["inputs"], "inputs", f"has {len(seq)} inputs (allowed: 1 to 16)")
    parts: list[Placed] = []
    pm = r.mapping(m.get("parts"))
    if pm is not None and topology is not None and seq is not None:
        for ref, pn in pm.items():
            pl = _part(r, ref, pn, topology, len(seq))
            if pl is not None:
                parts.append(pl)
    thd = 0.01
    if "thd_limit" in m:
        thd = r.parse(m["thd_limit"], lambda t: parse_quantity(t, "percent"))
    level = r.quantity(m.get("level"), "level", "level") if "level" in m else None
    spec_path = None
    if "spec" in m:
        text = r.text(m["spec"])
        if text:
            sp = (p.resolve().parent / text) if not Path(text).is_absolute() else Path(text)
            spec_path = sp
    if not r.problems and topology is not None and pm is not None:
        _check_roles(r, m["parts"], topology, parts, len(sources))
    r.raise_if_any()
    name, model = tr
    return Design(
        topology=topology,
        supply=supply,
        ambient=ambient,
        load=load,
        transistor=name,
        model=model,
        sources=tuple(sources),
        parts=tuple(parts),
        thd_limit=thd,
        level=level,
        input_names=tuple(names),
        spec_path=spec_path,
        path=p,
    )
