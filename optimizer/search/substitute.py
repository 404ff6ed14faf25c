"""Another transistor type in an existing design: the fewest value changes that meet the spec.

``stagefit check DESIGN --spec SPEC --transistor TYPE`` first analyses the design as it stands
with the new type. When that misses the spec, :func:`fewest_changes` looks for the design
with the new type that keeps as many of the old values as it can, one of two ways:

* **divider-ce with an NPN type** — the CP-SAT relaxation of the topology (which never rules
  out a design that could pass) minimises the number of changed values, and the analysis
  verifies each proposal; a proposal the analysis rejects is cut and the model's optimism
  about the missed targets is learned, as in the search. The first verified design has the
  fewest changes there can be (``proved``) when the solver proved its proposal optimal.
* **every other topology, and PNP types** — level by level: every design with one value
  changed (each resistor or pot through all its candidate values), then two, then three
  (each part's values cut to its nearest ones and the ones that did best changed alone, so a
  level stays under ``LEVEL_ROWS`` designs), goes through the quick screen of the
  neighbourhood search (:class:`~optimizer.search.local._Screen`: every transistor's
  operating point, the 1 kHz figures and the swing at every global corner). The best
  screened of each level are verified in full, and so are the best failing designs of the
  level below with one capacitor changed when only a corner frequency missed. The first
  level with a verified design gives the answer. One change is the fewest there can be (the
  design as it stands was verified to miss); from two on the screen may have passed over a
  design (it leaves out part tolerances and estimates the swing), so the answer is the
  fewest found, not proved. When no level up to ``MAX_CHANGES`` has one, the stage is
  designed afresh with the new type as ``stagefit design`` searches its topology, and every
  value that changes is listed.

When the relaxation ends without an answer or a proof, the second way goes on with the time
left. A type the spec leaves out (``use: stock-only`` and not in the stock list) is taken as
the builder's own: it is what they hold.

Old values that are not among the spec's candidates (another series, out of range) count as
their nearest candidate, and so as changed when the answer is written down.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace

import numpy as np
from ortools.sat.python import cp_model

from ..errors import ConvergenceError
from ..catalog.transistors import transistor_types
from . import clock
from .candidates import Candidates, RoleSlot, build_candidates
from .local import _index_of, _present, _Screen
from .model import S
from .solve import RELAXATION_TOPOLOGIES, _model, _solver, learn_offsets
from .verify import Choice, Verified, verify

__all__ = ["Changes", "fewest_changes"]

#: Levels of the neighbourhood way: designs with 1, 2, then up to this many values changed.
MAX_CHANGES = 3
#: The most designs screened at one level (each part's values are cut to fit).
LEVEL_ROWS = 12_000
#: Designs verified in full at each level, best screened first, in batches of VERIFY_BATCH
#: (a two-transistor stage takes about a second each with its swing at every corner).
VERIFY_PER_LEVEL = 8
VERIFY_BATCH = 2
#: How far (Np) a design's screened margin may fall short and still be verified: the screen
#: leaves out part tolerances (optimistic) and takes 0.8 × the clip limit for the swing
#: (cautious), so a design just under may pass in full.
SCREEN_SLACK = 0.05
#: Targets a coupling or bypass capacitor sets along with the stage: a design missing only
#: these gets one capacitor changed at the next level.
CAP_TARGETS = frozenset({"low cutoff", "high cutoff"})
#: A capacitor's values tried in that step: this many nearest distinct ones.
CAP_VALUES = 8
#: Failing designs of one level carried to the next for the capacitor step.
CARRY = 3


@dataclass
class Changes:
    """The outcome: ``verified`` (a passing design, or None), ``changed`` as (designator,
    old code, new code) triples (a part newly fitted or left out has "—" on that side),
    ``proved`` when no design with fewer changes can pass (with no design: when none can pass
    at all), and a one-line ``note`` (how the answer was found, or why there is none)."""

    verified: Verified | None
    changed: list[tuple[str, str, str]]
    note: str = ""
    proved: bool = False


def _code(p) -> str:
    from ..spec.quantities import format_code

    return format_code(p.value, "capacitance" if p.ref.startswith("C") else "resistance")


def _changed(design, new_design) -> list[tuple[str, str, str]]:
    """(designator, old code, new code) for every part whose value differs, matched by role."""
    have = {(p.role, p.input): p for p in design.parts}
    new = {(p.role, p.input): p for p in new_design.parts}
    out = []
    for key in sorted(set(have) | set(new), key=lambda k: (k[0], k[1] or 0)):
        a, b = have.get(key), new.get(key)
        if a is None or b is None or abs(math.log(a.value / b.value)) > 1e-9:
            out.append(((a or b).ref, _code(a) if a else "—", _code(b) if b else "—"))
    return out


def fewest_changes(spec, design, transistor: str, stock=None, time_limit: float = 60.0, seed: int = 1,
                   wall_limit: float | None | str = "default") -> Changes:
    """The design's values with the fewest changes that meet ``spec`` with ``transistor``
    (the module docstring has the two ways), within ``time_limit`` seconds of the search's
    clock and ``wall_limit`` seconds of wall time (as :func:`~.solve.search`)."""
    with clock.session(clock.wall_bound(time_limit, wall_limit)):
        return _fewest_changes(spec, design, transistor, stock, time_limit, seed)


def _fewest_changes(spec, design, transistor: str, stock, time_limit: float, seed: int) -> Changes:
    sp = replace(spec, parts=replace(spec.parts, transistors=(transistor,)))
    cands = build_candidates(sp, design.topology, stock)
    names = [nm for nm, _ in cands.transistors]
    if transistor not in names:
        # Left out by use: stock-only (not in the stock list): the builder names a type in hand.
        cands = replace(cands, transistors=[*cands.transistors, (transistor, transistor_types()[transistor])])
        names.append(transistor)
    deadline = clock.now() + time_limit
    # The type asked for only (use: stock-first also offers the stock's types).
    one = replace(cands, transistors=[cands.transistors[names.index(transistor)]])
    if design.topology in RELAXATION_TOPOLOGIES and one.transistors[0][1].polarity == "npn":
        got = _by_relaxation(sp, one, design, transistor, deadline, time_limit, seed)
        if got.verified is not None or got.proved or deadline - clock.now() < 2.0:
            return got
        # The relaxation ran out of proposals or time without a proof: the screen, level by
        # level, with the time left.
    return _by_neighbourhood(sp, one, design, transistor, deadline, seed)


def _by_relaxation(sp, cands: Candidates, design, transistor: str, deadline: float, time_limit: float,
                   seed: int) -> Changes:
    """Fewest changes by the relaxation model (divider-ce, NPN)."""
    have = {(p.role, p.input): p for p in design.parts}
    keep: dict[tuple, int] = {}
    for s in cands.slots:
        p = have.get(s.key)
        for i, it in enumerate(s.items):
            if (p is None and it.absent) or (p is not None and not it.absent
                                              and abs(math.log(it.value / p.value)) < 1e-9):
                keep[s.key] = i
                break
    cuts: list[Choice] = []
    offsets: dict[str, float] = {}
    floor = 0.0
    while deadline - clock.now() > 0.5:
        sm = _model(sp, cands, cuts, floor, offsets)
        sm.m.minimize(sum(1 - sm.x[key][i] for key, i in keep.items() if key in sm.x))
        left = deadline - clock.now()
        solver = _solver(seed, left)
        st = clock.run(solver, sm.m)
        if st == cp_model.INFEASIBLE and not cuts:
            return Changes(None, [], f"no design with {transistor} can meet the spec: the relaxation rules out every"
                                     " choice of values (the spec needs another type, or looser targets)", True)
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
            if st == cp_model.OPTIMAL:
                return Changes(v, _changed(design, v.design), "the fewest there can be: the relaxation, which never"
                                                              " rules out a design that could pass, allows none fewer", True)
            return Changes(v, _changed(design, v.design), "the fewest found in the time, not proved")
        # The model was too optimistic about the targets the analysis found missed.
        learn_offsets(offsets, v, math.log(max(solver.value(sm.u.expr), 1) / S), floor)
    return Changes(None, [], f"no design with {transistor} met the spec within {time_limit:g} s of search")


def _verify(sp, cands: Candidates, choices: list[Choice]) -> list[Verified | None]:
    """Each choice verified; None for one whose operating point or swing the analysis cannot
    find (the old values with a type of the other polarity, say: it counts as failing)."""
    try:
        return list(verify(sp, cands, choices))
    except (ConvergenceError, np.linalg.LinAlgError, FloatingPointError):
        if len(choices) == 1:
            return [None]
        return [v for c in choices for v in _verify(sp, cands, [c])]


def _fresh(sp, cands: Candidates, left: float, seed: int) -> list[Verified]:
    """A new design with the one type of ``cands``, searched as ``stagefit design`` searches
    the topology (the relaxation for divider-ce with an NPN type, the neighbourhood model
    otherwise)."""
    from .solve import _search_local, _search_topology

    start = clock.now()
    quiet = lambda _msg: None  # noqa: E731
    if cands.topology in RELAXATION_TOPOLOGIES and cands.transistors[0][1].polarity == "npn":
        return list(_search_topology(sp, cands, 1, start + left, seed, quiet, start).designs)
    return list(_search_local(sp, cands, 1, start + left, seed, quiet, start).designs)


def _values(s: RoleSlot) -> list[float]:
    return sorted({it.value for it in s.items if not it.absent})


def _nearest(vals: list[float], value: float, k: int) -> list[float]:
    return sorted(vals, key=lambda v: (abs(math.log(v / value)), v))[:k]


def _level_values(core: list[RoleSlot], x0: np.ndarray, k: int, helped: list[list[float]]) -> list[list[float]]:
    """Each core part's values other than its own at level k: all of them at level 1; from
    level 2 on as many as keep the level under LEVEL_ROWS designs, half of them the nearest
    and the rest the ones that did best changed alone."""
    others = [[v for v in _values(s) if abs(math.log(v / x)) > 1e-9] for s, x in zip(core, x0)]
    if k == 1:
        return others
    n = max(1, int((LEVEL_ROWS / max(math.comb(len(core), k), 1)) ** (1.0 / k)))
    out = []
    for j, vals in enumerate(others):
        near = _nearest(vals, float(x0[j]), (n + 1) // 2)
        out.append(list(dict.fromkeys(near + [v for v in helped[j] if v in vals]))[:n])
    return out


def _by_neighbourhood(sp, cands: Candidates, design, transistor: str, deadline: float, seed: int) -> Changes:
    """Fewest changes level by level through the quick screen (any topology, either polarity)."""
    t = 0  # the one type of cands
    have = {(p.role, p.input): p for p in design.parts}
    on = {s.key: s.key in have for s in cands.slots if s.role.optional}
    sc = _Screen(sp, cands, on, t)
    base = dict(sc.base_pick)
    for s in cands.slots:
        p = have.get(s.key)
        if p is not None and _present(s, on):
            base[s.key] = _index_of(s, p.value)
    core = sc.core
    caps = [s for s in cands.slots if s.kind == "C" and _present(s, on)]
    x0 = np.array([s.items[base[s.key]].value for s in core])
    t0 = clock.now()
    first = _verify(sp, cands, [Choice.of(base, t)])[0]
    v_cost = clock.now() - t0  # the longest verification of one design so far (s)
    if first is not None and first.passed:
        return Changes(first, _changed(design, first.design), "the design's values (as the spec's candidates) pass")
    carried: list[tuple[dict, Verified | None]] = [(base, first)]
    helped: list[list[float]] = [[] for _ in core]
    for k in range(1, MAX_CHANGES + 1):
        if clock.now() > deadline:
            break
        vals = _level_values(core, x0, k, helped)
        rows = [(js, vs) for js in itertools.combinations(range(len(core)), k)
                for vs in itertools.product(*(vals[j] for j in js))]
        X = np.repeat(x0[None, :], len(rows), axis=0)
        for r, (js, vs) in enumerate(rows):
            X[r, list(js)] = vs
        m = sc.margins(X, keep=2 * VERIFY_PER_LEVEL) if rows else np.zeros(0)
        if k == 1:  # each part's values, best first, for the levels above
            for j in range(len(core)):
                mine = [(float(m[r]), rows[r][1][0]) for r in range(len(rows)) if rows[r][0] == (j,)]
                helped[j] = [v for _, v in sorted(mine, key=lambda q: -q[0])]
        picks: list[dict] = []
        for r in np.argsort(-m, kind="stable"):
            if m[r] < -SCREEN_SLACK or len(picks) >= VERIFY_PER_LEVEL:
                break
            p2 = dict(base)
            for j, v in zip(*rows[r]):
                p2[core[j].key] = _index_of(core[j], v)
            if cands.stock_ok(p2):
                picks.append(p2)
        # One capacitor changed in the best failing designs of the level below that missed only
        # on a corner frequency.
        for pick, v in carried:
            if v is None or not {x.name for x in v.targets if not x.passed} <= CAP_TARGETS:
                continue
            for s in caps:
                own = s.items[pick[s.key]].value
                for cv in _nearest(_values(s), own, CAP_VALUES + 1):
                    if abs(math.log(cv / own)) > 1e-9:
                        p2 = dict(pick)
                        p2[s.key] = _index_of(s, cv)
                        if cands.stock_ok(p2):
                            picks.append(p2)
        tried: list[tuple[dict, Verified | None]] = []
        for a in range(0, len(picks), VERIFY_BATCH):
            batch = picks[a:a + VERIFY_BATCH]
            if clock.now() + v_cost * len(batch) > deadline:
                break
            t0 = clock.now()
            checked = _verify(sp, cands, [Choice.of(p, t) for p in batch])
            v_cost = max(v_cost, (clock.now() - t0) / len(batch))
            tried += [(p, v) for p, v in zip(batch, checked) if v is not None]
            good = [v for v in checked if v is not None and v.passed]
            if not good:
                continue
            best = max(good, key=lambda v: v.margin)
            if k == 1:  # the design as it stands was verified to miss: one is the fewest there can be
                return Changes(best, _changed(design, best.design),
                               "one value changed, the fewest there can be: the design as it stands misses", True)
            return Changes(best, _changed(design, best.design),
                           "the fewest found, not proved: every single change was screened, and pairs and triples"
                           " among each part's nearest values and the ones that helped most alone; none with"
                           " fewer changes passed")
        carried = sorted(tried, key=lambda pv: -pv[1].margin)[:CARRY]
    left = deadline - clock.now()
    fresh = ""
    if left > 2.0:
        t0 = clock.now()
        found = _fresh(sp, cands, left, seed)
        if found:
            v = found[0]
            return Changes(v, _changed(design, v.design),
                           f"no change of up to {MAX_CHANGES} values was found to pass: a new design with {transistor}")
        fresh = f", nor a new design in {clock.now() - t0:.0f} s of search"
    return Changes(None, [], f"no design with {transistor} found: no change of up to {MAX_CHANGES} values passed{fresh}"
                             f" (not a proof; stagefit design with transistors: [{transistor}] and topology:"
                             f" {design.topology} searches longer)")
