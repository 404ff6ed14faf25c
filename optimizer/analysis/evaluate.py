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
import math
from dataclasses import dataclass, field

import numpy as np

from ..catalog.parts import power_rating_for, voltage_rating_for
from ..circuit.build import build_circuit
from ..circuit.netlist import Circuit
from ..physics import T_REF
from . import figures as fig
from .large_signal import clip_limits, swing_at_thd, thd_at_level
from .network import Batch, Network

__all__ = ["Analysis", "Conditions", "analyse", "conditions_of", "SMALL_FIGURES"]

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
LARGE_ROLES = ("bias_top", "bias_bottom", "collector", "emitter", "emitter_bypassed")


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


def _batch_at(circuit: Circuit, points: list[tuple[dict, dict]]) -> Batch:
    """A batch from (global corner, {ref: relative deviation}) pairs."""
    B = len(points)
    b = Batch(B, np.array([g["supply"] for g, _ in points]), np.array([g["temperature"] for g, _ in points]))
    refs = sorted({r for _, d in points for r in d})
    base = {e.ref: e.value for e in circuit.elements}
    for r in refs:
        b.values[r] = np.array([base[r] * (1 + d.get(r, 0.0)) for _, d in points])
    qrefs = sorted({r for g, _ in points for r in g["beta"]})
    for q in qrefs:
        b.beta[q] = np.array([g["beta"][q] for g, _ in points])
    return b


def small_figures(net: Network, batch: Batch) -> tuple[dict[str, np.ndarray], object]:
    """Every small-signal figure of a batch, as (B,) arrays keyed by name.

    Per-input figures are keyed ``gain_db:1``, ``input_impedance:1``, ``low_cutoff:1``,
    ``high_cutoff:1``, ``crosstalk_db:1`` (the largest leak of input 1 into another jack).
    """
    op = net.operating_point(batch)
    small = net.small_signal(op)
    mb = fig.midband(net, op, small)
    lo, hi = fig.cutoffs(net, op, small, ref=np.abs(mb.gain))
    c = net.circuit
    q = c.transistors[0].ref
    e_node = c.element(q).nodes[2]
    out = {
        "vb": op.v[c.element(q).nodes[1]],
        "ve": op.v[e_node],
        "vc": op.v[c.element(q).nodes[0]],
        "ic": op.ic[q],
        "ib": op.ib[q],
        "supply_current": op.supply_current,
        "output_impedance": np.abs(mb.zout),
    }
    out["vce"] = (out["vc"] - out["ve"]) * c.element(q).model.sign
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


def _direction(name: str) -> list[str]:
    base = name.split(":")[0]
    if base in ("vb", "ve", "vc", "ic", "ib", "vce", "gain_db", "supply_current") or base.startswith("capv"):
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
    """Analyse a design over its corners.

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
        else 1 V peak (capped at 80 % of the swing).
    thd_limit
        THD (fraction) at which the swing is measured; default the design's.
    worst_case
        Evaluate the corners (otherwise nominal only).
    """
    circuit = circuit or build_circuit(design)
    net = Network(circuit)
    cond = conditions_of(design, circuit)
    nom_g = {"supply": cond.supply[0], "temperature": cond.ambient[0], "beta": {k: v[0] for k, v in cond.beta.items()}}
    globals_ = cond.globals() if worst_case else []
    parts = sorted(cond.tolerance) if worst_case else []
    # 1. Nominal, global corners, and one-part-at-a-time moves at every global corner.
    points: list[tuple[dict, dict]] = [(nom_g, {})]
    for g in globals_:
        points.append((g, {}))
        for r in parts:
            points.append((g, {r: cond.tolerance[r]}))
    batch = _batch_at(circuit, points)
    vals, (op, small, mb) = small_figures(net, batch)
    names = list(vals)
    nominal = {k: float(v[0]) for k, v in vals.items()}
    low = {k: float(np.min(v)) for k, v in vals.items()}
    high = {k: float(np.max(v)) for k, v in vals.items()}
    arg_lo = {k: points[int(np.argmin(v))] for k, v in vals.items()}
    arg_hi = {k: points[int(np.argmax(v))] for k, v in vals.items()}
    # 2. Worst-case vertices per figure, direction and global corner.
    if worst_case and parts:
        vertices: dict[tuple, tuple[dict, dict]] = {}
        stride = 1 + len(parts)
        for gi, g in enumerate(globals_):
            base = 1 + gi * stride
            for name in names:
                v0 = vals[name][base]
                deltas = np.array([vals[name][base + 1 + j] - v0 for j in range(len(parts))])
                for d in _direction(name):
                    sgn = np.sign(deltas) * (1 if d == "max" else -1)
                    dev = {r: float(s_) * cond.tolerance[r] for r, s_ in zip(parts, sgn) if s_ != 0}
                    key = (gi, tuple(sorted(dev.items())))
                    vertices.setdefault(key, (g, dev))
        vpoints = list(vertices.values())
        if vpoints:
            vb = _batch_at(circuit, vpoints)
            vv, _ = small_figures(net, vb)
            for k in names:
                i_lo, i_hi = int(np.argmin(vv[k])), int(np.argmax(vv[k]))
                if vv[k][i_lo] < low[k]:
                    low[k], arg_lo[k] = float(vv[k][i_lo]), vpoints[i_lo]
                if vv[k][i_hi] > high[k]:
                    high[k], arg_hi[k] = float(vv[k][i_hi]), vpoints[i_hi]
    corner_of = {}
    for k in names:
        for d in _direction(k):
            g, dv = arg_lo[k] if d == "min" else arg_hi[k]
            corner_of[f"{k}:{d}"] = _describe(g, dv, cond)
    an = Analysis(design, circuit, cond, nominal, low, high, corner_of)
    # Noise at nominal.
    op0 = net.operating_point(_batch_at(circuit, [(nom_g, {})]))
    total, contrib = fig.noise(net, op0)
    an.noise = {"output_rms": float(total[0]), "sources": {k: float(v[0]) for k, v in contrib.items()}}
    if large_signal:
        _large(an, net, cond, nom_g, globals_, level if level is not None else design.level,
               thd_limit if thd_limit is not None else design.thd_limit, worst_case)
    return an


def _large(an: Analysis, net: Network, cond: Conditions, nom_g: dict, globals_: list[dict], level, thd_limit, worst_case):
    circuit = net.circuit
    core = [e.ref for e in circuit.parts if e.role in LARGE_ROLES and e.ref in cond.tolerance] if worst_case else []
    points = [(nom_g, {})]
    for g in globals_:
        points.append((g, {}))
        for r in core:
            points.append((g, {r: cond.tolerance[r]}))
    batch = _batch_at(circuit, points)
    op = net.operating_point(batch)
    gain = np.abs(fig.midband(net, op).gain[0])
    sw, _ = swing_at_thd(net, op, thd_limit, gain=gain)
    vpts = []
    if worst_case and core:
        stride = 1 + len(core)
        for gi, g in enumerate(globals_):
            base = 1 + gi * stride
            d = sw[base + 1 : base + 1 + len(core)] - sw[base]
            dev = {r: -float(np.sign(x)) * cond.tolerance[r] for r, x in zip(core, d) if np.sign(x) != 0}
            vpts.append((g, dev))
    allpts = points + vpts
    if vpts:
        vb = _batch_at(circuit, vpts)
        opv = net.operating_point(vb)
        gv = np.abs(fig.midband(net, opv).gain[0])
        swv, _ = swing_at_thd(net, opv, thd_limit, gain=gv)
        sw_all = np.concatenate([sw, swv])
    else:
        opv, gv = None, None
        sw_all = sw
    i_min = int(np.nanargmin(sw_all))
    nominal_swing = float(sw[0])
    worst_swing = float(sw_all[i_min])
    an.large["swing"] = nominal_swing
    an.large_worst["swing"] = worst_swing
    an.large_corner["swing"] = _describe(*allpts[i_min], cond)
    lvl = level if level is not None else min(1.0, 0.8 * worst_swing)
    an.large["thd_level"] = float(lvl)
    an.large["thd_limit"] = float(thd_limit)
    # THD at the level: nominal, and at the worst-swing point (where THD is highest).
    wpt = allpts[i_min]
    both = _batch_at(circuit, [points[0], wpt])
    opb = net.operating_point(both)
    gb = np.abs(fig.midband(net, opb).gain[0])
    th, _ = thd_at_level(net, opb, np.array([lvl, lvl]), gain=gb)
    an.large["thd"] = float(th[0])
    an.large_worst["thd"] = float(th[1])
    an.large_corner["thd"] = an.large_corner["swing"]
    cl = clip_limits(net, opb, gain=gb)
    an.large["clip_up"], an.large["clip_down"] = float(cl.up[0]), float(cl.down[0])
    an.large_worst["clip_up"], an.large_worst["clip_down"] = float(cl.up[1]), float(cl.down[1])
    an.large["clip_up_cause"], an.large["clip_down_cause"] = cl.up_cause[0], cl.down_cause[0]


# ------------------------------------------------------------------------------------
# Ratings


def ratings(an: Analysis) -> dict:
    """Resistor power, capacitor voltage and polarity, transistor dissipation."""
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
    q = c.transistors[0]
    tmax = an.conditions.ambient[2]
    return {"resistors": res, "capacitors": caps,
            "transistor": {"ref": q.ref, "dissipation": an.high.get(f"pq:{q.ref}", 0.0), "ambient_max": tmax}}


def _unused() -> float:  # keeps math and T_REF imported for derating helpers
    return math.pi * T_REF
