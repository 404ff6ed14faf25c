"""The search for topologies the relaxation model does not cover: a neighbourhood table model.

:class:`~optimizer.search.model.StageModel` encodes the physics of ``divider-ce`` as bounds
the solver can prove things with. The other topologies (two-transistor stages, feedback
bias, the common-base summing node) are searched like this instead, from the same analysis
and with the same verifier:

1. **Structures.** Every combination of the optional resistors (present or absent) with
   every transistor type; an optional capacitor is fitted exactly when the resistor it
   serves is.
2. **Quick screen.** A batch of designs is analysed at the nominal point and every global
   corner (β, supply, temperature) without part tolerances: operating point of every
   transistor, 1 kHz gain and impedances, supply current, and for the best rows an estimate
   of the swing at the lowest supply: the smaller of 0.8 × the quasi-static clip limit and
   the swing at the THD limit (harmonic balance with fewer harmonics). Capacitors are at
   their largest candidate up to ``AMPLE``, so they do not limit the mid-band. The screen's
   figures go through the same :func:`~optimizer.analysis.targets.judge` as the full
   analysis; only the −3 dB corners and the part tolerances are left to the verifier.
3. **Continuous start.** Seeded log-uniform samples of the resistors over their candidate
   ranges, then a few rounds of shrinking perturbations around the best (all batched).
4. **Neighbourhood table.** Around the best few continuous designs, each resistor may take
   the series or stock values just below and just above its continuous value. Every
   combination (at most ``MAX_ROWS``) is screened; the table of (values → screened margin)
   goes to CP-SAT as an allowed-assignments constraint over indices into each part's
   values, with the stock quantities as linear constraints, and the objective: screened
   margin, then fewest BOM lines, then fewest parts to buy.
5. **Verification.** The model's best rows are analysed in full at every corner with every
   tolerance and the large-signal figures, the capacitors are then trimmed (the smallest
   common value that keeps the margin; a quarter of the time is kept for it), and every
   reported design has passed the verifier. A row the verifier rejects is cut from the
   model, and the model is asked again; after a few misses in a row, or when a table is
   spent, a fresh pass starts from new samples (up to ``PASSES``).

The neighbourhood is not the whole space, so nothing here is proved optimal: a topology
searched this way reports ``feasible`` (designs found) or ``unknown`` (none found in time).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace

import numpy as np
from ortools.sat.python import cp_model

from ..analysis import figures as fig
from ..analysis.evaluate import conditions_of
from ..analysis.large_signal import clip_limits, swing_at_thd
from ..analysis.network import Batch, Network
from ..analysis.targets import design_margin, judge
from ..circuit.build import build_circuit
from ..errors import ConvergenceError
from . import clock
from .candidates import Candidates, RoleSlot
from .solve import UNTRIMMED
from .verify import Choice, Verified, design_of, needs_large_signal, verify

__all__ = ["local_search", "structures", "triage"]

#: Largest neighbourhood table handed to the solver.
MAX_ROWS = 1024
#: How many structures (optional parts fitted or not, transistor) are searched in depth.
KEEP_STRUCTURES = 2
#: The screen's swing estimate: this fraction of the smaller quasi-static clip limit (the
#: swing at 1 % THD sits below the clip limits; the verifier has the last word).
SWING_FRACTION = 0.8
#: Harmonics of the screen's THD-limited swing (the verifier uses the full count).
SCREEN_HARMONICS = 10
SAMPLES = 128
#: Fresh starts of the evolution while no design has passed and time is left.
PASSES = 4
#: Share of a topology's time kept for trimming the capacitors of the designs found.
TRIM_SHARE = 0.25
#: Verified failures in a row after which the rest of a table is left.
MISSES = 3
ROUNDS = 14
PARENTS = 8
CHILDREN = 6
TIE = 0.005


@dataclass
class _Lite:
    """The parts of an analysis that :func:`judge` reads, from the quick screen."""

    circuit: object
    nominal: dict
    low: dict
    high: dict
    corner_of: dict
    large: dict
    large_worst: dict
    large_corner: dict
    noise: dict


def structures(cands: Candidates) -> list[dict]:
    """Each structure: slot key → True (fitted) / False (absent) for the optional slots."""
    opt_r = [s for s in cands.slots if s.role.optional and s.role.kind == "R"]
    out = []
    for combo in itertools.product((True, False), repeat=len(opt_r)):
        on = {s.key: v for s, v in zip(opt_r, combo)}
        ok = True
        for s in opt_r:
            req = s.role.requires
            if on[s.key] and req is not None and not on.get((req, s.input), True):
                ok = False
        for s in cands.slots:
            if s.role.optional and s.role.kind == "C":
                req = s.role.requires
                on[s.key] = bool(req is not None and on.get((req, s.input), False))
        if ok:
            out.append(on)
    return out


def _present(s: RoleSlot, on: dict) -> bool:
    return on.get(s.key, True)


def _index_of(s: RoleSlot, value: float) -> int:
    """The item of a slot nearest a value by ratio (stock preferred on a tie)."""
    best, bi = math.inf, 0
    for i, it in enumerate(s.items):
        if it.absent:
            continue
        d = abs(math.log(it.value / value))
        if d < best - 1e-12 or (abs(d - best) <= 1e-12 and it.source == "stock"):
            best, bi = d, i
    return bi


#: The screen's capacitors: the largest candidate up to this (F). Big enough that no coupling
#: or bypass capacitor limits the figures at 1 kHz, small enough to be a part a builder would
#: fit if the time runs out before the capacitors are trimmed.
AMPLE = 220e-6


def _ample(s: RoleSlot) -> int:
    """A capacitor's largest candidate up to :data:`AMPLE` (the smallest one above it if none)."""
    idx = [i for i, it in enumerate(s.items) if not it.absent]
    under = [i for i in idx if s.items[i].value <= AMPLE * (1 + 1e-9)]
    if under:
        return max(under, key=lambda i: s.items[i].value)
    return min(idx, key=lambda i: s.items[i].value)


class _Screen:
    """The quick screen of one structure and transistor (see the module docstring)."""

    def __init__(self, spec, cands: Candidates, on: dict, transistor: int):
        self.spec, self.cands, self.on, self.tr = spec, cands, on, transistor
        self.core = [s for s in cands.slots if s.role.kind in ("R", "POT") and _present(s, on)]
        pick = {}
        for s in cands.slots:
            if not _present(s, on):
                pick[s.key] = next(i for i, it in enumerate(s.items) if it.absent)
            elif s.role.kind == "C":
                pick[s.key] = _ample(s)
            else:
                pick[s.key] = next(i for i, it in enumerate(s.items) if not it.absent)
        self.base_pick = pick
        design, _ = design_of(spec, cands, Choice.of(pick, transistor))
        # No tolerances: the screen looks at the global corners only.
        self.design = replace(design, parts=tuple(replace(p, tolerance=0.0) for p in design.parts))
        self.circuit = build_circuit(self.design)
        self.net = Network(self.circuit)
        self.ref = {(p.role, p.input): p.ref for p in self.design.parts}
        cond = conditions_of(self.design, self.circuit)
        nom = {"supply": cond.supply[0], "temperature": cond.ambient[0], "beta": {k: v[0] for k, v in cond.beta.items()}}
        # Every global corner, each transistor's beta at either end on its own as the
        # verifier takes them: a gain stage at its highest beta behind a buffer at its
        # lowest is where a two-transistor stage saturates (the screen once skipped those
        # and sent designs to the verifier that missed at once).
        self.points = [nom] + list(cond.globals())
        self.need_swing = needs_large_signal(spec)
        self.vmin = cond.supply[1]

    def lo_hi(self, s: RoleSlot) -> tuple[float, float]:
        vals = [it.value for it in s.items if not it.absent]
        return min(vals), max(vals)

    def margins(self, X: np.ndarray, swing: bool | None = None, keep: int = 24) -> np.ndarray:
        """Screened design margin of each row of X (B, len(core)) of values.

        The swing estimate (a sweep of the transfer curve) is the costly part: it is found
        only for the ``keep`` rows best on every other target; the others count as −inf
        when the spec needs a swing.
        """
        swing = self.need_swing if swing is None else swing
        out = self._all(X, False)
        if not swing:
            return out
        best = np.argsort(-out, kind="stable")[:keep]
        best = best[np.isfinite(out[best])]
        full = np.full(X.shape[0], -np.inf)
        if best.size:
            full[best] = self._all(X[best], True)
        return full

    def _all(self, X: np.ndarray, swing: bool) -> np.ndarray:
        out = np.full(X.shape[0], -np.inf)
        step = 256 if not swing else 32
        for a in range(0, X.shape[0], step):
            out[a:a + step] = self._chunk(X[a:a + step], swing)
        return out

    def _chunk(self, X: np.ndarray, swing: bool) -> np.ndarray:
        try:
            return self._eval(X, swing)
        except (ConvergenceError, np.linalg.LinAlgError, FloatingPointError, ValueError):
            if X.shape[0] <= 2:
                return np.full(X.shape[0], -np.inf)
            h = X.shape[0] // 2
            return np.concatenate([self._chunk(X[:h], swing), self._chunk(X[h:], swing)])

    def _eval(self, X: np.ndarray, with_swing: bool) -> np.ndarray:
        B, P = X.shape[0], len(self.points)
        rep = np.repeat(np.arange(B), P)
        pts = [self.points[j] for j in range(P)] * B
        batch = Batch(B * P, np.array([p["supply"] for p in pts]), np.array([p["temperature"] for p in pts]))
        for j, s in enumerate(self.core):
            batch.values[self.ref[s.key]] = X[rep, j]
        for q in self.points[0]["beta"]:
            batch.beta[q] = np.array([p["beta"][q] for p in pts])
        # A design whose operating point is not found at some point screens as −inf (the
        # others of the batch keep theirs: no batch is re-run for one design).
        op = self.net.operating_point(batch, strict=False)
        ok = np.ones(B, bool) if op.converged is None else op.converged.reshape(B, P).all(axis=1)
        mb = fig.midband(self.net, op)
        c = self.circuit
        vals: dict[str, np.ndarray] = {"supply_current": op.supply_current, "output_impedance": np.abs(mb.zout)}
        for i, q in enumerate(c.transistors):
            cc, bb, ee = q.nodes
            vce = (op.v[cc] - op.v[ee]) * q.model.sign
            vals[f"vce:{q.ref}"] = vce
            vals[f"ic:{q.ref}"] = op.ic[q.ref]
            if i == 0:
                vals["vce"], vals["ic"] = vce, op.ic[q.ref]
        n = c.n_inputs
        for k in range(n):
            vals[f"gain_db:{k + 1}"] = 20 * np.log10(np.maximum(np.abs(mb.gain[k]), 1e-30))
            vals[f"input_impedance:{k + 1}"] = np.abs(mb.zin[k])
            if n > 1:
                vals[f"crosstalk_db:{k + 1}"] = 20 * np.log10(np.maximum(np.max(mb.crosstalk[k], axis=0), 1e-30))
        # Swing estimate: the clip limits at the lowest supply (every temperature and beta end).
        swing = None
        if with_swing:
            # Only designs whose every point converged (the others screen as −inf below);
            # each has points at the lowest supply, so none are left only when none converged.
            swing = np.full(B, np.inf)
            at_min = np.nonzero((batch.supply <= self.vmin + 1e-9) & ok[rep])[0]
        if with_swing and at_min.size:
            sub = op.batch.take(at_min)
            opm = self.net.operating_point(sub, strict=False)
            gm = np.abs(fig.midband(self.net, opm).gain[0])
            cl = clip_limits(self.net, opm, gain=gm, points=21, strict=False)
            est = SWING_FRACTION * np.minimum(np.nan_to_num(cl.up, nan=0.0), np.nan_to_num(cl.down, nan=0.0))
            # And the swing at the THD limit (harmonic balance with fewer harmonics) at the
            # same points.
            thd_sw, _ = swing_at_thd(self.net, opm, self.design.thd_limit, gain=gm, H=SCREEN_HARMONICS)
            est = np.minimum(est, np.nan_to_num(thd_sw, nan=0.0))
            if opm.converged is not None:  # found once, lost when solved again: no swing claimed
                est = np.where(opm.converged, est, 0.0)
            np.minimum.at(swing, rep[at_min], est)
        res = np.empty(B)
        for b in range(B):
            if not ok[b]:
                res[b] = -np.inf
                continue
            sl = slice(b * P, (b + 1) * P)
            nominal = {k: float(v[sl][0]) for k, v in vals.items()}
            low = {k: float(np.min(v[sl])) for k, v in vals.items()}
            high = {k: float(np.max(v[sl])) for k, v in vals.items()}
            for k in range(n):
                for key, val in ((f"low_cutoff:{k + 1}", 0.0), (f"high_cutoff:{k + 1}", math.inf)):
                    nominal[key] = low[key] = high[key] = val
            large, large_worst = {}, {}
            if swing is not None:
                large_worst["swing"] = float(swing[b]) if np.isfinite(swing[b]) else 0.0
                large["swing"] = large_worst["swing"]
            lite = _Lite(c, nominal, low, high, {}, large, large_worst, {}, {})
            res[b] = design_margin(judge(lite, self.spec))
        return res


def _log_box(sc: "_Screen") -> tuple[np.ndarray, np.ndarray]:
    """The log of each core part's smallest and largest candidate."""
    return (np.log([sc.lo_hi(s)[0] for s in sc.core]), np.log([sc.lo_hi(s)[1] for s in sc.core]))


def _log_uniform(sc: "_Screen", rng: np.random.Generator, samples: int) -> np.ndarray:
    """Seeded log-uniform samples (log values) of the core parts over their candidate ranges."""
    lo, hi = _log_box(sc)
    return lo + (hi - lo) * rng.random((samples, len(sc.core)))


def _quick(sc: "_Screen", rng: np.random.Generator, samples: int) -> float:
    return float(np.max(sc.margins(np.exp(_log_uniform(sc, rng, samples)), swing=False)))


def triage(spec, cands: Candidates, seed: int, samples: int = 96) -> float:
    """How close a topology comes on a quick look: the best screened margin (swing left
    out) over seeded samples of every structure and transistor. Used only to share the
    search time between topologies; it proves nothing."""
    rng = np.random.default_rng(seed)
    return max(_quick(_Screen(spec, cands, on, t), rng, samples)
               for t in range(len(cands.transistors)) for on in structures(cands))


def _continuous(sc: _Screen, rng: np.random.Generator, deadline: float) -> tuple[np.ndarray, np.ndarray]:
    """Seeded log-uniform samples, then an elitist evolution strategy on the log values:
    each round the best ``PARENTS`` designs so far get ``CHILDREN`` perturbed copies each,
    with a spread that shrinks round by round (all of a round screened in one batch)."""
    lo, hi = _log_box(sc)
    Z = _log_uniform(sc, rng, SAMPLES)
    allZ, allm = [Z], [sc.margins(np.exp(Z), keep=12)]
    sigma = 0.6
    for _ in range(ROUNDS):
        if clock.now() > deadline:
            break
        Zc = np.concatenate(allZ)
        mc = np.concatenate(allm)
        best = Zc[np.argsort(-mc, kind="stable")[:PARENTS]]
        n = best.shape[0] * CHILDREN
        Zn = np.clip(np.repeat(best, CHILDREN, axis=0) + sigma * rng.standard_normal((n, len(sc.core))), lo, hi)
        allZ.append(Zn)
        allm.append(sc.margins(np.exp(Zn), keep=12))
        sigma *= 0.75
    Zc = np.concatenate(allZ)
    mc = np.concatenate(allm)
    order = np.argsort(-mc, kind="stable")
    return np.exp(Zc[order]), mc[order]


def _neighbours(s: RoleSlot, value: float, k: int) -> list[int]:
    """Indices of the k distinct values nearest ``value`` by ratio (each value's stock item
    and series item both kept)."""
    vals = sorted({it.value for it in s.items if not it.absent}, key=lambda v: abs(math.log(v / value)))[:k]
    return [i for i, it in enumerate(s.items) if not it.absent and it.value in vals]


def _table(sc: _Screen, centres: np.ndarray) -> tuple[list[list[int]], list[tuple[int, ...]], np.ndarray]:
    """Neighbourhood rows (index per core slot) around the centres, with screened margins."""
    per = [2] * len(sc.core)
    while math.prod(per) * len(centres) > MAX_ROWS and any(p > 1 for p in per):
        # Per-input parts first: they matter least to the stage's own figures.
        j = max(range(len(per)), key=lambda i: (per[i], sc.core[i].input or 0, i))
        per[j] -= 1
    rows: set[tuple[int, ...]] = set()
    for c in centres:
        opts = []
        for j, s in enumerate(sc.core):
            vals = sorted({s.items[i].value for i in _neighbours(s, c[j], per[j])})
            opts.append([_index_of(s, v) for v in vals])
        rows.update(itertools.product(*opts))
    rows_l = sorted(rows)[:MAX_ROWS]
    X = np.array([[sc.core[j].items[i].value for j, i in enumerate(r)] for r in rows_l])
    m = sc.margins(X)
    options = [sorted({r[j] for r in rows_l}) for j in range(len(sc.core))]
    return options, rows_l, m


def local_search(spec, cands: Candidates, top: int, deadline: float, seed: int, say) -> dict:
    """Designs of ``cands.topology`` by the neighbourhood table model (see the module docstring).

    Returns a dict with ``designs`` (verified, passing, best first), ``failed`` (verified,
    failing), ``notes`` and ``stats``.
    """
    stats = {"solves": 0, "verified": 0, "screened": 0, "structures": 0, "passes": 0}
    # A quarter of the time is kept for sizing the capacitors of what is found: the screen
    # fits large ones (up to AMPLE), bigger than a builder needs.
    find_end = deadline - TRIM_SHARE * max(deadline - clock.now(), 0.0)
    v_cost = 0.0  # the longest verification so far (s): none is begun that would end past find_end
    rng = np.random.default_rng(seed)
    verified: list[Verified] = []
    failed: list[Verified] = []
    # The structures and transistors worth the time: a quick look at each, the best few kept.
    looks = []
    for t in range(len(cands.transistors)):
        for on in structures(cands):
            sc = _Screen(spec, cands, on, t)
            looks.append((_quick(sc, rng, 64), len(looks), sc))
    looks.sort(key=lambda x: (-x[0], x[1]))
    best_look = looks[0][0]
    work = [sc for q, _, sc in looks if q >= best_look - 0.5][:KEEP_STRUCTURES]
    stats["structures"] = len(work)
    # Passes: each a fresh evolution from new samples, while nothing has passed and time is left.
    for attempt in range(PASSES):
        if not verified and find_end < deadline and find_end - clock.now() < 2.0:
            find_end = deadline  # nothing found to trim: the kept time goes to one more pass
        if verified or find_end - clock.now() < 2.0:
            break
        stats["passes"] = attempt + 1
        tables = []
        for w, sc in enumerate(work):
            left = find_end - clock.now()
            if left <= 0:
                break
            # Share what is left between the structures not yet searched, keeping a third for
            # the solver and the verifier.
            share = 0.66 * left / (len(work) - w)
            t_end = clock.now() + share
            X, m = _continuous(sc, rng, t_end - 0.25 * share)
            stats["screened"] += len(m)
            if not np.isfinite(m[0]):
                continue
            # Centres: the best two continuous designs that differ by more than a series step.
            centres = []
            for x, mm in zip(X, m):
                if mm < m[0] - 0.3:
                    break
                if all(np.max(np.abs(np.log(x / c))) > 0.2 for c in centres):
                    centres.append(x)
                if len(centres) >= 2:
                    break
            options, rows, tm = _table(sc, np.array(centres))
            stats["screened"] += len(rows)
            tables.append((sc, options, rows, tm))
            say(f"{cands.topology}: {cands.transistors[sc.tr][0]}, structure {w + 1}/{len(work)}:"
                f" continuous {float(m[0]):+.3f}, best of {len(rows)} series neighbours {float(np.max(tm)):+.3f}")
        # Rows in order of the screened margin over every table: the solver picks among them.
        for sc, options, rows, tm in sorted(tables, key=lambda x: -float(np.max(x[3]))):
            if clock.now() > find_end:
                break
            cut: list[int] = []
            misses = 0
            for _ in range(8):
                if clock.now() + max(v_cost, 1.0) > find_end:
                    break
                r = _solve_table(sc, options, rows, tm, cut, seed, max(min(2.0, find_end - clock.now()), 0.1), stats)
                if r is None:
                    break
                cut.append(r[0])
                if tm[r[0]] < -0.5:
                    break
                ch = r[1]
                t_v = clock.now()
                v = verify(spec, cands, [ch])[0]
                stats["verified"] += 1
                v_cost = max(v_cost, clock.now() - t_v)
                worst = min(v.targets, key=lambda t: t.margin) if v.targets else None
                say(f"{cands.topology}: verified a design (screened {float(tm[r[0]]):+.3f}) at {v.margin:+.3f}"
                    + (f", worst {worst.name}" if worst is not None else "") + f" in {clock.now() - t_v:.1f} s")
                (verified if v.margin >= 0 else failed).append(v)
                if v.margin >= 0 and sum(1 for x in verified if x.choice.transistor == sc.tr) >= top:
                    break
                misses = 0 if v.margin >= 0 else misses + 1
                if misses >= MISSES:  # the table's near neighbours fail alike: a fresh pass is better
                    break
    good = sorted(verified, key=lambda v: -v.margin)[:top]
    trimmed = not good
    if good and clock.now() < deadline:
        good, trimmed = _trim(spec, cands, good, stats, deadline)
    notes = [f"{cands.topology}: searched by the neighbourhood table model ({stats['structures']} structures,"
             f" {stats['passes']} pass{'es' if stats['passes'] != 1 else ''}, {stats['screened']} designs screened); not proved best"]
    if not trimmed:
        notes.append(f"{cands.topology}: {UNTRIMMED}")
    return {"designs": good, "failed": sorted(failed, key=lambda v: -v.margin)[:3], "notes": notes, "stats": stats}


def _solve_table(sc: _Screen, options, rows, tm, cut, seed, t, stats):
    """CP-SAT over the table: the best row not cut (margin, then BOM lines, then parts bought)."""
    cands = sc.cands
    m = cp_model.CpModel()
    idx = [m.new_int_var_from_domain(cp_model.Domain.from_values(opt), f"i{j}") for j, opt in enumerate(options)]
    mq = [int(round(1000 * max(min(x, 5.0), -5.0))) if np.isfinite(x) else -5000 for x in tm]
    mv = m.new_int_var(-5000, 5000, "margin")
    allowed = [list(r) + [q] for k, (r, q) in enumerate(zip(rows, mq)) if k not in cut]
    if not allowed:
        return None
    m.add_allowed_assignments(idx + [mv], allowed)
    # BOM lines among the screened parts (distinct values), and parts bought.
    by_value: dict[float, list] = {}
    bought = []
    stock_use: dict[int, list] = {}
    for j, (s, opt) in enumerate(zip(sc.core, options)):
        for i in opt:
            b = m.new_bool_var("")
            m.add(idx[j] == i).only_enforce_if(b)
            m.add(idx[j] != i).only_enforce_if(~b)
            it = s.items[i]
            by_value.setdefault(round(it.value, 15), []).append(b)
            if it.source != "stock":
                bought.append(b)
            else:
                stock_use.setdefault(it.stock_line, []).append(b)
    for line, bs in stock_use.items():
        m.add(sum(bs) <= cands.stock_qty[line])
    lines = []
    for bs in by_value.values():
        u = m.new_bool_var("")
        for b in bs:
            m.add_implication(b, u)
        lines.append(u)
    m.maximize(mv * 10**4 - sum(lines) * 100 - sum(bought))
    s = cp_model.CpSolver()
    s.parameters.num_workers = 1
    s.parameters.random_seed = seed
    clock.limit(s.parameters, t)
    st = clock.run(s, m)
    stats["solves"] += 1
    if st not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return None
    row = tuple(s.value(v) for v in idx)
    k = rows.index(row)
    pick = dict(sc.base_pick)
    for j, sl in enumerate(sc.core):
        pick[sl.key] = row[j]
    return k, Choice.of(pick, sc.tr)


def _trim(spec, cands: Candidates, designs: list[Verified], stats, deadline: float) -> tuple[list[Verified], bool]:
    """The smallest common capacitor value (each capacitor's nearest candidate) that keeps
    each design's margin within TIE, found by bisection over the candidate values (a smaller
    capacitor only raises the low corner). The designs are bisected side by side, each step
    of all of them verified in one batch; no step is begun that would end past the deadline.
    Returns the designs and whether every bisection ended before the deadline."""
    caps = [s for s in cands.slots if s.role.kind == "C"]
    common = sorted({it.value for s in caps for it in s.items if not it.absent})
    state = []  # per design: [best, pick, fitted, vals, lo, hi, need]
    for d in designs:
        pick = d.choice.as_dict()
        fitted = [s for s in caps if not s.items[pick[s.key]].absent]
        current = max((s.items[pick[s.key]].value for s in fitted), default=0.0)
        vals = [v for v in common if v < current]
        state.append([d, pick, fitted, vals, 0, len(vals) - 1 if fitted else -1, max(d.margin - TIE, 0.0)])
    cost = 0.0
    while clock.now() + cost < deadline:
        live = [st for st in state if st[4] <= st[5]]
        if not live:
            break
        t0 = clock.now()
        choices = []
        for best, pick, fitted, vals, lo, hi, _ in live:
            p2 = dict(pick)
            for s in fitted:
                p2[s.key] = _index_of(s, vals[(lo + hi) // 2])
            choices.append(Choice.of(p2, best.choice.transistor))
        checked = verify(spec, cands, choices)
        stats["verified"] += len(checked)
        cost = max(cost, clock.now() - t0)
        for st, v in zip(live, checked):
            mid = (st[4] + st[5]) // 2
            if v.margin >= st[6]:
                st[0], st[5] = v, mid - 1
            else:
                st[4] = mid + 1
    return [st[0] for st in state], all(st[4] > st[5] for st in state)
