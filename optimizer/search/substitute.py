"""Another transistor type in an existing design: the fewest value changes that meet the spec.

``stagefit check DESIGN --spec SPEC --transistor TYPE`` first analyses the design as it stands
with the new type. When that misses the spec, :func:`fewest_changes` asks the CP-SAT
relaxation of the topology (divider-ce only) for a design with the new type that keeps as many
of the old values as it can, and has the analysis verify each proposal; a proposal the analysis
rejects is cut and the model's optimism about the missed targets is learned, as in the search.
The answer is the first verified design, with the parts whose values changed.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace

from ortools.sat.python import cp_model

from .candidates import build_candidates
from .model import S
from .solve import RELAXATION_TOPOLOGIES, _model, _solver, learn_offsets
from .verify import Choice, Verified, verify

__all__ = ["Changes", "fewest_changes"]


@dataclass
class Changes:
    """The outcome: ``verified`` (a passing design, or None), ``changed`` as (designator,
    old code, new code) triples (a part newly fitted or left out has "—" on that side), and
    a one-line ``note`` when nothing was found or the topology has no relaxation."""

    verified: Verified | None
    changed: list[tuple[str, str, str]]
    note: str = ""


def _code(p) -> str:
    from ..spec.quantities import format_code

    return format_code(p.value, "capacitance" if p.ref.startswith("C") else "resistance")


def fewest_changes(spec, design, transistor: str, stock=None, time_limit: float = 20.0, seed: int = 1) -> Changes:
    """The design's values with the fewest changes that meet ``spec`` with ``transistor``."""
    if design.topology not in RELAXATION_TOPOLOGIES:
        return Changes(None, [], f"finding the values to change is done for {', '.join(RELAXATION_TOPOLOGIES)} only;"
                                 f" run stagefit design with transistors: [{transistor}] and topology: {design.topology}")
    sp = replace(spec, parts=replace(spec.parts, transistors=(transistor,)))
    cands = build_candidates(sp, design.topology, stock)
    have = {(p.role, p.input): p for p in design.parts}
    keep: dict[tuple, int] = {}
    for s in cands.slots:
        p = have.get(s.key)
        for i, it in enumerate(s.items):
            if (p is None and it.absent) or (p is not None and not it.absent
                                              and abs(math.log(it.value / p.value)) < 1e-9):
                keep[s.key] = i
                break
    names = [nm for nm, _ in cands.transistors]
    if transistor not in names:
        return Changes(None, [], f"{transistor} is not among the spec's transistor types or the stock's")
    if dict(cands.transistors)[transistor].polarity != "npn":
        return Changes(None, [], f"{transistor} is PNP: the values to change are found for NPN types only; run"
                                 f" stagefit design with transistors: [{transistor}]")
    deadline = time.monotonic() + time_limit
    cuts: list[Choice] = []
    offsets: dict[str, float] = {}
    floor = 0.0
    while deadline - time.monotonic() > 0.5:
        sm = _model(sp, cands, cuts, floor, offsets)
        sm.m.add(sm.tr[names.index(transistor)] == 1)  # the stock may offer other types too
        sm.m.minimize(sum(1 - sm.x[key][i] for key, i in keep.items() if key in sm.x))
        left = deadline - time.monotonic()
        solver = _solver(seed, left, left)
        st = solver.solve(sm.m)
        if st == cp_model.INFEASIBLE and not cuts:
            return Changes(None, [], f"no design with {transistor} can meet the spec: the relaxation rules out every"
                                     " choice of values (the spec needs another type, or looser targets)")
        if st == cp_model.INFEASIBLE:
            return Changes(None, [], f"no design with {transistor} found: {len(cuts)} proposal(s) failed the analysis"
                                     " and the model has nothing more to offer (not a proof: try stagefit design)")
        if st not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            break
        pick, tr = sm.chosen(solver.boolean_value)
        ch = Choice.of(pick, tr)
        cuts.append(ch)
        v = verify(sp, cands, [ch])[0]
        if v.margin >= 0:
            new = {(p.role, p.input): p for p in v.design.parts}
            changed = []
            for key in sorted(set(have) | set(new), key=lambda k: (k[0], k[1] or 0)):
                a, b = have.get(key), new.get(key)
                if a is None or b is None or abs(math.log(a.value / b.value)) > 1e-9:
                    changed.append(((a or b).ref, _code(a) if a else "—", _code(b) if b else "—"))
            return Changes(v, changed)
        # The model was too optimistic about the targets the analysis found missed.
        learn_offsets(offsets, v, math.log(max(solver.value(sm.u.expr), 1) / S), floor)
    return Changes(None, [], f"no design with {transistor} met the spec within {time_limit:g} s of search")
