"""Exhaustive enumeration: every design of a (small) candidate space, judged by the analysis.

The reference the search is compared with in the tests and the benchmarks: it uses the same
candidates, the same capacitor sizing rule and the same analysis and targets, and no solver.
Only practical for small spaces (thousands to about a hundred thousand designs).
"""

from __future__ import annotations

import itertools

from ..analysis.evaluate import analyse_many
from ..analysis.targets import design_margin, judge
from .candidates import Candidates
from .model import sizing_rule_ok
from .verify import Choice, Verified, design_of

__all__ = ["enumerate_designs", "space_size"]


def _choices(spec, cands: Candidates):
    keys = [s.key for s in cands.slots]
    ranges = [range(len(s.items)) for s in cands.slots]
    sources = [i.source_resistance for i in spec.inputs]
    for tr in range(len(cands.transistors)):
        for combo in itertools.product(*ranges):
            pick = dict(zip(keys, combo))
            if ("bypass_cap", None) in pick:
                if (pick[("emitter_bypassed", None)] == 0) != (pick[("bypass_cap", None)] == 0):
                    continue
            parts = {}
            for s in cands.slots:
                it = s.items[pick[s.key]]
                if not it.absent:
                    parts[s.key] = (it.value, it.tolerance)
            if not sizing_rule_ok(spec, parts, sources):
                continue
            if cands.stock is not None and not cands.stock_ok(pick):
                continue
            yield Choice.of(pick, tr)


def space_size(spec, cands: Candidates) -> int:
    """How many designs the enumeration would analyse."""
    return sum(1 for _ in _choices(spec, cands))


def enumerate_designs(spec, cands: Candidates, chunk: int = 400, large_signal: bool = False) -> list[Verified]:
    """Analyse every design; return them all, best margin first."""
    out: list[Verified] = []
    batch: list[Choice] = []

    def flush():
        built = [(ch, *design_of(spec, cands, ch)) for ch in batch]
        groups: dict[tuple, list[int]] = {}
        for i, (_, d, _) in enumerate(built):
            groups.setdefault((d.transistor, tuple((p.role, p.input) for p in d.parts)), []).append(i)
        for idx in groups.values():
            ans = analyse_many([built[i][1] for i in idx], large_signal=large_signal)
            for i, an in zip(idx, ans):
                ch, d, items = built[i]
                res = judge(an, spec)
                out.append(Verified(ch, d, an, res, design_margin(res), items))
        batch.clear()

    for ch in _choices(spec, cands):
        batch.append(ch)
        if len(batch) >= chunk:
            flush()
    if batch:
        flush()
    out.sort(key=lambda v: -v.margin)
    return out
