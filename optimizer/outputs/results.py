"""Search results as JSON (``stagefit design --json``) and as a ranked table for people."""

from __future__ import annotations

import math

from ..spec.quantities import format_code, format_si
from .figures_json import analysis_json

__all__ = ["design_entry", "result_json", "ranked_table"]


def _f(x):
    if x is None:
        return None
    x = float(x)
    return None if math.isnan(x) else (1e300 if x == math.inf else (-1e300 if x == -math.inf else x))


def design_entry(rank: int, v, ratings: dict | None = None) -> dict:
    """One ranked design: parts, model, metrics (nominal and worst), margin, targets."""
    d = v.design
    parts = []
    for p in d.parts:
        kind = "capacitance" if p.ref.startswith("C") else "resistance"
        it = v.items.get(p.ref)
        entry = {"ref": p.ref, "role": p.role}
        if p.input is not None:
            entry["input"] = p.input
        entry.update({"value": p.value, "code": format_code(p.value, kind), "tolerance": p.tolerance,
                      "source": it.source if it else "series"})
        if it and it.stock_line is not None:
            entry["stock_line"] = it.stock_line
        if p.type:
            entry["type"] = p.type
        parts.append(entry)
    full = analysis_json(v.analysis, ratings, v.targets)
    nominal = {k: full[k] for k in full if k not in ("worst", "range", "corners", "targets", "margin", "pass", "ratings", "model", "conditions")}
    model = full["model"]
    model["beta_min"] = d.model.beta_min if d.model.beta_min is not None else d.model.beta
    model["beta_max"] = d.model.beta_max if d.model.beta_max is not None else d.model.beta
    return {
        "rank": rank,
        "topology": d.topology,
        "transistor": d.transistor,
        "parts": parts,
        "model": model,
        "metrics": {"nominal": nominal, "worst": full["worst"], "range": full["range"], "corners": full["corners"]},
        "margin": _f(v.margin),
        "targets": full["targets"],
        "ratings": ratings,
        "conditions": full["conditions"],
    }


def result_json(result, ratings_of=None) -> dict:
    """The whole answer: status, ranked designs, conflicts when infeasible."""
    out = {
        "status": result.status,
        "topology": result.topology,
        "bound": _f(result.bound),
        "designs": [design_entry(i + 1, v, ratings_of(v) if ratings_of else None) for i, v in enumerate(result.designs)],
        "notes": list(result.notes),
        "stats": result.stats,
    }
    if result.conflicts:
        out["conflicts"] = [c.to_json() for c in result.conflicts]
    if result.near_misses and not result.designs:
        out["near_misses"] = [{"margin": _f(v.margin), "failing": [t.name for t in v.targets if not t.passed]}
                              for v in result.near_misses]
    return out


def ranked_table(result, spec) -> str:
    """Rank, margin, part count, key values and the worst figures, within 100 columns."""
    from .text import table

    rows = []
    for i, v in enumerate(result.designs, start=1):
        an = v.analysis
        n = an.circuit.n_inputs
        gl = min(an.low[f"gain_db:{k}"] for k in range(1, n + 1))
        gh = max(an.high[f"gain_db:{k}"] for k in range(1, n + 1))
        core = {p.role: p for p in v.design.parts}
        key = "/".join(format_code(core[r].value, "resistance") for r in ("bias_top", "bias_bottom", "collector") if r in core)
        emit = "+".join(format_code(core[r].value, "resistance") for r in ("emitter", "emitter_bypassed") if r in core) or "0"
        sw = an.large_worst.get("swing", float("nan"))
        rows.append([
            i,
            f"{v.margin:+.3f}",
            len(v.design.parts) + 1,
            v.design.transistor,
            key,
            emit,
            f"{gl:+.1f}..{gh:+.1f}",
            format_si(sw, "V"),
            format_si(max(an.high[f"low_cutoff:{k}"] for k in range(1, n + 1)), "Hz"),
            format_si(an.high["supply_current"], "A"),
        ])
    return table(["#", "margin", "parts", "transistor", "R1/R2/RC", "RE", "gain dB", "swing", "low -3dB", "current"],
                 rows, "rrrlllrrrr")
