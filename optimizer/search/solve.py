"""The search: propose with CP-SAT, verify with the analysis, cut, repeat.

1. The relaxation (:class:`~optimizer.search.model.StageModel`) is asked for designs with
   every target met at margin ≥ 0 (proposals with each target tightened by a learned offset).
   When the relaxation itself (no offsets) has no design left that was not tried and failed —
   confirmed a second time with presolve set the other way, since the solver has known
   wrong-answer bugs —
   no design can meet the spec, and the answer names the conflicting targets
   (:mod:`optimizer.search.explain`).
2. Each round the model maximises the common margin (with the offsets) above a floor: the
   best verified margin so far plus ``TIE``. The last few improving solutions of the round
   are analysed in full at every corner, together; the analysis' margin decides. Verified
   designs are cut from the model, and the offsets learn how optimistic the model was.
3. When the relaxation proves that no unseen design can beat the best verified margin
   (within ``TIE``), the best is **optimal**; the search goes on for the top K, asking only
   for designs that could beat the K-th best. When time runs out first the status is
   **feasible** (or **unknown** when no design passed yet).
4. The end: among designs as good as the best, the simplest (fewest parts, BOM lines, parts
   to buy); the smallest capacitors that keep each design's margin; parts in stock swapped
   in for bought ones of the same value. Each change is verified again before it is kept.

Determinism: one worker, a fixed seed and a deterministic-time limit for every solve, a
unique tie-break in the objective, and a total order for the ranking.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

from ortools.sat.python import cp_model

from ..spec.specfile import Spec
from ..spec.stockfile import Stock
from . import clock
from .candidates import Candidates, build_candidates
from .model import S, StageModel
from .verify import Choice, Verified, needs_large_signal, verify

__all__ = ["SearchResult", "search", "TIE", "rank", "rank_key"]

_WORKERS = 1

#: Margins closer than this count as equal, so simpler designs win ties.
TIE = 0.005
#: How many of the solutions found in one solve are verified.
VERIFY_PER_ROUND = 4
#: Seconds of the search's clock one verification is taken to cost until one has been timed
#: (measured on the growth benchmark's mixer: two-input designs 0.5 to 1.0 s each, one-input
#: ones 1.8 s each in a batch of four).
PRIOR_VERIFY_SECONDS = 1.5
#: Targets the capacitors hardly touch once they meet the sizing rule (X ≤ ρ·R at 1 kHz),
#: with how much they can move them at most (nepers). A design that misses one of these by
#: more than that fails for its resistors and transistor alone, so all its capacitor
#: variants are cut at once.
CAP_INSENSITIVE = {"gain": 0.02, "headroom": 0.03, "distortion": 0.06, "supply current": 0.0,
                   "active region": 0.0, "input impedance": 0.01, "output impedance": 0.01}

#: Starting offsets (nepers) by which proposals tighten each target: about how optimistic
#: the model is on typical designs (measured on the bundled specs); learned further as the
#: search verifies designs.
PRIOR_OFFSET = {"gain": 0.05, "headroom": 0.2, "low cutoff": 0.2, "input impedance": 0.1,
                "supply current": 0.05, "output impedance": 0.05}
_MODEL_TARGETS = ("gain", "headroom", "input impedance", "output impedance", "low cutoff", "supply current",
                  "active region")
_MODEL_TARGET = {"distortion": "headroom", "swing": "headroom"}


@dataclass
class SearchResult:
    """What a search found."""

    status: str  # "optimal", "feasible", "infeasible" or "unknown" (time ran out with nothing found)
    designs: list[Verified]
    topology: str
    bound: float | None = None  # no design not listed can have a margin above this
    conflicts: list = field(default_factory=list)
    near_misses: list[Verified] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    stats: dict = field(default_factory=dict)
    candidates: Candidates | None = None
    #: What a bound needs of a relaxation search: its verified cuts, core cuts and the
    #: largest margin it verified (None for the other searches).
    relaxation: tuple | None = field(default=None, repr=False)


def _simplicity(v: Verified) -> tuple:
    """Parts, BOM lines, parts to buy, money to spend, capacitor size, then values (a total order)."""
    parts = len(v.design.parts) + 1
    lines = len({(p.ref.rstrip("0123456789"), round(p.value, 15)) for p in v.design.parts}) + 1
    bought = sum(1 for it in v.items.values() if it.source != "stock")
    cost = round(sum(it.price or 0.0 for it in v.items.values() if it.source != "stock"), 6)
    capsize = round(sum(math.log10(p.value) + 12 for p in v.design.parts if p.ref.startswith("C")), 9)
    values = tuple(round(p.value, 15) for p in v.design.parts)
    return (parts, lines, bought, cost, capsize, v.design.transistor, values)


def rank_key(v: Verified):
    """A quick order: margin in steps of TIE, then simplicity (see :func:`rank` for the reported one)."""
    m = v.margin if math.isfinite(v.margin) else (-1e9 if v.margin < 0 else 1e9)
    return (-math.floor(m / TIE), *_simplicity(v))


def rank(vs: list[Verified]) -> list[Verified]:
    """The reported ranking.

    Designs whose margins are within TIE of the best count as equally good and are ordered by
    simplicity: fewest parts, then fewest BOM lines, fewest parts to buy, least money, smallest
    capacitors. The rest are ranked the same way against the best of those left.
    """
    left = sorted(vs, key=lambda v: (-v.margin, _simplicity(v)))
    out = []
    while left:
        lead = left[0].margin
        group = [v for v in left if v.margin >= lead - TIE]
        left = [v for v in left if v.margin < lead - TIE]
        out += sorted(group, key=_simplicity)
    return out


class _Collector(cp_model.CpSolverSolutionCallback):
    def __init__(self, sm: StageModel, limit: int = 50):
        super().__init__()
        self.sm = sm
        self.found: list[tuple[int, Choice]] = []
        self.limit = limit

    def on_solution_callback(self) -> None:
        pick, tr = self.sm.chosen(self.boolean_value)
        self.found.append((self.value(self.sm.u.expr), Choice.of(pick, tr)))
        if len(self.found) > self.limit:
            self.found.pop(0)


def _solver(seed: int, seconds: float, presolve: bool = False) -> cp_model.CpSolver:
    """One worker, a fixed seed and ``seconds`` of the search's clock as deterministic time
    (:mod:`.clock`): the same answer every run.

    Presolve is off by default: on these models it costs more than it saves (measured on
    the bundled specs); an infeasibility is always confirmed with the other setting too.
    """
    s = cp_model.CpSolver()
    s.parameters.num_workers = _WORKERS
    s.parameters.random_seed = seed
    clock.limit(s.parameters, max(seconds, 0.05))
    s.parameters.linearization_level = 0
    s.parameters.cp_model_presolve = presolve
    return s


def _model(spec: Spec, cands: Candidates, cuts: list[Choice], floor: float | None, offsets=None,
           core_cuts: list[Choice] = ()) -> StageModel:
    sm = StageModel(spec, cands, offset=offsets)
    for lit in sm.on.values():
        sm.m.add(lit == 1)
    for ch in cuts:
        sm.forbid(ch.as_dict(), ch.transistor)
    for ch in core_cuts:
        sm.forbid_core(ch.as_dict(), ch.transistor)
    if floor is not None:
        sm.m.add(sm.u.expr >= int(math.ceil(S * math.exp(floor))))
    return sm


def search(
    spec: Spec,
    stock: Stock | None = None,
    top: int | None = None,
    time_limit: float | None = None,
    seed: int | None = None,
    progress=None,
    workers: int = 1,
    wall_limit: float | None | str = "default",
) -> SearchResult:
    """Find the best designs of the spec (see the module docstring).

    Parameters
    ----------
    spec
        The spec.
    stock
        A stock list (overrides the spec's).
    top, time_limit, seed
        Override the spec's ``search`` settings. ``time_limit`` is seconds of work on the
        search's clock (:mod:`.clock`), the same however fast the machine.
    progress
        Called with a short text as the search goes (for a terminal), or None.
    workers
        Solver workers. With more than one the solver's own path varies from run to run; the
        answer is the same whenever it is proved (the ranking is a total order).
    wall_limit
        Seconds of wall time after which the search stops whatever its clock says (by
        default four times the time limit, :data:`.clock.WALL_FACTOR`; None for no bound, which
        makes the answer the same however slow the machine).
    """
    time_limit = time_limit if time_limit is not None else spec.search.time_limit
    with clock.session(clock.wall_bound(time_limit, wall_limit)):
        r = _search(spec, stock, top, time_limit, seed, progress, workers)
    if clock.cut_short():
        r.notes.append("the wall clock ran out before the work budget (this machine is slower than the"
                       " one the clock was measured on): a faster machine may give another answer")
    return r


def _search(spec, stock, top, time_limit, seed, progress, workers) -> SearchResult:
    global _WORKERS
    _WORKERS = max(1, int(workers))
    top = top or spec.search.top
    seed = spec.search.seed if seed is None else seed
    say = progress or (lambda _msg: None)
    start = clock.now()
    deadline = start + time_limit
    results = []
    topologies = list(spec.topologies)
    all_cands = {t: build_candidates(spec, t, stock) for t in topologies}
    kept = {nm for c in all_cands.values() for nm, _ in c.transistors}
    skipped = [f"{nm}: listed under parts.transistors but not in the stock list, so use: stock-only leaves it out"
               for nm in dict.fromkeys(spec.parts.transistors) if nm not in kept]
    score = {}
    if len(topologies) > 1:
        topologies, left_out, score = _share_out(spec, all_cands, seed, say)
        skipped += left_out
    # The relaxation's topologies (which can prove what they find) get half the time, unless
    # the quick look puts them well behind another.
    others = sum(1 for t in topologies if t not in RELAXATION_TOPOLOGIES)
    top_score = max(score.values(), default=0.0)
    weights = [max(others, 1) if t in RELAXATION_TOPOLOGIES and score.get(t, 0.0) >= top_score - 0.3 else 1.0
               for t in topologies]
    for n, topology in enumerate(topologies):
        cands = all_cands[topology]
        say(f"{topology}: {len(cands.slots)} parts to choose, {cands.size():.3g} combinations")
        # Each topology gets its weighted share of the time left (one that finishes early
        # leaves its time to the rest).
        share = clock.now() + (deadline - clock.now()) * weights[n] / sum(weights[n:])
        if topology in RELAXATION_TOPOLOGIES:
            # The relaxation encodes the NPN stage only; PNP types of the same topology go to
            # the neighbourhood table model (a third of the time when both kinds are listed).
            npn = [t for t in cands.transistors if t[1].polarity == "npn"]
            pnp = [t for t in cands.transistors if t[1].polarity != "npn"]
            if npn:
                end = share if not pnp else clock.now() + (share - clock.now()) * 2 / 3
                results.append(_search_topology(spec, replace(cands, transistors=npn), top, end, seed, say, start))
            if pnp:
                r = _search_local(spec, replace(cands, transistors=pnp), top, share, seed, say, start)
                if npn:
                    r.topology = f"{topology} (PNP)"
                results.append(r)
        else:
            results.append(_search_local(spec, cands, top, share, seed, say, start))
    # Across topologies: the best designs of all, ranked together.
    if len(results) == 1 and len(topologies) == len(spec.topologies):
        r = results[0]
        if r.status == "feasible" and r.relaxation is not None:
            r.bound = _feasible_bound(spec, r, seed, deadline)
        r.notes += skipped
        return r
    designs = rank([d for r in results for d in r.designs])[:top]
    statuses = [r.status for r in results]
    if all(s == "infeasible" for s in statuses):
        status = "infeasible"
    elif not designs:
        status = "unknown"
    elif all(s in ("optimal", "infeasible") for s in statuses):
        status = "optimal"
    else:
        status = "feasible"
    # A bound holds for the whole answer only when every topology searched has one (a
    # topology the neighbourhood model searched, or one cut short, bounds nothing).
    bounds = [r.bound for r in results]
    merged = SearchResult(status, designs, "+".join(r.topology for r in results),
                          bound=max(bounds) if bounds and None not in bounds else None,
                          conflicts=[replace(c, text=f"{r.topology}: {c.text}") for r in results for c in r.conflicts],
                          near_misses=sorted([d for r in results for d in r.near_misses], key=rank_key)[:3])
    for r in results:
        merged.notes += [n if n.startswith(r.topology + ":") else f"{r.topology}: {n}" for n in r.notes]
        if r.status == "infeasible":
            merged.notes.append(f"{r.topology}: no design can meet every target"
                                + (": " + " — or — ".join(c.text for c in r.conflicts[:2]) if r.conflicts else ""))
    merged.notes += skipped
    merged.stats = {r.topology: {"status": r.status, **r.stats} for r in results}
    if designs:
        won = designs[0].design.topology
        merged.notes.insert(0, f"best topology: {won}")
    return merged


#: A topology whose quick look is this far (nepers) behind the best one's is not searched.
HOPELESS = 0.7
#: How many topologies besides the relaxation's are searched in depth.
LOCAL_TOPOLOGIES = 2


def _share_out(spec, all_cands, seed, say) -> tuple[list[str], list[str], dict[str, float]]:
    """The topologies to search, notes on those left out, and each one's quick-look score."""
    from .local import triage

    score = {}
    for t, c in all_cands.items():
        try:
            score[t] = triage(spec, c, seed)
        except Exception as exc:  # a topology the quick look cannot handle is still searched
            say(f"{t}: quick look failed ({type(exc).__name__}); searched anyway")
            score[t] = 0.0
        say(f"{t}: quick look, best margin {score[t]:+.3f}")
    best = max(score.values())
    # The relaxation's topologies are always searched (they can prove what they find); of the
    # others, the LOCAL_TOPOLOGIES best on the quick look that are not hopeless.
    order = sorted((t for t in all_cands if t not in RELAXATION_TOPOLOGIES), key=lambda t: -score[t])
    local = [t for t in order if score[t] >= min(best - HOPELESS, 0.0)][:LOCAL_TOPOLOGIES]
    keep = [t for t in all_cands if t in RELAXATION_TOPOLOGIES or t in local]
    notes = [f"{t}: left out after a quick look (best margin {score[t]:+.2f} against {best:+.2f} for"
             f" {max(score, key=score.get)}); pin it with topology: {t} to search it anyway"
             for t in all_cands if t not in keep]
    return keep, notes, score


#: Topologies the CP-SAT relaxation (:class:`StageModel`) encodes; the others are searched
#: by the neighbourhood table model (:mod:`optimizer.search.local`).
RELAXATION_TOPOLOGIES = ("divider-ce",)


def _search_local(spec: Spec, cands: Candidates, top: int, deadline: float, seed: int, say, start) -> SearchResult:
    from .local import local_search

    got = local_search(spec, cands, top, deadline, seed, say)
    designs = _distinct(rank(got["designs"]))[:top]
    designs = _finish(spec, cands, designs, stock_swap=clock.now() < deadline)
    status = "feasible" if designs else "unknown"
    notes = list(got["notes"])
    if not designs:
        notes.append("no design of this topology passed every target in the time given; nothing is proved either way")
    stats = dict(got["stats"])
    stats["work_seconds"] = round(clock.counted() - start, 2)
    return SearchResult(status, designs, cands.topology, near_misses=got["failed"], notes=notes, stats=stats,
                        candidates=cands)


def _search_topology(spec: Spec, cands: Candidates, top: int, deadline: float, seed: int, say, start) -> SearchResult:
    stats = {"solves": 0, "verified": 0}
    left = lambda: deadline - clock.now()  # noqa: E731

    verified: list[Verified] = []
    failed: list[Verified] = []
    cuts: list[Choice] = []
    # The cuts of designs that were verified (the same values): only these may leave a design
    # out of a proof. The proposals' model also cuts the other solutions a solve found, so
    # that it moves on; a proof that fails for one of those puts them back.
    vcuts: list[Choice] = []
    # Proposals come from the model with each target's limits made stricter by an offset
    # learned from the analysis (the model is optimistic; the offsets absorb how much).
    # Only the model without offsets proves anything.
    offsets = dict(PRIOR_OFFSET)
    # Several coupling capacitors add their corners (the whole response's −3 dB point is at
    # least the root-sum-square of theirs): start the low-cutoff offset at ln √n.
    n_caps = sum(1 for s_ in cands.slots if s_.role.kind == "C")
    offsets["low cutoff"] = max(offsets["low cutoff"], 0.5 * math.log(max(n_caps, 1)))
    status, bound = "feasible", None
    best = None
    rounds = 0
    hint = None
    seen: set = set()
    core_cuts: list[Choice] = []
    best_proved = topk_proved = False
    chunk = max(2.0, (deadline - clock.now()) / 8)
    # Keep back time for the polish and for the large-signal figures of the reported designs.
    reserve = 0.15 * (deadline - clock.now()) + (2.0 * top if not needs_large_signal(spec) else 0.5 * top)
    # But never more than 60 % of the limit: a short limit on a small spec still searches (with
    # 5 s, the 6 s kept for three designs left tiny2 no time at all, where 0.4 s proves it).
    reserve = min(reserve, 0.6 * (deadline - clock.now()))
    polish_at = deadline - 0.2 * (deadline - clock.now())
    loop_end = deadline - reserve
    per_design = 0.0  # the longest verification seen, seconds per design

    def final_need() -> float:
        # Time the end needs (with a third to spare): the polish (a solve of up to 2 s and one
        # verification), the capacitor trim (a short solve and a verification per design)
        # and re-verifying the reported designs with stock parts swapped in. It must cover
        # what the trim asks for below once the polish has run, or the trim is skipped.
        n = min(top, len(_passing(verified)))
        return 1.3 * (per_design * (2 * n + 2) + (n + 1) * 1.0 + 2.0) if n else 0.0

    while (clock.now() < min(loop_end, deadline - final_need())
           and (best is None or clock.now() < polish_at)):
        rounds += 1
        # Phase 1: something better than the best so far. Phase 2 (once the best is proved):
        # something that could still enter the top K, above the K-th best verified.
        good = sorted(_passing(verified), key=lambda v: -v.margin)
        if not best_proved:
            floor = 0.0 if best is None else best + TIE
        else:
            floor = 0.0 if len(good) < top else good[top - 1].margin + TIE
        sm = _model(spec, cands, cuts, floor, offsets, core_cuts)
        if hint is not None:
            sm.hint(hint)
        # The proposal with the most model margin (within the time of one chunk), so the
        # floor climbs in large steps and proposals sit away from the model's edges; the last
        # few improving solutions are verified together.
        sm.m.maximize(sm.u.expr)
        budget = max(min(loop_end, deadline - final_need()) - clock.now(), 0.1)
        solver = _solver(seed, min(budget, chunk))
        coll = _Collector(sm, limit=VERIFY_PER_ROUND * 4)
        st = clock.run(solver, sm.m, coll)
        stats["solves"] += 1
        relaxed = not any(v > 0.002 for v in offsets.values())
        if st == cp_model.INFEASIBLE:
            complete = len(vcuts) == len(cuts)
            proved = (relaxed and complete) or _proved_none_above(spec, cands, vcuts, floor, seed, left, chunk,
                                                                  core_cuts)
            presolved = False
            if proved is None and best is None:
                # Out of time without presolve, and nothing passed yet: presolve often settles
                # an impossible spec at once (a 5 V stage asked 30 dB with 7.5 dB of headroom:
                # 0.8 s with it, 5.5 s without); the other setting then confirms.
                proved = _proved_none_above(spec, cands, vcuts, floor, seed, left, chunk, core_cuts, presolve=True)
                presolved = bool(proved)
            if not proved and relaxed and not complete:
                cuts = list(vcuts)  # a design cut unseen may reach the floor: put them back
                continue
            if proved:
                if best is None:
                    # No design can meet every target (none not yet tried can, and every one
                    # tried failed): confirmed a second way (presolve on when it was proved
                    # without, off when with), since the solver has known wrong-answer bugs.
                    first, other = ("on", "off") if presolved else ("off", "on")
                    say(f"no design can meet every target; confirming with presolve {other}")
                    sm2 = _model(spec, cands, vcuts, 0.0, None, core_cuts)
                    st2 = clock.run(_solver(seed, min(max(left(), 5.0), 20.0), presolve=not presolved), sm2.m)
                    stats["solves"] += 1
                    if st2 != cp_model.INFEASIBLE:
                        why = (f"the solver's two answers disagreed (infeasible with presolve {first}, not with it {other})"
                               if st2 in (cp_model.OPTIMAL, cp_model.FEASIBLE) else
                               "time ran out while confirming that no design can meet the spec")
                        return SearchResult("unknown", [], cands.topology, stats=stats, candidates=cands,
                                            near_misses=sorted(failed, key=rank_key)[:3],
                                            notes=[why + "; nothing is claimed"])
                    from .explain import explain

                    conflicts = explain(spec, cands, seed, deadline)
                    notes = ["proved infeasible twice (without and with presolve)"]
                    if not conflicts:
                        notes.append("which targets conflict was not found in the time left (a longer "
                                     "--time-limit leaves more)")
                    return SearchResult("infeasible", [], cands.topology, bound=0.0, conflicts=conflicts,
                                        stats=stats, candidates=cands, near_misses=sorted(failed, key=rank_key)[:3],
                                        notes=notes)
                if not best_proved:
                    best_proved, bound, status = True, floor, "optimal"
                    if top > 1:
                        continue
                topk_proved = True
                break
            offsets = {k: v / 2 for k, v in offsets.items()}
            continue
        if st not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            if relaxed:
                break
            offsets = {k: v / 2 for k, v in offsets.items()}
            continue
        proposals = []
        # No more verifications than fit before the deadline (at least one), so that a short
        # time limit is not overrun by a whole round's.
        fits = int((deadline - clock.now()) / (per_design or PRIOR_VERIFY_SECONDS))
        per_round = min(VERIFY_PER_ROUND, max(fits, 1))
        for u, ch in reversed(coll.found):  # best first
            cuts.append(ch)
            key = _values_key(cands, ch)
            if key in seen:
                vcuts.append(ch)  # the same values were verified: the margin is known
                continue
            if len(proposals) >= per_round:
                continue  # cut unseen (steering only: a proof leaves it out of its cuts)
            seen.add(key)
            vcuts.append(ch)
            proposals.append((u, ch))
        if not proposals:
            continue
        t_v = clock.now()
        checked = verify(spec, cands, [ch for _, ch in proposals])
        per_design = max(per_design, (clock.now() - t_v) / len(proposals))
        for (u, ch), v in zip(proposals, checked):
            (verified if v.margin >= 0 else failed).append(v)
            stats["verified"] += 1
            # Missed for the resistors and transistor alone: no capacitor choice can save it.
            if any(tr.margin < -CAP_INSENSITIVE[tr.name] for tr in v.targets if tr.name in CAP_INSENSITIVE
                   and tr.margin < min(floor, 0.0)):
                core_cuts.append(ch)
        # How optimistic the model was, from the proposal it liked best.
        (u, ch), v = proposals[0], checked[0]
        learn_offsets(offsets, v, math.log(u / S), floor)
        v = max(checked, key=lambda x: x.margin)
        hint = ch
        best = max((v.margin for v in _passing(verified)), default=None)
        say(f"round {rounds}: verified {stats['verified']} designs, best margin "
            + ("none yet" if best is None else f"{best:.3f}") + f" (this round {len(checked)}, best {v.margin:.3f})")
    if best is not None and left() > final_need():
        # Among designs as good as the best (within TIE), the simplest: fewest parts, BOM
        # lines and parts to buy.
        v = _polish(spec, cands, best, offsets, seed, max(min(2.0, left() - final_need()), 0.2), stats)
        if v is not None:
            (verified if v.margin >= 0 else failed).append(v)
    good = _distinct(rank(_passing(verified)))
    designs = good[:top]
    untrimmed = False
    if designs and left() > 1.3 * len(designs) * (2 * per_design + 1.0):
        designs, trimmed = _trim_capacitors(spec, cands, designs, offsets, seed, left,
                                            lambda: 1.3 * len(designs) * per_design, stats)
        untrimmed = not trimmed
    elif designs:
        untrimmed = True
    designs = _finish(spec, cands, designs)
    if status == "feasible" and not designs:
        status = "unknown"
    notes = [UNTRIMMED] if untrimmed else []
    if status == "unknown":
        notes.append("time limit reached before any design passed every target; nothing is proved either way"
                     " (try a longer --time-limit)")
    if status == "feasible":
        notes.append("time limit reached: the designs are the best verified so far")
    elif status == "optimal":
        notes.append("the first design is proved best" + (
            f"; the top {len(designs)} are proved the best {len(designs)}" if topk_proved and len(designs) > 1 else
            "" if len(designs) == 1 else "; the others are the next best verified"))
    stats["work_seconds"] = round(clock.counted() - start, 2)
    stats["offsets"] = {k: round(v, 3) for k, v in offsets.items()}
    res = SearchResult(status, designs, cands.topology, bound=bound, near_misses=sorted(failed, key=rank_key)[:3],
                       notes=notes, stats=stats, candidates=cands,
                       relaxation=(list(vcuts), list(core_cuts), max((v.margin for v in verified + failed),
                                                                     default=-math.inf)))
    return res


#: The longest the relaxation is solved for a time-limited answer's bound (seconds of the
#: clock; only what is left of the limit is used).
BOUND_SECONDS = 0.5


def _feasible_bound(spec, r: SearchResult, seed: int, deadline: float) -> float | None:
    """For an answer the time limit cut short: a margin no unlisted design can exceed.

    The relaxation (no offsets, only the cuts of verified designs) is solved for its largest
    margin in the time left; its proven objective bound covers every design it was not cut
    from, and every cut one was verified. None when no time is left or the solver says
    nothing (an infeasible relaxation is not taken on one solve's word)."""
    left = deadline - clock.now()
    if left < 0.2:
        return None
    vcuts, core_cuts, verified_best = r.relaxation
    sm = _model(spec, r.candidates, vcuts, None, None, core_cuts)
    sm.m.maximize(sm.u.expr)
    solver = _solver(seed, min(left, BOUND_SECONDS))
    st = clock.run(solver, sm.m)
    r.stats["solves"] = r.stats.get("solves", 0) + 1
    if st not in (cp_model.OPTIMAL, cp_model.FEASIBLE, cp_model.UNKNOWN):
        return None
    relax = math.log(max(solver.best_objective_bound, 1.0) / S)
    return max(relax, verified_best, *(d.margin for d in r.designs))


def learn_offsets(offsets: dict[str, float], v: Verified, t_m: float, floor: float) -> None:
    """Raise ``offsets`` (per model target) for each target the verified design ``v`` missed
    the margin ``floor`` on, by how far the model's margin ``t_m`` (nepers) overshot it."""
    for tr in v.targets:
        name = "headroom" if tr.name.startswith("overload") else _MODEL_TARGET.get(tr.name, tr.name)
        # A target that missed the margin asked for: the model was too optimistic about it.
        if name in _MODEL_TARGETS and tr.margin < floor:
            offsets[name] = min(offsets.get(name, 0.0) + max(0.7 * (t_m - tr.margin), 2 * TIE), 1.0)


def _finish(spec, cands: Candidates, designs: list[Verified], stock_swap: bool = True) -> list[Verified]:
    """The reported designs, ranked: stock first, with their large-signal figures."""
    if designs and cands.stock is not None and stock_swap:
        # Stock first: a bought part whose value is in the drawer (with no wider tolerance)
        # is taken from the drawer instead, as far as the quantities go.
        swapped = [_from_stock(cands, d.choice) for d in designs]
        if any(ch != d.choice for ch, d in zip(swapped, designs)):
            again = verify(spec, cands, swapped, large_signal=True)
            designs = [a if a.margin >= 0 else d for a, d in zip(again, designs)]
    if designs and designs[0].analysis.large == {}:
        # The figures a builder wants (swing, THD, clip limits) for the designs reported.
        designs = verify(spec, cands, [d.choice for d in designs], large_signal=True)
    return rank(designs)


def _from_stock(cands: Candidates, ch: Choice) -> Choice:
    used: dict[int, int] = {}
    pick = ch.as_dict()
    for key, i in pick.items():
        it = cands.slot(*key).items[i]
        if it.stock_line is not None:
            used[it.stock_line] = used.get(it.stock_line, 0) + 1
    for key, i in sorted(pick.items(), key=lambda kv: (kv[0][0], kv[0][1] or 0)):
        items = cands.slot(*key).items
        it = items[i]
        if it.source != "series":
            continue
        for j, alt in enumerate(items):
            if (alt.source == "stock" and alt.value == it.value and alt.tolerance <= it.tolerance
                    and used.get(alt.stock_line, 0) < cands.stock_qty[alt.stock_line]):
                pick[key] = j
                used[alt.stock_line] = used.get(alt.stock_line, 0) + 1
                break
    return Choice.of(pick, ch.transistor)


def _polish(spec, cands, best, offsets, seed, t, stats) -> Verified | None:
    sm = _model(spec, cands, [], best - TIE, offsets)
    parts, lines, bought, capsize, tie = sm.simplicity()
    sm.m.minimize(parts * 10**8 + lines * 10**6 + bought * 10**4 + capsize)
    solver = _solver(seed, t)
    st = clock.run(solver, sm.m)
    stats["solves"] += 1
    if st not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return None
    pick, tr = sm.chosen(solver.boolean_value)
    stats["verified"] += 1
    return verify(spec, cands, [Choice.of(pick, tr)])[0]


#: The note of an answer whose capacitors the time limit left as the search proposed them.
UNTRIMMED = ("the time limit came before the capacitor trim was done: some capacitors may be larger than"
             " needed (a longer --time-limit trims them)")

#: Seconds of the search's clock for each capacitor-trim solve.
TRIM_SECONDS = 1.0


def _trim_capacitors(spec, cands, designs, offsets, seed, left, final_need, stats) -> tuple[list[Verified], bool]:
    """The smallest capacitors (and fewest BOM lines) that keep each design's margin.

    The proposals' capacitors are whatever the model found first once the capacitors no
    longer limit the margin; a builder would rather fit the smallest that do the job. With
    the transistor, resistors and pots of a design fixed, the model picks the capacitors
    for the fewest BOM lines and the smallest values at the design's own margin (less TIE);
    the analysis has the last word, and a design is only replaced by a variant that keeps
    its margin within TIE and stays distinct from the others. Returns the designs and whether
    the trim's proposals (if any) were verified: False when the time left was too short.
    """
    proposals = []
    for d in designs:
        need = max(d.margin - TIE, 0.0)
        sm = _model(spec, cands, [], need, offsets)
        for key, i in d.choice.pick:
            if cands.slot(*key).role.kind != "C":
                sm.m.add(sm.x[key][i] == 1)
        sm.m.add(sm.tr[d.choice.transistor] == 1)
        _parts, lines, bought, capsize, _tie = sm.simplicity()
        sm.m.minimize(lines * 10**6 + bought * 10**4 + capsize)
        sm.hint(d.choice)
        solver = _solver(seed, TRIM_SECONDS)
        st = clock.run(solver, sm.m)
        stats["solves"] += 1
        if st in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            pick, tr = sm.chosen(solver.boolean_value)
            ch = Choice.of(pick, tr)
            if ch != d.choice:
                proposals.append((d, ch))
    if not proposals:
        return designs, True
    if left() < final_need():
        return designs, False
    checked = verify(spec, cands, [ch for _, ch in proposals])
    stats["verified"] += len(checked)
    better = {id(d): v for (d, _), v in zip(proposals, checked)
              if v.margin >= max(d.margin - TIE, 0.0) and _simplicity(v) < _simplicity(d)}
    return _distinct(rank([better.get(id(d), d) for d in designs])), True


def _distinct(vs: list[Verified]) -> list[Verified]:
    """Keep the first of designs with the same transistor and resistor and pot values (stock
    or bought alike): alternatives that differ only in their capacitors are not worth a
    builder's look, and the ranking puts the smaller capacitors first."""
    out, seen = [], set()
    for v in vs:
        key = (v.design.transistor, tuple((p.role, p.input, round(p.value, 15)) for p in v.design.parts
                                          if not p.ref.startswith("C")))
        if key not in seen:
            seen.add(key)
            out.append(v)
    return out


def _values_key(cands: Candidates, ch: Choice) -> tuple:
    """What a design is made of: the transistor and every part's value (stock or bought alike)."""
    vals = tuple((key, cands.slot(*key).items[i].value) for key, i in ch.pick)
    return (ch.transistor, vals)


def _proved_none_above(spec, cands, cuts, floor, seed, left, chunk, core_cuts=(), presolve=False) -> bool | None:
    """Does the relaxation prove that no design outside ``cuts`` reaches margin ``floor``?

    True: proved; False: the relaxation has such a design; None: time ran out first."""
    sm = _model(spec, cands, cuts, floor, None, core_cuts)
    st = clock.run(_solver(seed, min(left(), chunk), presolve=presolve), sm.m)
    if st == cp_model.INFEASIBLE:
        return True
    return False if st in (cp_model.OPTIMAL, cp_model.FEASIBLE) else None


def _passing(vs: list[Verified]) -> list[Verified]:
    return [v for v in vs if v.margin >= 0]
