#!/usr/bin/env python
"""stagefit benchmarks: analysis speed, search against enumeration, rounding against
continuous optimisation, how the search grows with the size of its space, and its two
timing targets.

    python benchmarks/run.py [analysis|search|rounding|growth|targets|all ...] [--quick] [--json FILE]

Every part prints a table (to stderr when the JSON goes to stdout with ``--json -``) and
puts its figures into one JSON document. ``--quick`` shrinks every part so that the whole
run takes a few minutes; it checks that everything works end to end, and its figures are
indicative only. See benchmarks/README.md for what each part measures.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
SPECS = ROOT / "specs"
BENCH_SPECS = HERE / "specs"
DESIGNS = HERE / "designs"

PARTS = ("analysis", "search", "rounding", "growth", "targets")


def _early_args(argv):
    """The BLAS thread count has to be fixed before numpy is imported."""
    threads = "1"
    for i, a in enumerate(argv):
        if a == "--blas-threads" and i + 1 < len(argv):
            threads = argv[i + 1]
        elif a.startswith("--blas-threads="):
            threads = a.split("=", 1)[1]
    if threads != "keep":
        for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ[var] = threads
    return threads


_BLAS_THREADS = _early_args(sys.argv[1:])
sys.path.insert(0, str(ROOT))

import dataclasses  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import platform  # noqa: E402
import random  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from optimizer.analysis import figures as fig  # noqa: E402
from optimizer.analysis.evaluate import analyse, analyse_many, ratings  # noqa: E402
from optimizer.analysis.montecarlo import monte_carlo  # noqa: E402
from optimizer.analysis.network import Batch, Network  # noqa: E402
from optimizer.analysis.targets import ACTIVE_IC, ACTIVE_VCE, design_margin, judge  # noqa: E402
from optimizer.catalog.parts import default_capacitor_type  # noqa: E402
from optimizer.catalog.series import get_series  # noqa: E402
from optimizer.catalog.transistors import transistor_types  # noqa: E402
from optimizer.circuit.topologies import Placed, get_topology  # noqa: E402
from optimizer.errors import ConvergenceError  # noqa: E402
from optimizer.errors import FileProblems  # noqa: E402
from optimizer.search import clock  # noqa: E402
from optimizer.search.candidates import build_candidates  # noqa: E402
from optimizer.search.enumerate import enumerate_designs, space_size  # noqa: E402
from optimizer.search.model import sizing_rule_ok  # noqa: E402
from optimizer.search.solve import rank_key, search  # noqa: E402

try:  # the reported ranking (ties within TIE of the leader go to the simpler design)
    from optimizer.search.solve import rank as _rank  # noqa: E402
except ImportError:  # older tree: the sort key alone
    def _rank(vs):
        return sorted(vs, key=rank_key)
from optimizer.spec.designfile import Design, load_design  # noqa: E402
from optimizer.spec.specfile import GainTarget, InputSpec, load_spec  # noqa: E402
from optimizer.spec.stockfile import load_stock  # noqa: E402

TOPOLOGY = "divider-ce"
T_NOMINAL = 298.15


# ------------------------------------------------------------------------------------
# Output helpers


class Out:
    """Tables for people (stdout, or stderr when the JSON goes to stdout)."""

    def __init__(self, stream):
        self.stream = stream

    def say(self, text: str = "") -> None:
        print(text, file=self.stream, flush=True)

    def table(self, title: str, header: list[str], rows: list[list], note: str | None = None) -> None:
        cells = [[_cell(c) for c in r] for r in rows]
        widths = [max(len(h), *(len(r[i]) for r in cells)) if cells else len(h) for i, h in enumerate(header)]
        self.say()
        self.say(title)
        self.say("  " + "  ".join(h.ljust(w) for h, w in zip(header, widths)))
        self.say("  " + "  ".join("-" * w for w in widths))
        for r in cells:
            self.say("  " + "  ".join(c.rjust(w) if _numeric(c) else c.ljust(w) for c, w in zip(r, widths)))
        if note:
            for line in note.splitlines():
                self.say("  " + line)


def _cell(x) -> str:
    if x is None:
        return "-"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, float):
        if math.isnan(x):
            return "nan"
        if math.isinf(x):
            return "inf" if x > 0 else "-inf"
        a = abs(x)
        if a != 0 and (a >= 1e5 or a < 1e-3):
            return f"{x:.3g}"
        return f"{x:.4g}" if a >= 100 else f"{x:.3f}"
    return str(x)


def _numeric(s: str) -> bool:
    try:
        float(s.replace(",", "").rstrip("×%s"))
        return True
    except ValueError:
        return s in ("-", "inf", "-inf", "nan")


def _clean(x):
    """JSON-safe: non-finite floats become null, numpy scalars become Python numbers."""
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if isinstance(x, (np.floating, float)):
        x = float(x)
        return x if math.isfinite(x) else None
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.bool_):
        return bool(x)
    if isinstance(x, Path):
        return str(x.relative_to(ROOT)) if x.is_relative_to(ROOT) else str(x)
    return x


def best_of(fn, repeats: int, warmup: bool = True):
    """(best seconds, every repeat's seconds, the last result) after one warm-up call."""
    if warmup:
        fn()
    times, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), times, out


def _fmt_value(v: float, kind: str) -> str:
    unit = "F" if kind == "C" else ""
    for scale, prefix in ((1e6, "M"), (1e3, "k"), (1, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p")):
        if abs(v) >= scale * 0.9999:
            return f"{v / scale:.3g}{prefix}{unit}"
    return f"{v:.3g}{unit}"


def _needs_large(spec) -> bool:
    """The rule verify() applies: large-signal figures when a target needs them."""
    return spec.targets.required_swing() is not None or any(i.max_level is not None for i in spec.inputs)


def _values_of(v) -> tuple:
    """A verified design as what it is made of: transistor and every part's value."""
    return (v.design.transistor, tuple((p.role, p.input, round(p.value, 15)) for p in v.design.parts))


def _design_text(v) -> str:
    short = {"bias_top": "R1", "bias_bottom": "R2", "collector": "RC", "emitter": "RE", "emitter_bypassed": "REb",
             "input_series": "Rin", "input_cap": "Cin", "bypass_cap": "CE", "output_cap": "Co"}
    parts = []
    for p in v.design.parts:
        if p.role.endswith("cap"):
            continue
        name = short.get(p.role, p.role) + (str(p.input) if p.input and p.role == "input_series" else "")
        parts.append(f"{name}={_fmt_value(p.value, 'R')}")
    return " ".join(parts)


# ------------------------------------------------------------------------------------
# 1. analysis


def _role_ranges():
    return {r.name: (r.lo, r.hi) for r in get_topology(TOPOLOGY).ROLES}


def _full_stage(n_inputs: int, model, supply: float = 9.0, load_r: float = 10e3, load_c: float = 0.0):
    """A divider-ce circuit with every role present (values are replaced per batch)."""
    parts = [Placed("R1", "bias_top", 47e3), Placed("R2", "bias_bottom", 10e3), Placed("R3", "collector", 4.7e3),
             Placed("R4", "emitter", 470.0), Placed("R5", "emitter_bypassed", 1e3)]
    parts += [Placed(f"R{6 + k}", "input_series", 10e3, k + 1) for k in range(n_inputs)]
    parts += [Placed(f"C{1 + k}", "input_cap", 10e-6, k + 1, 0.2) for k in range(n_inputs)]
    parts += [Placed(f"C{1 + n_inputs}", "bypass_cap", 100e-6, None, 0.2),
              Placed(f"C{2 + n_inputs}", "output_cap", 10e-6, None, 0.2)]
    return get_topology(TOPOLOGY).build(parts, [1e3] * n_inputs, load_r, load_c, model, supply)


def bench_batch(quick: bool, out: Out) -> dict:
    n = 20_000 if quick else 200_000
    chunk = 20_000
    model = transistor_types()["2N3904"].model()
    circuit = _full_stage(1, model)
    net = Network(circuit)
    ranges = _role_ranges()
    rng = np.random.default_rng(12345)
    values = {}
    for e in circuit.parts:
        if e.kind in ("R", "C"):
            lo, hi = ranges[e.role]
            values[e.ref] = np.exp(rng.uniform(math.log(lo), math.log(hi), n))
    batches = []
    for s in range(0, n, chunk):
        m = min(chunk, n - s)
        b = Batch.repeat(9.0, T_NOMINAL, m)
        b.values = {k: v[s : s + m] for k, v in values.items()}
        batches.append(b)
    q = circuit.transistors[0]
    c_node, e_node = q.nodes[0], q.nodes[2]

    def run():
        t_dc = t_mid = 0.0
        active = 0
        iters = 0
        for b in batches:
            t0 = time.perf_counter()
            op = net.operating_point(b)
            t1 = time.perf_counter()
            mb = fig.midband(net, op)
            t2 = time.perf_counter()
            t_dc += t1 - t0
            t_mid += t2 - t1
            vce = op.v[c_node] - op.v[e_node]
            active += int(np.sum((vce >= ACTIVE_VCE) & (op.ic[q.ref] >= ACTIVE_IC)))
            iters = max(iters, op.iterations)
            _ = (mb.gain, mb.zin, mb.zout)
        return t_dc, t_mid, active, iters

    repeats = 3
    run()  # warm-up
    results = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        r = run()
        results.append((time.perf_counter() - t0, r))
    best_t, (t_dc, t_mid, active, iters) = min(results, key=lambda x: x[0])
    rate = n / best_t
    res = {"candidates": n, "chunk": chunk, "repeats": repeats, "seconds": best_t,
           "seconds_all": [r[0] for r in results], "dc_seconds": t_dc, "midband_seconds": t_mid,
           "candidates_per_second": rate, "target_per_second": 200_000, "meets_target": rate >= 200_000,
           "active_fraction": active / n, "max_newton_iterations": iters,
           "values": "log-uniform in each divider-ce role's range, 1 input, all roles present",
           "corner": "9 V, 25 °C, nominal beta", "transistor": "2N3904"}
    return res


def _check_design():
    return load_design(DESIGNS / "duo-mixer.yaml"), load_spec(SPECS / "street-duo-mixer.yaml")


def bench_check(quick: bool, out: Out) -> dict:
    design, spec = _check_design()

    def full():
        an = analyse(design, large_signal=True)
        rt = ratings(an)
        res = judge(an, spec)
        return an, rt, res

    def small():
        return analyse(design, large_signal=False)

    repeats = 3
    best, times, (an, _rt, res) = best_of(full, repeats)
    best_small, _, _ = best_of(small, repeats, warmup=False)
    return {"design": DESIGNS / "duo-mixer.yaml", "spec": SPECS / "street-duo-mixer.yaml", "inputs": design.n_inputs,
            "seconds": best, "seconds_all": times, "small_signal_seconds": best_small,
            "large_signal_seconds": best - best_small, "target_seconds": 1.0, "meets_target": best < 1.0,
            "margin": design_margin(res), "swing_worst": an.large_worst.get("swing"),
            "thd_worst": an.large_worst.get("thd")}


def bench_montecarlo(quick: bool, out: Out) -> dict:
    design, spec = _check_design()
    an = analyse(design, large_signal=False)
    n = 10_000  # the target's size, --quick too (it takes about a second)
    repeats = 3

    def run(sp=spec):
        return monte_carlo(design, an.circuit, an.conditions, n, 1, sp, design.thd_limit)

    best, times, mc = best_of(run, repeats)
    # The same without the −3 dB corners (a spec with no cutoff targets skips them).
    no_corners = dataclasses.replace(spec, targets=dataclasses.replace(spec.targets, low_cutoff_max=None,
                                                                       high_cutoff_min=None))
    best_nc, _, _ = best_of(lambda: run(no_corners), 1, warmup=False)
    return {"samples": n, "large_signal_samples": mc.get("yield", {}).get("large_signal_samples"),
            "repeats": repeats, "seconds": best, "seconds_all": times, "seconds_without_corners": best_nc,
            "samples_per_second": n / best, "target_seconds": 1.0, "meets_target": best < 1.0 and n >= 10_000,
            "yield": mc.get("yield")}


def part_analysis(quick: bool, out: Out) -> dict:
    out.say("== analysis ==")
    a = bench_batch(quick, out)
    b = bench_check(quick, out)
    c = bench_montecarlo(quick, out)
    rows = [
        ["batched DC + mid-band", f"{a['candidates']} candidates", f"{a['seconds']:.3f} s",
         f"{a['candidates_per_second']:,.0f} /s", "≥ 200,000 /s", a["meets_target"]],
        ["  of which DC", "", f"{a['dc_seconds']:.3f} s", f"{a['candidates'] / a['dc_seconds']:,.0f} /s", "", None],
        ["full check, THD", f"{b['inputs']}-input design", f"{b['seconds']:.3f} s", "", "< 1 s", b["meets_target"]],
        ["  of which small-signal", "", f"{b['small_signal_seconds']:.3f} s", "", "", None],
        ["Monte Carlo", f"{c['samples']} samples", f"{c['seconds']:.3f} s", f"{c['samples_per_second']:,.0f} /s",
         "< 1 s (10,000)", c["meets_target"]],
        ["  without −3 dB corners", "", f"{c['seconds_without_corners']:.3f} s", "", "", None],
    ]
    out.table("analysis (best of 3 after a warm-up)" if not quick else "analysis (quick: smaller sizes)",
              ["measure", "size", "time", "rate", "target", "met"], rows,
              note=f"{a['active_fraction'] * 100:.0f} % of the random candidates are in the active region; "
                   f"BLAS threads: {_BLAS_THREADS}")
    return {"batch": a, "check": b, "monte_carlo": c}


# ------------------------------------------------------------------------------------
# 2. search against enumeration

SEARCH_SPECS = ("pad-buffer", "sensor-pad", "usb-attenuator")


def _shrunk(spec, values: int):
    """The spec with its resistor range cut to the top ``values`` values of its series."""
    s = get_series(spec.parts.resistor_series)
    vals = s.values_between(spec.parts.resistor_min, spec.parts.resistor_max)
    lo = vals[-min(values, len(vals))]
    return dataclasses.replace(spec, parts=dataclasses.replace(spec.parts, resistor_min=lo))


def _reference_top(enumerated, k):
    """The enumeration's top K under the search's own ranking (ties within TIE go to simpler),
    distinct by values as the search reports them."""
    seen, out = set(), []
    for v in _rank([v for v in enumerated if v.margin >= 0]):
        key = _values_of(v)
        if key not in seen:
            seen.add(key)
            out.append(v)
    return out[:k]


def part_search(quick: bool, out: Out) -> dict:
    out.say("== search against exhaustive enumeration ==")
    limit = 20.0 if quick else 60.0
    results = []
    for name in SEARCH_SPECS:
        spec = load_spec(BENCH_SPECS / f"{name}.yaml")
        if quick:
            spec = _shrunk(spec, 3)
        cands = build_candidates(spec, TOPOLOGY)
        size = space_size(spec, cands)
        free = [s.key[0] for s in cands.slots if len([i for i in s.items if not i.absent]) > 1]
        k = spec.search.top
        t0 = time.perf_counter()
        r = search(spec, top=k, time_limit=limit)
        t_search = time.perf_counter() - t0
        t0 = time.perf_counter()
        enumerated = enumerate_designs(spec, cands, chunk=2000, large_signal=_needs_large(spec))
        t_enum = time.perf_counter() - t0
        ref = _reference_top(enumerated, k)
        passing = sum(1 for v in enumerated if v.margin >= 0)
        # Best margin: the largest found (the first design reported may be a simpler one
        # within TIE of it).
        got_best = max((v.margin for v in r.designs), default=None)
        want_best = max((v.margin for v in enumerated if v.margin >= 0), default=None)
        best_ok = (got_best is None and want_best is None) or (
            got_best is not None and want_best is not None and abs(got_best - want_best) <= 1e-9)
        first_ok = bool(r.designs) == bool(ref) and (not ref or _values_of(r.designs[0]) == _values_of(ref[0]))
        topk_ok = len(r.designs) == len(ref) and all(
            _values_of(a) == _values_of(b) and abs(a.margin - b.margin) <= 1e-9 for a, b in zip(r.designs, ref))
        # Each design the search reports, looked up in the enumeration (same evaluator).
        by_values = {_values_of(v): v.margin for v in enumerated}
        consistent = all(abs(by_values.get(_values_of(v), math.nan) - v.margin) <= 1e-9 for v in r.designs)
        results.append({
            "spec": BENCH_SPECS / f"{name}.yaml", "resistor_range": [spec.parts.resistor_min, spec.parts.resistor_max],
            "free_roles": free, "space": size, "passing": passing, "top": k, "status": r.status,
            "search_seconds": t_search, "enumeration_seconds": t_enum,
            "speedup": t_enum / t_search if t_search > 0 else None,
            "best_margin_search": got_best, "best_margin_enumeration": want_best, "best_equal": best_ok,
            "first_design_equal": first_ok,
            "top_k_equal": topk_ok, "search_margins_match_enumeration": consistent,
            "search_top": [{"margin": v.margin, "design": _design_text(v)} for v in r.designs],
            "enumeration_top": [{"margin": v.margin, "design": _design_text(v)} for v in ref],
            "stats": r.stats, "notes": r.notes,
        })
    rows = [[r["spec"].stem, r["space"], r["passing"], r["status"], r["best_margin_search"], r["best_margin_enumeration"],
             r["best_equal"], r["first_design_equal"], r["top_k_equal"], f"{r['search_seconds']:.2f}",
             f"{r['enumeration_seconds']:.1f}",
             f"{r['speedup']:.0f}×" if r["speedup"] else "-"] for r in results]
    out.table("search against enumeration (E12, six free resistor roles, one transistor)",
              ["spec", "designs", "pass", "status", "best (search)", "best (enum.)", "best =", "1st =", "top-K =",
               "search s", "enum. s", "ratio"], rows,
              note="target: the same optimum and top K, search ≥ 100× faster than enumeration\n"
                   "best = : largest margin equal; 1st = : same first design; top-K = : same K designs, same order "
                   "(the search's ranking)"
                   + ("\nquick: each resistor range cut to its top three values" if quick else ""))
    for r in results:
        if not r["top_k_equal"]:
            out.say(f"  {r['spec'].stem}: search top-K {[(round(d['margin'], 4), d['design']) for d in r['search_top']]}")
            out.say(f"  {r['spec'].stem}: enumeration top-K {[(round(d['margin'], 4), d['design']) for d in r['enumeration_top']]}")
    return {"time_limit": limit, "specs": results,
            "all_equal": all(r["best_equal"] and r["first_design_equal"] and r["top_k_equal"] for r in results),
            "min_speedup": min((r["speedup"] for r in results if r["speedup"]), default=None)}


# ------------------------------------------------------------------------------------
# 3. rounding against continuous optimisation

ROUNDING_BASES = ("street-duo-mixer", "rehearsal-line-driver", "classroom-line-stage")


def generated_specs(n: int, seed: int) -> list[tuple[object, dict]]:
    """``n`` specs around the bundled examples, varied deterministically from ``seed``.

    Gain window moved by up to ±4 dB, input impedance ×0.5..2, supply current ×0.6..1.6,
    nominal supply one of 5, 9, 12 V (range scaled with it), headroom ±3 dB. Standard
    values only (no stock), one transistor type.
    """
    bases = [load_spec(SPECS / f"{b}.yaml") for b in ROUNDING_BASES]
    rng = random.Random(seed)
    out = []
    for i in range(n):
        base = bases[i % len(bases)]
        t = base.targets
        dg = round(rng.uniform(-4, 4), 1)
        zin = t.input_impedance_min * 2 ** rng.uniform(-1, 1)
        cur = t.supply_current_max * rng.uniform(0.6, 1.6)
        vs = rng.choice((5.0, 9.0, 12.0))
        dh = round(rng.uniform(-3, 3), 1)
        head = max(0.0, t.headroom_min + dh)
        targets = dataclasses.replace(t, gain=GainTarget(t.gain.min + dg, t.gain.max + dg), input_impedance_min=zin,
                                      supply_current_max=cur, headroom_min=head)
        parts = dataclasses.replace(base.parts, use="series-only", stock=None, transistors=("2N3904",))
        spec = dataclasses.replace(base, name=f"{base.name}-v{i + 1:02d}", targets=targets, parts=parts,
                                   supply=base.supply.scaled(vs), search=dataclasses.replace(base.search, top=1),
                                   topologies=(TOPOLOGY,))
        out.append((spec, {"base": base.name, "gain_db": [targets.gain.min, targets.gain.max],
                           "input_impedance_min": zin, "supply_current_max": cur, "supply": vs,
                           "headroom_min_db": head, "inputs": len(spec.inputs)}))
    return out


class Continuous:
    """A spec's divider-ce stage with every role present, as a function of log-values."""

    def __init__(self, spec):
        self.spec = spec
        n = len(spec.inputs)
        pp = spec.parts
        ranges = _role_ranges()
        roles = [("bias_top", None), ("bias_bottom", None), ("collector", None), ("emitter", None),
                 ("emitter_bypassed", None)] + [("input_series", k) for k in range(1, n + 1)]
        caps = [("input_cap", k) for k in range(1, n + 1)] + [("bypass_cap", None), ("output_cap", None)]
        self.slots = []  # (ref, role, input, kind, lo, hi)
        for i, (role, k) in enumerate(roles):
            lo, hi = ranges[role]
            self.slots.append((f"R{i + 1}", role, k, "R", max(lo, pp.resistor_min), min(hi, pp.resistor_max)))
        for i, (role, k) in enumerate(caps):
            lo, hi = ranges[role]
            self.slots.append((f"C{i + 1}", role, k, "C", max(lo, pp.capacitor_min), min(hi, pp.capacitor_max)))
        self.bounds = [(math.log(lo), math.log(hi)) for *_, lo, hi in self.slots]
        name = spec.parts.transistors[0]
        self.transistor = (name, transistor_types()[name].model())
        self.large = _needs_large(spec)
        self.evaluations = 0
        self.large_evaluations = 0

    def start(self) -> np.ndarray:
        """A rule-of-thumb starting point (log-values): collector current at 60 % of the
        current budget, emitter at 15 % of the lowest supply, collector midway, a stiff
        divider, series resistors from the input impedance, the unbypassed emitter resistor
        from the gain window's centre, capacitors from the low corner."""
        spec = self.spec
        t = spec.targets
        n = len(spec.inputs)
        model = self.transistor[1]
        beta = model.beta_min or model.beta
        vs = spec.supply.min
        i_max = t.supply_current_max or 2e-3
        ic = 0.6 * i_max
        ve = 0.15 * vs
        re_total = ve / ic
        rc = (vs - ve) / (2 * ic)
        i_div = max(ic / 20, 10 * ic / beta)
        r2 = (ve + 0.65) / i_div
        r1 = (vs - ve - 0.65) / i_div
        rs = [max(i.source_resistance, 1.0) for i in spec.inputs]
        zin = t.input_impedance_min or 10e3
        rin = max(1.2 * zin, 1e3)
        g = 10 ** ((t.gain.centre if t.gain else 0.0) / 20)
        rl = spec.load.resistance
        rload = rc * rl / (rc + rl)
        re1 = re_total / 2
        for _ in range(3):
            zb = 1 / (1 / r1 + 1 / r2 + 1 / (beta * re1))
            if n > 1:
                zb = 1 / (1 / zb + (n - 1) / (rin + rs[0]))
            k = zb / (rs[0] + rin + zb)
            re1 = min(max(rload * k / g, 1.0), 0.9 * re_total)
        re2 = max(re_total - re1, 10.0)
        f = (t.low_cutoff_max or 20.0) / 3
        cin = 1 / (2 * math.pi * f * (rs[0] + rin))
        cout = 1 / (2 * math.pi * f * rl)
        ce = 1 / (2 * math.pi * f * (re1 + 0.026 / ic))
        by_role = {"bias_top": r1, "bias_bottom": r2, "collector": rc, "emitter": re1, "emitter_bypassed": re2,
                   "input_series": rin, "input_cap": cin, "bypass_cap": ce, "output_cap": cout}
        x = [min(max(math.log(by_role[role]), lo), hi)
             for (_, role, *_r), (lo, hi) in zip(self.slots, self.bounds)]
        return np.array(x)

    def design(self, values) -> Design:
        pp, spec = self.spec.parts, self.spec
        parts = []
        for (ref, role, k, kind, _, _), v in zip(self.slots, values):
            tol = pp.resistor_tolerance if kind == "R" else pp.capacitor_tolerance
            typ = default_capacitor_type(v) if kind == "C" else ""
            parts.append(Placed(ref, role, float(v), k, tol, typ, 1.0, "log"))
        return Design(topology=TOPOLOGY, supply=spec.supply, ambient=spec.ambient, load=spec.load,
                      transistor=self.transistor[0], model=self.transistor[1],
                      sources=tuple(i.source_resistance for i in spec.inputs), parts=tuple(parts),
                      thd_limit=spec.targets.distortion_max, level=spec.targets.required_swing(),
                      input_names=tuple(i.name for i in spec.inputs), spec_path=spec.path)

    def rounded(self, values) -> list[float]:
        rs, cs = get_series(self.spec.parts.resistor_series), get_series(self.spec.parts.capacitor_series)
        return [(rs if kind == "R" else cs).nearest(float(v)) for (_, _, _, kind, _, _), v in zip(self.slots, values)]

    def _analyse(self, designs, large: bool, chunk: int):
        """Analyses, None for a design whose operating point was not found."""
        out = []
        for s in range(0, len(designs), chunk):
            part = designs[s : s + chunk]
            try:
                out += analyse_many(part, large_signal=large)
            except ConvergenceError:
                if len(part) == 1:
                    out.append(None)
                else:
                    out += self._analyse(part, large, 1)
        return out

    def verdict(self, values):
        """(margin, target results) with the search's own analysis and margin function."""
        an = self._analyse([self.design(values)], self.large, 1)[0]
        if an is None:
            return -math.inf, []
        res = judge(an, self.spec)
        return design_margin(res), res

    def margins(self, X, floor: float) -> np.ndarray:
        """Design margins of many log-value vectors (rows of X).

        The small-signal margin (large-signal targets left out) is never below the full
        margin. Large-signal figures are found only for designs whose small-signal margin
        reaches ``floor``; the others keep the small-signal margin, which is below the floor,
        so no design at or above the floor is misjudged.
        """
        designs = [self.design(np.exp(x)) for x in X]
        self.evaluations += len(designs)
        ans = self._analyse(designs, False, 48)
        m = np.array([design_margin(judge(a, self.spec)) if a is not None else -math.inf for a in ans])
        if self.large:
            idx = [i for i in range(len(designs)) if m[i] >= floor]
            self.large_evaluations += len(idx)
            full = self._analyse([designs[i] for i in idx], True, 4)
            for i, a in zip(idx, full):
                m[i] = design_margin(judge(a, self.spec)) if a is not None else -math.inf
        return np.where(np.isfinite(m), m, -10.0)


def optimise_continuous(spec, quick: bool, seed: int) -> dict:
    """Maximise the design margin over continuous values (log scale) with scipy."""
    from scipy.optimize import differential_evolution, minimize

    prob = Continuous(spec)
    D = len(prob.bounds)
    best = {"m": -math.inf}

    def f(XT):
        X = np.atleast_2d(XT.T) if XT.ndim == 2 else XT[None, :]
        floor = max(-0.3, best["m"] - 0.02)
        m = prob.margins(X, floor)
        i = int(np.argmax(m))
        if m[i] > best["m"]:
            best["m"] = float(m[i])
        return -m if XT.ndim == 2 else float(-m[0])

    popsize = 4 if quick else 6
    maxiter = 6 if quick else 30
    # Initial population: a quarter around the rule-of-thumb start (log-normal, σ = 0.3),
    # the rest a Latin hypercube over the bounds.
    rng = np.random.default_rng(seed)
    S = popsize * D
    lo = np.array([b[0] for b in prob.bounds])
    hi = np.array([b[1] for b in prob.bounds])
    x0 = prob.start()
    near = x0 + rng.normal(0.0, 0.3, (S // 4, D))
    near[0] = x0
    cube = (rng.permuted(np.tile(np.arange(S - S // 4), (D, 1)), axis=1).T + rng.random((S - S // 4, D))) / (S - S // 4)
    init = np.clip(np.vstack([near, lo + cube * (hi - lo)]), lo, hi)
    t0 = time.perf_counter()
    de = differential_evolution(f, prob.bounds, popsize=popsize, maxiter=maxiter, seed=seed, polish=False,
                                vectorized=True, updating="deferred", init=init, tol=1e-6, atol=0,
                                mutation=(0.5, 1.0), recombination=0.7)
    x = de.x
    evals_de = prob.evaluations
    polished = False
    if not quick:
        # Nelder–Mead from the best point (±5 % on each value), full margin every step.
        simplex = np.vstack([x] + [x + 0.05 * np.eye(D)[j] for j in range(D)])

        def g(xx):
            xx = np.clip(xx, lo, hi)
            return float(-prob.margins(xx[None, :], -math.inf)[0])

        nm = minimize(g, x, method="Nelder-Mead",
                      options={"initial_simplex": np.clip(simplex, lo, hi), "maxfev": 80, "xatol": 1e-3, "fatol": 1e-4})
        if nm.fun < de.fun:
            x, polished = np.clip(nm.x, lo, hi), True
    seconds = time.perf_counter() - t0
    values = list(np.exp(x))
    m_cont, res_cont = prob.verdict(values)
    rvals = prob.rounded(values)
    m_round, res_round = prob.verdict(rvals)
    passed_cont = {r.name for r in res_cont if r.passed}
    broke = sorted(r.name for r in res_round if not r.passed and r.name in passed_cont)
    sources = [i.source_resistance for i in spec.inputs]
    pr = {(role, k): (v, spec.parts.resistor_tolerance if kind == "R" else spec.parts.capacitor_tolerance)
          for (_, role, k, kind, _, _), v in zip(prob.slots, rvals)}
    return {"continuous_margin": m_cont, "rounded_margin": m_round,
            "rounding_broke": m_cont >= 0 and m_round < 0, "targets_broken": broke,
            "continuous_values": {ref: v for (ref, *_), v in zip(prob.slots, values)},
            "rounded_values": {ref: v for (ref, *_), v in zip(prob.slots, rvals)},
            "rounded_meets_sizing_rule": sizing_rule_ok(spec, pr, sources),
            "continuous_seconds": seconds, "evaluations": prob.evaluations, "evaluations_de": evals_de,
            "large_signal_evaluations": prob.large_evaluations, "polished": polished,
            "start_margin": prob.verdict(list(np.exp(x0)))[0],
            "de": {"popsize": popsize, "maxiter": maxiter, "dimensions": D, "message": de.message}}


def part_rounding(quick: bool, out: Out, seed: int) -> dict:
    out.say("== rounding against continuous optimisation ==")
    n = 3 if quick else 21
    limit = 10.0 if quick else 30.0
    rows, results = [], []
    for spec, params in generated_specs(n, seed):
        r = optimise_continuous(spec, quick, seed)
        t0 = time.perf_counter()
        sr = search(spec, top=1, time_limit=limit)
        t_s = time.perf_counter() - t0
        r.update({"spec": spec.name, "parameters": params, "search_status": sr.status,
                  "search_margin": sr.designs[0].margin if sr.designs else None, "search_seconds": t_s})
        results.append(r)
        p = params
        rows.append([spec.name, f"{p['supply']:g} V", f"{p['gain_db'][0]:+.1f}..{p['gain_db'][1]:+.1f}",
                     _fmt_value(p["input_impedance_min"], "R"), f"{p['supply_current_max'] * 1e3:.2f}",
                     f"{p['headroom_min_db']:.1f}", r["continuous_margin"], r["rounded_margin"], r["rounding_broke"],
                     ", ".join(r["targets_broken"]) or "-", r["search_status"], r["search_margin"],
                     f"{r['continuous_seconds']:.0f}", f"{t_s:.1f}"])
        out.say(f"  {spec.name}: continuous {r['continuous_margin']:.3f}, rounded {r['rounded_margin']:.3f}, "
                f"search {sr.status} {r['search_margin'] if r['search_margin'] is None else round(r['search_margin'], 3)}")
    feasible = [r for r in results if r["continuous_margin"] >= 0]
    broke = [r for r in feasible if r["rounding_broke"]]
    search_better = [r for r in results if r["search_margin"] is not None and r["search_margin"] > r["rounded_margin"]]
    lost = [r["continuous_margin"] - r["rounded_margin"] for r in results
            if math.isfinite(r["continuous_margin"]) and math.isfinite(r["rounded_margin"])]
    summary = {"specs": len(results), "continuous_feasible": len(feasible), "rounding_broke": len(broke),
               "rounding_broke_fraction": len(broke) / len(feasible) if feasible else None,
               "median_margin_lost": float(np.median(lost)) if lost else None,
               "search_beats_rounded": len(search_better),
               "search_passes_where_rounded_fails": sum(1 for r in results if r["search_margin"] is not None
                                                        and r["search_margin"] >= 0 and r["rounded_margin"] < 0)}
    out.table("rounding: continuous optimum, rounded to the series, against the search",
              ["spec", "supply", "gain dB", "Zin ≥", "I ≤ mA", "head dB", "cont.", "rounded", "broke", "targets broken",
               "search", "margin", "cont. s", "search s"], rows,
              note=(f"rounding broke a target in {len(broke)} of {len(feasible)} specs whose continuous optimum meets "
                    f"every target; median margin lost {summary['median_margin_lost']:.3f} Np; the search beat the "
                    f"rounded design in {len(search_better)} of {len(results)} (search limit {limit:g} s)"
                    if feasible and lost else "no continuous optimum met every target"))
    return {"seed": seed, "search_time_limit": limit, "specs": results, "summary": summary}


# ------------------------------------------------------------------------------------
# 4. growth


def stock_csv(n: int, seed: int) -> str:
    """A stock list of ``n`` distinct rows (resistors, capacitors, one transistor row)."""
    rng = random.Random(seed * 1000 + n)
    e192 = get_series("E192")
    e12 = get_series("E12")
    rvals = e192.values_between(10.0, 1e6)
    cvals = e12.values_between(100e-12, 1e-3)
    rtypes = (("1 %", "metal-film", 0.05), ("2 %", "metal-film", 0.04), ("5 %", "carbon-film", 0.02))
    seen = set()
    lines = ["# Generated stock list for benchmarks/run.py growth (deterministic; not a real drawer).",
             "kind,value,quantity,tolerance,rating,type,price,note", "transistor,2N3904,50,,,,0.08,"]
    while len(lines) - 2 < n:
        if rng.random() < 0.75:
            v = rng.choice(rvals)
            tol, typ, price = rng.choice(rtypes)
            key = ("R", v, tol)
            row = f"resistor,{_fmt_value(v, 'R')},{rng.randint(1, 20)},{tol},1/4 W,{typ},{price},"
        else:
            v = rng.choice(cvals)
            typ = "ceramic" if v < 1e-9 else "film" if v < 1e-6 else "electrolytic"
            tol = {"ceramic": "5 %", "film": "10 %", "electrolytic": "20 %"}[typ]
            rating = rng.choice(("16 V", "25 V", "50 V"))
            key = ("C", v, rating)
            row = f"capacitor,{_fmt_value(v, 'C')[:-1]},{rng.randint(1, 20)},{tol},{rating},{typ},0.05,"
        if key in seen:
            continue
        seen.add(key)
        lines.append(row)
    return "\n".join(lines) + "\n"


def _with_inputs(spec, n: int, series: str | None = None):
    """``spec`` with n copies of its first input (and its resistors from ``series``)."""
    first = spec.inputs[0]
    inputs = tuple(InputSpec(f"in{k}", first.source_resistance, first.max_level, False) for k in range(1, n + 1))
    spec = dataclasses.replace(spec, inputs=inputs)
    return spec if series is None else dataclasses.replace(spec, parts=dataclasses.replace(spec.parts, resistor_series=series))


def part_growth(quick: bool, out: Out, seed: int, stock_dir: str | None) -> dict:
    out.say("== growth ==")
    base = load_spec(BENCH_SPECS / "growth-mixer.yaml")
    limit = 6.0 if quick else 30.0
    series = ("E12", "E96") if quick else ("E12", "E24", "E96")
    inputs = (1, 4, 16) if quick else (1, 2, 4, 8, 16)
    stocks = (20, 2000) if quick else (20, 200, 2000)
    tmp = None
    if stock_dir is None:
        tmp = tempfile.TemporaryDirectory(prefix="stagefit-bench-")
        stock_dir = tmp.name
    Path(stock_dir).mkdir(parents=True, exist_ok=True)
    runs = []

    def one(axis, value, spec, stock=None):
        try:
            cands = build_candidates(spec, TOPOLOGY, stock)
        except FileProblems as err:  # a small generated stock list may lack a role's values
            runs.append({"axis": axis, "value": value, "status": "no candidates", "seconds": 0.0, "time_limit": limit,
                         "work_seconds": None, "wall_cut": False,
                         "over_limit_seconds": 0.0, "best_margin": None, "bound": None, "designs": 0, "items": 0,
                         "combinations": 0.0, "solves": None, "verified": None, "inputs": len(spec.inputs),
                         "series": spec.parts.resistor_series, "reason": str(err).splitlines()[-1].strip()})
            out.say(f"  {axis} {value}: no candidates ({runs[-1]['reason']})")
            return
        t0 = time.perf_counter()
        r = search(spec, stock=stock, top=spec.search.top, time_limit=limit)
        t = time.perf_counter() - t0
        work_s = r.stats.get("work_seconds")
        runs.append({"axis": axis, "value": value, "status": r.status, "seconds": t, "time_limit": limit,
                     "work_seconds": work_s, "wall_cut": clock.cut_short(),
                     # The limit counts work (the search's clock), so the overrun does too.
                     "over_limit_seconds": max(0.0, (work_s if work_s is not None else t) - limit),
                     "best_margin": r.designs[0].margin if r.designs else None,
                     "bound": r.bound, "designs": len(r.designs), "items": sum(len(s.items) for s in cands.slots),
                     "combinations": cands.size(), "solves": r.stats.get("solves"), "verified": r.stats.get("verified"),
                     "inputs": len(spec.inputs), "series": spec.parts.resistor_series})
        out.say(f"  {axis} {value}: {r.status} in {t:.1f} s")

    two = _with_inputs(base, 2)
    for s in series:
        one("series", s, _with_inputs(base, 2, s))
    for n in inputs:
        one("inputs", n, _with_inputs(base, n))
    for n in stocks:
        path = Path(stock_dir) / f"stock-{n}.csv"
        path.write_text(stock_csv(n, seed), encoding="utf-8")
        st = load_stock(path)
        spec = dataclasses.replace(two, parts=dataclasses.replace(two.parts, use="stock-only", stock=path))
        one("stock", n, spec, st)
        runs[-1]["stock_rows"] = len(st.items)
        runs[-1]["stock_file"] = path if tmp is None else path.name
    rows = [[r["axis"], r["value"], r["inputs"], r["items"], f"{r['combinations']:.3g}", r["status"], r["best_margin"],
             f"{r['seconds']:.1f}", "-" if r.get("work_seconds") is None else f"{r['work_seconds']:.1f}",
             "yes" if r.get("wall_cut") else "-", r["solves"], r["verified"]] for r in runs]
    out.table(f"growth: search time against the size of the space (limit {limit:g} s of the search's clock per run)",
              ["axis", "value", "inputs", "items", "combinations", "status", "best margin", "seconds", "work s",
               "cut", "solves", "verified"], rows,
              note="series: 2 inputs, series values only; inputs: E12; stock: 2 inputs, stock-only, generated lists\n"
                   "seconds: wall time; work s: the search's clock (what the limit counts); cut: the wall bound "
                   f"({clock.WALL_FACTOR:g}× the limit) stopped the search before its clock did")
    if tmp is not None:
        tmp.cleanup()
    return {"time_limit": limit, "base": BENCH_SPECS / "growth-mixer.yaml", "runs": runs}


# ------------------------------------------------------------------------------------
# 5. the two timing targets of the search, run exactly as stated


def part_targets(out: Out) -> dict:
    """The growth mixer with four inputs of E24 resistors and 10 s (target: proved optimal
    within 10 s), and with sixteen inputs of E12 and 30 s (target: solved within 30 s), each
    timed on the wall clock with the default wall bound. The same in --quick (a minute)."""
    out.say("== targets ==")
    base = load_spec(BENCH_SPECS / "growth-mixer.yaml")
    cases = [("4-input E24 proved optimal within 10 s", 4, "E24", 10.0, ("optimal",)),
             ("16 inputs solved within 30 s", 16, "E12", 30.0, ("optimal", "feasible"))]
    runs = []
    for what, n, series, limit, ok in cases:
        spec = _with_inputs(base, n, series)
        t0 = time.perf_counter()
        r = search(spec, top=spec.search.top, time_limit=limit)
        t = time.perf_counter() - t0
        runs.append({"target": what, "inputs": n, "series": series, "time_limit": limit, "status": r.status,
                     "best_margin": max((d.margin for d in r.designs), default=None), "bound": r.bound,
                     "seconds": t, "work_seconds": r.stats.get("work_seconds"),
                     "met": r.status in ok and t <= limit,
                     # What the nearest designs that failed missed (target and margin, nepers).
                     "near_misses": [{"margin": v.margin,
                                      "missed": {tr.name: round(tr.margin, 3) for tr in v.targets if tr.margin < 0}}
                                     for v in r.near_misses]})
        out.say(f"  {what}: {r.status} in {t:.1f} s")
        for v in runs[-1]["near_misses"]:
            out.say(f"    nearest miss {v['margin']:+.3f}: " + ", ".join(f"{k} {m:+.3f}" for k, m in v["missed"].items()))
    rows = [[r["target"], f"{r['time_limit']:g}", r["status"], r["best_margin"], r["bound"], f"{r['seconds']:.1f}",
             "-" if r["work_seconds"] is None else f"{r['work_seconds']:.1f}", "yes" if r["met"] else "no"]
            for r in runs]
    out.table("the search's timing targets (growth mixer, default wall bound)",
              ["target", "limit s", "status", "best margin", "bound", "seconds", "work s", "met"], rows,
              note="met: the status asked for, within the stated seconds of wall time")
    return {"base": BENCH_SPECS / "growth-mixer.yaml", "runs": runs}


# ------------------------------------------------------------------------------------


def _machine() -> dict:
    import ortools
    import scipy

    info = {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__,
            "ortools": ortools.__version__, "platform": platform.platform(), "cpus": os.cpu_count(),
            "blas_threads": _BLAS_THREADS}
    try:
        info["load_average_at_start"] = list(os.getloadavg())
    except OSError:
        pass
    return info


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("parts", nargs="*", default=[], metavar="PART",
                    help=f"which parts to run: {', '.join(PARTS)} or all (default all)")
    ap.add_argument("--quick", action="store_true", help="small sizes and short limits (a few minutes in all)")
    ap.add_argument("--json", metavar="FILE", help="write every figure as JSON to FILE ('-' for stdout)")
    ap.add_argument("--seed", type=int, default=1, help="seed of the generated specs and stock lists (default 1)")
    ap.add_argument("--blas-threads", default="1", metavar="N",
                    help="BLAS threads (default 1; 'keep' leaves the environment, where the package itself "
                         "defaults to 1)")
    ap.add_argument("--stock-dir", help="keep the generated stock lists of the growth part in this folder")
    args = ap.parse_args(argv)
    unknown = [p for p in args.parts if p not in PARTS + ("all",)]
    if unknown:
        ap.error(f"unknown part {unknown[0]!r} (choose from {', '.join(PARTS)}, all)")
    parts = PARTS if not args.parts or "all" in args.parts else tuple(p for p in PARTS if p in args.parts)
    out = Out(sys.stderr if args.json == "-" else sys.stdout)
    doc = {"quick": args.quick, "machine": _machine(), "parts": {}}
    out.say(f"stagefit benchmarks{' (quick)' if args.quick else ''}: {', '.join(parts)}; "
            f"{doc['machine']['cpus']} CPUs, BLAS threads {_BLAS_THREADS}")
    t0 = time.perf_counter()
    for p in parts:
        t = time.perf_counter()
        if p == "analysis":
            doc["parts"][p] = part_analysis(args.quick, out)
        elif p == "search":
            doc["parts"][p] = part_search(args.quick, out)
        elif p == "rounding":
            doc["parts"][p] = part_rounding(args.quick, out, args.seed)
        elif p == "growth":
            doc["parts"][p] = part_growth(args.quick, out, args.seed, args.stock_dir)
        elif p == "targets":
            doc["parts"][p] = part_targets(out)
        doc["parts"][p]["part_seconds"] = time.perf_counter() - t
    doc["seconds"] = time.perf_counter() - t0
    out.say(f"\ndone in {doc['seconds']:.0f} s")
    if args.json:
        text = json.dumps(_clean(doc), indent=2, ensure_ascii=False)
        if args.json == "-":
            sys.stdout.write(text + "\n")
        else:
            Path(args.json).write_text(text + "\n", encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
