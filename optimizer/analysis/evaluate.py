"""Every figure of a design, at nominal and at its worst corners, and Monte Carlo yield.

Corners: the transistor's beta at the ends of its range, the supply at its ends, the
ambient temperature at its ends (all combinations, the *global corners*), and each part at
the ends of its tolerance. Part tolerances are handled by worst-case vertex analysis: at
every global corner each part is moved by its full tolerance to learn which way each
figure moves, then each figure is evaluated at the vertex that pushes it furthest in each
direction. The worst value reported is the extreme over every point evaluated, so it is
never better than any corner tried.

Large-signal figures (swing at the THD limit, THD at a level, clip limits) are found the
same way over the global corners and the stage's own parts (not the input parts, which set
the drive but not the output's limits).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np

from ..catalog.parts import power_rating_for, voltage_rating_for
from ..circuit.build import build_circuit
from ..circuit.netlist import Circuit
from . import figures as fig
from .large_signal import clip_limits, swing_at_thd, thd_at_level
from .network import Batch, Network

__all__ = ["Analysis", "Conditions", "analyse", "analyse_many", "conditions_of", "large_roles", "ratings", "SMALL_FIGURES",
           "TRANSISTOR_FIGURES"]

#: Direction in which each figure gets worse ("min": smaller is worse; "max": larger is worse).
ADVERSE = {
    "gain_db": "min",
    "input_impedance": "min",
    "low_cutoff": "max",
    "high_cutoff": "min",
    "output_impedance": "max",
    "supply_current": "max",
    "crosstalk_db": "max",
    "swing": "min",
    "thd": "max",
    "clip_up": "min",
    "clip_down": "min",
}

SMALL_FIGURES = ("vb", "ve", "vc", "ic", "ib", "vce", "supply_current", "output_impedance")
#: The operating-point figures reported for every transistor, keyed ``name:ref`` (``vce:Q2``).
TRANSISTOR_FIGURES = ("vb", "ve", "vc", "ic", "ib", "vce")
#: The stage's own parts of divider-ce (those that set the output's limits).
LARGE_ROLES = ("bias_top", "bias_bottom", "collector", "emitter", "emitter_bypassed")


def large_roles(topology: str) -> tuple[str, ...]:
    """The roles whose tolerances the large-signal corners move: a topology's ``LARGE_ROLES``
    when it names them, else every resistor role that is not per input (for divider-ce
    exactly :data:`LARGE_ROLES`)."""
    from ..circuit.topologies import get_topology

    topo = get_topology(topology)
    named = getattr(topo, "LARGE_ROLES", None)
    if named is not None:
        return tuple(named)
    return tuple(ro.name for ro in topo.ROLES if ro.kind == "R" and not ro.per_input)


@dataclass(frozen=True)
class Conditions:
    """The ranges a design must work over."""

    supply: tuple[float, float, float]  # nominal, min, max (V)
    ambient: tuple[float, float, float]  # nominal, min, max (K)
    beta: dict[str, tuple[float, float, float]]  # transistor → nominal, min, max
    tolerance: dict[str, float]  # part designator → fractional tolerance

    def globals(self) -> list[dict]:
        """Every combination of the range ends (duplicates removed)."""
        sup = sorted({self.supply[1], self.supply[2]})
        amb = sorted({self.ambient[1], self.ambient[2]})
        refs = sorted(self.beta)
        betas = [sorted({self.beta[r][1], self.beta[r][2]}) for r in refs]
        out = []
        for s, t, *bs in itertools.product(sup, amb, *betas):
            out.append({"supply": s, "temperature": t, "beta": dict(zip(refs, bs))})
        return out


def conditions_of(design, circuit: Circuit, tolerance_scale: float = 1.0) -> Conditions:
    m = design.model
    beta = {}
    for q in circuit.transistors:
        lo = m.beta_min if m.beta_min is not None else m.beta
        hi = m.beta_max if m.beta_max is not None else m.beta
        beta[q.ref] = (m.beta, lo, hi)
    tol = {e.ref: e.tolerance * tolerance_scale for e in circuit.parts if e.kind in ("R", "C", "POT") and e.tolerance > 0}
    s, a = design.supply, design.ambient
    return Conditions((s.nominal, s.min, s.max), (a.nominal, a.min, a.max), beta, tol)


def _batch_at(circuits: list[Circuit], points: list[tuple[int, dict, dict]]) -> Batch:
    """A batch from (design index, global corner, {ref: relative deviation}) triples."""
    B = len(points)
    b = Batch(B, np.array([g["supply"] for _, g, _ in points]), np.array([g["temperature"] for _, g, _ in points]))
    refs = [e.ref for e in circuits[0].elements if e.kind in ("R", "C", "POT")]
    base = [{e.ref: e.value for e in c.elements} for c in circuits]
    pos = [{e.ref: e.position for e in c.elements if e.kind == "POT"} for c in circuits]
    for r in refs:
        b.values[r] = np.array([base[i][r] * (1 + d.get(r, 0.0)) for i, _, d in points])
    for r in pos[0]:
        b.positions[r] = np.array([pos[i][r] for i, _, _ in points])
    qrefs = sorted({r for _, g, _ in points for r in g["beta"]})
    for q in qrefs:
        b.beta[q] = np.array([g["beta"][q] for _, g, _ in points])
    return b


#: A change of a figure smaller than this fraction of it (or than ``_NO_CHANGE_ABS`` in its
#: SI unit, for a figure near 0, such as a gain of 0 dB), when one part moves to a tolerance
#: end, counts as none: its sign is rounding, which differs between processors, and would
#: pick another vertex (and another batch) there.
_NO_CHANGE = 1e-9
_NO_CHANGE_ABS = 1e-15


def _signed(deltas, v0) -> np.ndarray:
    """``deltas`` with NaN, ±inf and the changes too small to have a sign (see
    :data:`_NO_CHANGE`) as 0."""
    d = np.nan_to_num(np.asarray(deltas, float), nan=0.0, posinf=0.0, neginf=0.0)
    floor = _NO_CHANGE * np.nan_to_num(np.abs(v0), nan=0.0, posinf=0.0) + _NO_CHANGE_ABS
    return np.where(np.abs(d) <= floor, 0.0, d)


def small_figures(net: Network, batch: Batch, corners: bool = True, steps: int = 10) -> tuple[dict[str, np.ndarray], object]:
    """Every small-signal figure of a batch, as (B,) arrays keyed by name.

    The operating point of the first transistor is keyed ``vb``, ``ve``, ``vc``, ``ic``,
    ``ib``, ``vce``; that of every transistor (the first included) ``vb:Q1`` … ``vce:Q2``.
    Per-input figures are keyed ``gain_db:1``, ``input_impedance:1``, ``low_cutoff:1``,
    ``high_cutoff:1``, ``crosstalk_db:1`` (the largest leak of input 1 into another jack).
    ``corners=False`` leaves out the −3 dB corners (the costly part); ``steps`` sets how
    finely they are found (rounds of false position; 10 reach about 1e-9 relative).
    """
    op = net.operating_point(batch)
    small = net.small_signal(op)
    mb = fig.midband(net, op, small)
    if corners:
        lo, hi = fig.cutoffs(net, op, small, ref=np.abs(mb.gain), steps=steps)
    else:
        lo = hi = np.full((net.circuit.n_inputs, batch.size), np.nan)
    c = net.circuit
    out = {}
    for i, qe in enumerate(c.transistors):
        q = qe.ref
        nc, nb, ne = qe.nodes
        opq = {"vb": op.v[nb], "ve": op.v[ne], "vc": op.v[nc], "ic": op.ic[q], "ib": op.ib[q],
               "vce": (op.v[nc] - op.v[ne]) * qe.model.sign}
        if i == 0:  # the first transistor's keys without a designator, as scripts know them
            out.update(opq)
        out.update({f"{k}:{q}": v for k, v in opq.items()})
    out["supply_current"] = op.supply_current
    out["output_impedance"] = np.abs(mb.zout)
    for k in range(c.n_inputs):
        out[f"gain_db:{k + 1}"] = 20 * np.log10(np.maximum(np.abs(mb.gain[k]), 1e-30))
        out[f"input_impedance:{k + 1}"] = np.abs(mb.zin[k])
        out[f"low_cutoff:{k + 1}"] = lo[k]
        out[f"high_cutoff:{k + 1}"] = hi[k]
        if c.n_inputs > 1:
            out[f"crosstalk_db:{k + 1}"] = 20 * np.log10(np.maximum(np.max(mb.crosstalk[k], axis=0), 1e-30))
    for (ref, _, _) in net.cbranch:
        out[f"capv:{ref}"] = op.cap_voltage[ref]
    g = net.conductances(batch)
    for k, (ref, part, a, b_) in enumerate(net.rbranch):
        if not net.elements[ref].part:
            continue
        key = ref if part == "R" else f"{ref}.{part}"
        out[f"power:{key}"] = (op.v[net.names[a]] - op.v[net.names[b_]]) ** 2 * g[k]
    for ref in op.ic:
        vce = np.abs(op.v[c.element(ref).nodes[0]] - op.v[c.element(ref).nodes[2]])
        out[f"pq:{ref}"] = vce * np.abs(op.ic[ref]) + np.abs(op.junction[ref][0] * op.ib[ref])
    return out, (op, small, mb)


_CORNER_FIGURES = ("low_cutoff", "high_cutoff")


def _direction(name: str) -> list[str]:
    base = name.split(":")[0]
    if base in TRANSISTOR_FIGURES or base in ("gain_db", "supply_current") or base.startswith("capv"):
        return ["min", "max"]
    if base in ADVERSE:
        return [ADVERSE[base]]
    return ["max"]


@dataclass
class Analysis:
    """The figures of one design: nominal, worst over the corners, and where the worst was."""

    design: object
    circuit: Circuit
    conditions: Conditions
    nominal: dict[str, float]
    low: dict[str, float]
    high: dict[str, float]
    corner_of: dict[str, str]
    large: dict[str, float] = field(default_factory=dict)
    large_worst: dict[str, float] = field(default_factory=dict)
    large_corner: dict[str, str] = field(default_factory=dict)
    noise: dict[str, float] = field(default_factory=dict)
    extra: dict = field(default_factory=dict)

    def worst(self, name: str) -> float:
        d = _direction(name)[0]
        return self.low[name] if d == "min" else self.high[name]


def _describe(g: dict, dev: dict[str, float], cond: Conditions) -> str:
    parts = [f"supply {g['supply']:.3g} V", f"{g['temperature'] - 273.15:.0f} °C"]
    parts += [f"β {v:.0f}" for v in g["beta"].values()]
    moved = [f"{r}{'+' if d > 0 else '−'}{abs(d) * 100:.0f}%" for r, d in sorted(dev.items()) if d]
    if moved:
        parts.append(", ".join(moved))
    return ", ".join(parts)


def analyse(design, circuit: Circuit | None = None, large_signal: bool = True, level: float | None = None,
            thd_limit: float | None = None, worst_case: bool = True) -> Analysis:
    """Analyse one design over its corners.

    Parameters
    ----------
    design
        A :class:`~optimizer.spec.designfile.Design`.
    circuit
        Its netlist (built from the design when absent).
    large_signal
        Also find swing, THD and clip limits (harmonic balance).
    level
        Output level (V peak at the load) to state THD at; default the design's ``level``,
        else 1 V peak (capped at 80 % of the worst swing).
    thd_limit
        THD (fraction) at which the swing is measured; default the design's.
    worst_case
        Evaluate the corners (otherwise nominal only).
    """
    return analyse_many([design], [circuit] if circuit else None, large_signal, level, thd_limit, worst_case)[0]


def analyse_many(designs: list, circuits: list[Circuit] | None = None, large_signal: bool = True,
                 level: float | None = None, thd_limit: float | None = None, worst_case: bool = True) -> list[Analysis]:
    """Analyse designs of one structure (same parts present, same transistor) in one batch."""
    circuits = circuits or [build_circuit(d) for d in designs]
    net = Network(circuits[0])
    conds = [conditions_of(d, c) for d, c in zip(designs, circuits)]
    nom = [{"supply": c.supply[0], "temperature": c.ambient[0], "beta": {k: v[0] for k, v in c.beta.items()}} for c in conds]
    glob = [c.globals() if worst_case else [] for c in conds]
    tparts = [sorted(c.tolerance) if worst_case else [] for c in conds]
    # 1. Nominal, global corners, and one-part-at-a-time moves at every global corner.
    points: list[tuple[int, dict, dict]] = []
    layout = []  # per design: (start index, stride)
    for i in range(len(designs)):
        start = len(points)
        points.append((i, nom[i], {}))
        for g in glob[i]:
            points.append((i, g, {}))
            for r in tparts[i]:
                points.append((i, g, {r: conds[i].tolerance[r]}))
        layout.append((start, 1 + len(tparts[i])))
    vals, _ = small_figures(net, _batch_at(circuits, points))
    names = list(vals)
    # 2. Worst-case vertices per design, figure, direction and global corner.
    # The −3 dB corners are the costly figures: only the vertices of those figures are
    # evaluated with them, the rest without (their corner entries are NaN and ignored).
    vpoints: list[tuple[int, dict, dict]] = []
    cut_keys: set = set()
    seen = set()
    for i in range(len(designs)):
        start, stride = layout[i]
        parts = tparts[i]
        if not parts:
            continue
        for gi, g in enumerate(glob[i]):
            base = start + 1 + gi * stride
            for name in names:
                v0 = vals[name][base]
                with np.errstate(invalid="ignore"):
                    deltas = np.array([vals[name][base + 1 + j] - v0 for j in range(len(parts))])
                deltas = _signed(deltas, v0)
                for d in _direction(name):
                    sgn = np.sign(deltas) * (1 if d == "max" else -1)
                    dev = {r: float(s_) * conds[i].tolerance[r] for r, s_ in zip(parts, sgn) if s_ != 0}
                    key = (i, gi, tuple(sorted(dev.items())))
                    if name.startswith(_CORNER_FIGURES):
                        cut_keys.add(key)
                    if key not in seen:
                        seen.add(key)
                        vpoints.append((i, g, dev, key))
    vpoints = ([p[:3] for p in vpoints if p[3] in cut_keys] + [p[:3] for p in vpoints if p[3] not in cut_keys])
    n_cut = len(cut_keys)
    vv = None
    if vpoints:
        parts_v = []
        if n_cut:
            parts_v.append(small_figures(net, _batch_at(circuits, vpoints[:n_cut]))[0])
        if len(vpoints) > n_cut:
            parts_v.append(small_figures(net, _batch_at(circuits, vpoints[n_cut:]), corners=False)[0])
        vv = {k: np.concatenate([pv[k] for pv in parts_v]) for k in names}
    owner = np.array([p[0] for p in points])
    vowner = np.array([p[0] for p in vpoints]) if vpoints else np.zeros(0, dtype=int)
    out = []
    for i, (d, c) in enumerate(zip(designs, circuits)):
        sel = np.nonzero(owner == i)[0]
        vsel = np.nonzero(vowner == i)[0]
        mypts = [points[j] for j in sel] + [vpoints[j] for j in vsel]
        nominal = {k: float(vals[k][sel[0]]) for k in names}
        low, high, corner_of = {}, {}, {}
        for k in names:
            arr = vals[k][sel] if vv is None else np.concatenate([vals[k][sel], vv[k][vsel]])
            if np.isnan(arr).all():
                i_lo = i_hi = 0
            else:
                i_lo, i_hi = int(np.nanargmin(arr)), int(np.nanargmax(arr))
            low[k], high[k] = float(arr[i_lo]), float(arr[i_hi])
            for dname in _direction(k):
                j = i_lo if dname == "min" else i_hi
                corner_of[f"{k}:{dname}"] = _describe(mypts[j][1], mypts[j][2], conds[i])
        out.append(Analysis(d, c, conds[i], nominal, low, high, corner_of))
    # Noise at nominal.
    opn = net.operating_point(_batch_at(circuits, [(i, nom[i], {}) for i in range(len(designs))]))
    total, contrib = fig.noise(net, opn)
    for i, an in enumerate(out):
        an.noise = {"output_rms": float(total[i]), "sources": {k: float(v[i]) for k, v in contrib.items()}}
    if large_signal:
        _large(out, net, circuits, conds, nom, glob, level, thd_limit, worst_case)
    return out


def _large(ans: list[Analysis], net: Network, circuits, conds, nom, glob, level, thd_limit, worst_case):
    """Swing, THD and clip limits for every analysis of the batch (harmonic balance)."""
    n = len(ans)
    roles = large_roles(circuits[0].topology)
    core = [[e.ref for e in c.parts if e.role in roles and e.ref in cond.tolerance] if worst_case else []
            for c, cond in zip(circuits, conds)]
    limits = [thd_limit if thd_limit is not None else an.design.thd_limit for an in ans]
    points, layout = [], []
    for i in range(n):
        start = len(points)
        points.append((i, nom[i], {}))
        for g in glob[i]:
            points.append((i, g, {}))
            for r in core[i]:
                points.append((i, g, {r: conds[i].tolerance[r]}))
        layout.append((start, 1 + len(core[i])))

    def swings(pts):
        b = _batch_at(circuits, pts)
        op = net.operating_point(b)
        gain = np.abs(fig.midband(net, op).gain[0])
        lim = np.array([limits[p[0]] for p in pts])
        sw, _ = swing_at_thd(net, op, lim, gain=gain)
        return sw

    sw = swings(points)
    vpts = []
    for i in range(n):
        start, stride = layout[i]
        if not core[i]:
            continue
        for gi, g in enumerate(glob[i]):
            base = start + 1 + gi * stride
            with np.errstate(invalid="ignore"):
                dlt = _signed(sw[base + 1 : base + stride] - sw[base], sw[base])
            dev = {r: -float(np.sign(x)) * conds[i].tolerance[r] for r, x in zip(core[i], dlt) if np.sign(x) != 0}
            vpts.append((i, g, dev))
    swv = swings(vpts) if vpts else np.zeros(0)
    allpts = points + vpts
    sw_all = np.concatenate([sw, swv])
    owners = np.array([p[0] for p in allpts])
    worst_pts, levels = [], []
    for i, an in enumerate(ans):
        idx = np.nonzero(owners == i)[0]
        vals = np.where(np.isfinite(sw_all[idx]), sw_all[idx], -np.inf)
        j = idx[int(np.argmin(np.where(np.isfinite(sw_all[idx]), sw_all[idx], np.inf)))]
        an.large["swing"] = float(sw[layout[i][0]])
        an.large_worst["swing"] = float(sw_all[j]) if np.isfinite(sw_all[j]) else 0.0
        an.large_corner["swing"] = _describe(allpts[j][1], allpts[j][2], conds[i])
        lvl = level if level is not None else (an.design.level if an.design.level is not None
                                               else min(1.0, 0.8 * max(an.large_worst["swing"], 1e-3)))
        an.large["thd_level"] = float(lvl)
        an.large["thd_limit"] = float(limits[i])
        worst_pts.append(allpts[j])
        levels.append(lvl)
        del vals
    both = [(i, nom[i], {}) for i in range(n)] + worst_pts
    b = _batch_at(circuits, both)
    op = net.operating_point(b)
    gb = np.abs(fig.midband(net, op).gain[0])
    # THD at the level: at the nominal point, at the swing's worst point, and at every global
    # corner with the parts nominal and at that corner's swing vertex. The worst is the
    # highest of them: a stage's THD at a level need not be highest where its swing is least
    # (a feedback stage at 40 °C and the highest beta had the least swing and less THD than
    # at nominal; ngspice agreed).
    extra = []
    for i in range(n):
        start, stride = layout[i]
        extra += [points[start + 1 + gi * stride] for gi in range(len(glob[i]))]
    extra += vpts
    pts_thd = both + extra
    lv = np.array(levels + levels + [levels[p[0]] for p in extra])
    if extra:
        b_t = _batch_at(circuits, pts_thd)
        op_t = net.operating_point(b_t)
        th, _ = thd_at_level(net, op_t, lv, gain=np.abs(fig.midband(net, op_t).gain[0]))
    else:
        th, _ = thd_at_level(net, op, lv, gain=gb)
    th_owner = np.array([p[0] for p in pts_thd])
    cl = clip_limits(net, op, gain=gb)
    for i, an in enumerate(ans):
        an.large["thd"] = float(th[i])
        an.large_worst["thd"] = float(th[n + i])
        an.large_corner["thd"] = an.large_corner["swing"]
        mine = np.nonzero(th_owner == i)[0]
        if np.isfinite(th[n + i]) and np.isfinite(th[mine]).any():
            j = mine[int(np.nanargmax(th[mine]))]
            if th[j] > th[n + i]:
                an.large_worst["thd"] = float(th[j])
                an.large_corner["thd"] = _describe(pts_thd[j][1], pts_thd[j][2], conds[i])
        an.large["clip_up"], an.large["clip_down"] = float(cl.up[i]), float(cl.down[i])
        an.large_worst["clip_up"], an.large_worst["clip_down"] = float(cl.up[n + i]), float(cl.down[n + i])
        an.large["clip_up_cause"], an.large["clip_down_cause"] = cl.up_cause[i], cl.down_cause[i]


# ------------------------------------------------------------------------------------
# Ratings


def ratings(an: Analysis) -> dict:
    """Resistor power, capacitor voltage and polarity, transistor dissipation.

    ``transistor`` is the first transistor's dissipation (``ref``, ``dissipation`` W at the
    worst corner, ``ambient_max`` K); ``transistors`` the same for every transistor.
    """
    c = an.circuit
    vmax = an.conditions.supply[2]
    res = []
    for e in c.parts:
        if e.kind == "R":
            p_use = an.high.get(f"power:{e.ref}", 0.0)
            fault = vmax**2 / e.value
            rating = power_rating_for(max(2 * p_use, 0.125 * 0.5))
            res.append({"ref": e.ref, "dissipation": p_use, "full_supply": fault, "rating": rating,
                        "full_supply_ok": fault <= rating})
    caps = []
    for e in c.parts:
        if e.kind == "C":
            lo = an.low.get(f"capv:{e.ref}", 0.0)
            hi = an.high.get(f"capv:{e.ref}", 0.0)
            # Positive terminal: the node that is higher at every corner.
            if lo > 0.05:
                plus = 0
            elif hi < -0.05:
                plus = 1
            else:
                plus = None
            need = max(1.5 * vmax, abs(lo), abs(hi))
            caps.append({"ref": e.ref, "dc_min": lo, "dc_max": hi, "plus_node": None if plus is None else e.nodes[plus],
                         "minus_node": None if plus is None else e.nodes[1 - plus],
                         "rating": voltage_rating_for(need), "needs_non_polar": plus is None})
    tmax = an.conditions.ambient[2]
    qs = [{"ref": q.ref, "dissipation": an.high.get(f"pq:{q.ref}", 0.0), "ambient_max": tmax} for q in c.transistors]
    # ``transistor`` is the first one (as before); ``transistors`` lists every one.
    return {"resistors": res, "capacitors": caps, "transistor": qs[0], "transistors": qs}


