"""Monte Carlo: how many builds meet each target when every part is a random draw.

Each sample draws every part value uniformly within its tolerance and the transistor's
beta uniformly within its range, from a seeded generator (``numpy.random.default_rng``),
so the same seed gives the same samples. A sample *meets* a target when it does so at
every combination of the supply and temperature ends (those are conditions of use, not
manufacturing spread). Large-signal figures (swing) are found for the first
``large_samples`` samples only, and their yield is stated over that many.
"""

from __future__ import annotations

import itertools

import numpy as np

from . import figures as fig
from .evaluate import Conditions, small_figures
from .large_signal import swing_at_thd
from .network import Batch, Network

__all__ = ["monte_carlo"]


def _samples(circuit, cond: Conditions, n: int, rng: np.random.Generator) -> tuple[dict, dict]:
    values = {}
    for e in circuit.parts:
        if e.ref in cond.tolerance:
            t = cond.tolerance[e.ref]
            values[e.ref] = e.value * (1 + rng.uniform(-t, t, n))
    beta = {q: rng.uniform(lo, hi, n) if hi > lo else np.full(n, nom) for q, (nom, lo, hi) in cond.beta.items()}
    return values, beta


def monte_carlo(design, circuit, cond: Conditions, n: int, seed: int = 1, spec=None, thd_limit: float = 0.01,
                large_samples: int = 200) -> dict:
    """Run ``n`` samples; return spreads of the main figures and, with a spec, yields."""
    rng = np.random.default_rng(seed)
    net = Network(circuit)
    values, beta = _samples(circuit, cond, n, rng)
    conds = list(itertools.product(sorted({cond.supply[1], cond.supply[2]}), sorted({cond.ambient[1], cond.ambient[2]})))
    per_cond = []
    want_corners = spec is None or spec.targets.low_cutoff_max is not None or spec.targets.high_cutoff_min is not None
    for s, t in conds:
        b = Batch(n, np.full(n, s), np.full(n, t), dict(values), {}, dict(beta))
        vals, _ = small_figures(net, b, corners=want_corners, steps=5)
        per_cond.append(vals)
    ninp = circuit.n_inputs
    keys = [k for k in per_cond[0] if not k.startswith(("power:", "capv:", "pq:"))]
    lo = {k: np.min([pc[k] for pc in per_cond], axis=0) for k in keys}
    hi = {k: np.max([pc[k] for pc in per_cond], axis=0) for k in keys}

    def spread(x):
        q = np.percentile(x, [0.5, 5, 50, 95, 99.5])
        return {"p0.5": float(q[0]), "p5": float(q[1]), "median": float(q[2]), "p95": float(q[3]), "p99.5": float(q[4])}

    out = {"samples": n, "seed": seed, "conditions": [{"supply": s, "ambient_c": t - 273.15} for s, t in conds]}
    out["gain_db"] = [spread(np.concatenate([pc[f"gain_db:{k}"] for pc in per_cond])) for k in range(1, ninp + 1)]
    out["supply_current"] = spread(hi["supply_current"])
    out["input_impedance"] = [spread(lo[f"input_impedance:{k}"]) for k in range(1, ninp + 1)]
    # Large signal on a subsample, at the lowest supply (where swing is smallest).
    m = min(large_samples, n)
    swing = None
    if m > 0:
        sub = Batch(m, np.full(m, cond.supply[1]), np.full(m, cond.ambient[0]),
                    {k: v[:m] for k, v in values.items()}, {}, {k: v[:m] for k, v in beta.items()})
        op = net.operating_point(sub)
        gain = np.abs(fig.midband(net, op).gain[0])
        swing, _ = swing_at_thd(net, op, thd_limit, gain=gain)
        out["swing"] = spread(swing[np.isfinite(swing)]) | {"samples": m, "supply": cond.supply[1]}
        out["swing_samples"] = [float(x) for x in swing]
    out["gain_samples"] = [float(x) for x in per_cond[0]["gain_db:1"][: min(n, 2000)]]
    if spec is not None:
        out["yield"] = _yields(spec, lo, hi, swing, m, ninp)
    return out


def _yields(spec, lo, hi, swing, m, ninp) -> dict:
    t = spec.targets
    y = {}

    def frac(mask):
        return float(np.mean(mask))

    if t.gain is not None:
        ok = np.ones_like(lo["supply_current"], dtype=bool)
        for k in range(1, ninp + 1):
            ok &= (lo[f"gain_db:{k}"] >= t.gain.min) & (hi[f"gain_db:{k}"] <= t.gain.max)
        y["gain"] = frac(ok)
    if t.input_impedance_min is not None:
        y["input impedance"] = frac(np.all([lo[f"input_impedance:{k}"] >= t.input_impedance_min for k in range(1, ninp + 1)], axis=0))
    if t.low_cutoff_max is not None:
        y["low cutoff"] = frac(np.all([hi[f"low_cutoff:{k}"] <= t.low_cutoff_max for k in range(1, ninp + 1)], axis=0))
    if t.high_cutoff_min is not None:
        y["high cutoff"] = frac(np.all([lo[f"high_cutoff:{k}"] >= t.high_cutoff_min for k in range(1, ninp + 1)], axis=0))
    if t.supply_current_max is not None:
        y["supply current"] = frac(hi["supply_current"] <= t.supply_current_max)
    if t.output_impedance_max is not None:
        y["output impedance"] = frac(hi["output_impedance"] <= t.output_impedance_max)
    need = t.required_swing()
    if need is not None and swing is not None:
        y["headroom" if t.headroom_min is not None else "swing"] = frac(np.nan_to_num(swing, nan=0.0) >= need)
        y["large_signal_samples"] = m
    return y
