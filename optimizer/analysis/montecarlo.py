"""Monte Carlo: how many builds meet each target when every part is a random draw.

Each sample draws every part value uniformly within its tolerance and the transistor's
beta uniformly within its range, from a seeded generator (``numpy.random.default_rng``),
so the same seed gives the same samples. A sample *meets* a target when it does so at
every combination of the supply and temperature ends (those are conditions of use, not
manufacturing spread). Large-signal figures (swing) are found for the first
``large_samples`` samples only, and their yield is stated over that many; they are found
with :data:`MC_HARMONICS` harmonics (the full check uses 20).

The supply/temperature ends and the large-signal chunks run on :data:`WORKERS` threads
(numpy releases the interpreter lock in its batched linear algebra and array arithmetic);
each piece is computed the same way whatever the number of threads, so the result does not
depend on it.
"""

from __future__ import annotations

import itertools
import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from . import figures as fig
from .evaluate import Conditions, small_figures
from .large_signal import swing_at_thd
from .network import Batch, Network

__all__ = ["MC_HARMONICS", "WORKERS", "monte_carlo"]

#: Harmonics of the large-signal solution in the Monte Carlo. Ten cover the nine the THD
#: counts; on the benchmark design's 200 samples the swing came within 0.4 % of the
#: 20-harmonic figure (tests/test_fast_paths.py checks it stays within 1 %).
MC_HARMONICS = 10
#: Threads the Monte Carlo runs on.
WORKERS = max(1, min(4, os.cpu_count() or 1))


def _samples(circuit, cond: Conditions, n: int, rng: np.random.Generator) -> tuple[dict, dict]:
    values = {}
    for e in circuit.parts:
        if e.ref in cond.tolerance:
            t = cond.tolerance[e.ref]
            values[e.ref] = e.value * (1 + rng.uniform(-t, t, n))
    beta = {q: rng.uniform(lo, hi, n) if hi > lo else np.full(n, nom) for q, (nom, lo, hi) in cond.beta.items()}
    return values, beta


def monte_carlo(design, circuit, cond: Conditions, n: int, seed: int = 1, spec=None, thd_limit: float = 0.01,
                large_samples: int = 200, workers: int | None = None) -> dict:
    """Run ``n`` samples; return spreads of the main figures and, with a spec, yields."""
    rng = np.random.default_rng(seed)
    net = Network(circuit)
    values, beta = _samples(circuit, cond, n, rng)
    conds = list(itertools.product(sorted({cond.supply[1], cond.supply[2]}), sorted({cond.ambient[1], cond.ambient[2]})))
    # The −3 dB corners only feed yields (the spreads reported are of gain, current,
    # impedance and swing), so they are found only when the spec has a corner target.
    want_corners = spec is not None and (spec.targets.low_cutoff_max is not None
                                         or spec.targets.high_cutoff_min is not None)
    m = min(large_samples, n)
    workers = WORKERS if workers is None else max(1, workers)

    def small(sc):
        s, t = sc
        b = Batch(n, np.full(n, s), np.full(n, t), dict(values), {}, dict(beta))
        return small_figures(net, b, corners=want_corners)[0]

    def large(lo, hi):
        # Large signal at the lowest supply (where swing is smallest).
        sub = Batch(hi - lo, np.full(hi - lo, cond.supply[1]), np.full(hi - lo, cond.ambient[0]),
                    {k: v[lo:hi] for k, v in values.items()}, {}, {k: v[lo:hi] for k, v in beta.items()})
        op = net.operating_point(sub)
        gain = np.abs(fig.midband(net, op).gain[0])
        return swing_at_thd(net, op, thd_limit, gain=gain, H=MC_HARMONICS)[0]

    # Fixed chunks (not one per thread), so the pieces are the same on any machine.
    edges = np.linspace(0, m, -(-m // LARGE_CHUNK) + 1).astype(int) if m > 0 else np.array([0])
    with ThreadPoolExecutor(workers) as pool:
        large_jobs = [pool.submit(large, a, b) for a, b in zip(edges[:-1], edges[1:])]
        per_cond = list(pool.map(small, conds))
        swing = np.concatenate([j.result() for j in large_jobs]) if m > 0 else None
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
    if swing is not None:
        out["swing"] = spread(swing[np.isfinite(swing)]) | {"samples": m, "supply": cond.supply[1]}
        out["swing_samples"] = [float(x) for x in swing]
    out["gain_samples"] = [float(x) for x in per_cond[0]["gain_db:1"][: min(n, 2000)]]
    if spec is not None:
        out["yield"] = _yields(spec, lo, hi, swing, m, ninp)
    return out


#: Samples per large-signal job.
LARGE_CHUNK = 50


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
