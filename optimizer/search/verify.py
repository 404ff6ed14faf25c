"""From a model's choice to a design, and the full analysis that has the last word on it."""

from __future__ import annotations

from dataclasses import dataclass, field

from ..analysis.evaluate import Analysis, analyse_many
from ..analysis.targets import TargetResult, design_margin, judge
from ..circuit.topologies import Placed, get_topology
from ..spec.designfile import Design
from ..spec.specfile import Spec
from .candidates import Candidates, Item

__all__ = ["Choice", "Verified", "design_of", "needs_large_signal", "verify"]


@dataclass(frozen=True)
class Choice:
    """A design as the model chose it: the item index of every slot, and the transistor."""

    pick: tuple[tuple[tuple[str, int | None], int], ...]
    transistor: int

    @staticmethod
    def of(pick: dict, transistor: int) -> "Choice":
        return Choice(tuple(sorted(pick.items(), key=lambda kv: (kv[0][0], kv[0][1] or 0))), transistor)

    def as_dict(self) -> dict:
        return dict(self.pick)


@dataclass
class Verified:
    """A design with its analysis, its verdict per target and its margin (the smallest)."""

    choice: Choice
    design: Design
    analysis: Analysis
    targets: list[TargetResult]
    margin: float
    items: dict = field(default_factory=dict)  # designator → Item

    @property
    def passed(self) -> bool:
        return all(t.passed for t in self.targets)


def _numbered(topology: str, cands: Candidates, choice: Choice):
    """Designators in the builder's order: R1, R2, … then C1 …, RV1 … (absent parts skipped)."""
    topo = get_topology(topology)
    pick = choice.as_dict()
    placed: list[tuple[str, str, int | None, Item]] = []
    counters = {"R": 0, "C": 0, "RV": 0}
    order = list(topo.ORDER)
    slots = sorted(cands.slots, key=lambda s: (order.index(s.role.name) if s.role.name in order else 99, s.input or 0))
    # Capacitors: inputs first, then bypass, then output (the order of the example in the README).
    cap_order = {"input_cap": 0, "bypass_cap": 1, "output_cap": 2}
    rs = [s for s in slots if s.role.kind == "R"]
    cs = sorted([s for s in slots if s.role.kind == "C"], key=lambda s: (cap_order.get(s.role.name, 9), s.input or 0))
    ps = [s for s in slots if s.role.kind == "POT"]
    for group, prefix in ((rs, "R"), (cs, "C"), (ps, "RV")):
        for s in group:
            it = s.items[pick[s.key]]
            if it.absent:
                continue
            counters[prefix] += 1
            placed.append((f"{prefix}{counters[prefix]}", s.role.name, s.input, it))
    return placed


def design_of(spec: Spec, cands: Candidates, choice: Choice) -> tuple[Design, dict]:
    """The design file a choice stands for (in the spec's conditions)."""
    placed = _numbered(cands.topology, cands, choice)
    parts = tuple(Placed(ref, role, it.value, inp, it.tolerance, it.type, 1.0, "log") for ref, role, inp, it in placed)
    name, ttype = cands.transistors[choice.transistor]
    design = Design(
        topology=cands.topology,
        supply=spec.supply,
        ambient=spec.ambient,
        load=spec.load,
        transistor=name,
        model=ttype.model(),
        sources=tuple(i.source_resistance for i in spec.inputs),
        parts=parts,
        thd_limit=spec.targets.distortion_max,
        level=spec.targets.required_swing(),
        input_names=tuple(i.name for i in spec.inputs),
        spec_path=spec.path,
    )
    return design, {ref: it for ref, _, _, it in placed}


def needs_large_signal(spec) -> bool:
    """Does a target need the large-signal figures (headroom, swing, distortion, an input's
    largest level)?"""
    return spec.targets.required_swing() is not None or any(i.max_level is not None for i in spec.inputs)


def verify(spec: Spec, cands: Candidates, choices: list[Choice], large_signal: bool | None = None) -> list[Verified]:
    """Analyse every choice at every corner (designs of one structure share a batch).

    Large-signal figures (harmonic balance) are found when a target needs them (headroom,
    swing, distortion, an input's largest level) or when ``large_signal`` asks.
    """
    if large_signal is None:
        large_signal = needs_large_signal(spec)
    built = [(c, *design_of(spec, cands, c)) for c in choices]
    groups: dict[tuple, list[int]] = {}
    for i, (c, d, _) in enumerate(built):
        key = (d.transistor, tuple((p.role, p.input) for p in d.parts))
        groups.setdefault(key, []).append(i)
    out: list[Verified | None] = [None] * len(built)
    for idx in groups.values():
        ans = analyse_many([built[i][1] for i in idx], large_signal=large_signal)
        for i, an in zip(idx, ans):
            c, d, items = built[i]
            res = judge(an, spec)
            out[i] = Verified(c, d, an, res, design_margin(res), items)
    return out  # type: ignore[return-value]
