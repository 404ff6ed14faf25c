"""Search results as JSON (``stagefit design --json``) and as a ranked table for people."""

from __future__ import annotations

import math

from ..spec.quantities import format_code, format_si
from .figures_json import analysis_json

__all__ = ["KEY_ROLES", "design_entry", "design_key", "result_json", "ranked_table"]


def _f(x):
    if x is None:
        return None
    x = float(x)
    return None if math.isnan(x) else (1e300 if x == math.inf else (-1e300 if x == -math.inf else x))


#: Per topology, the roles whose values characterise a design in the ranked table: the gain
#: stage's bias and load resistors, and its emitter resistors.
KEY_ROLES = {
    "divider-ce": (("bias_top", "bias_bottom", "collector"), ("emitter", "emitter_bypassed")),
    "feedback-ce": (("feedback", "feedback_split", "bias_bottom", "collector"), ("emitter", "emitter_bypassed")),
    "follower-ce": (("gain_bias_top", "gain_bias_bottom", "gain_collector"), ("gain_emitter", "gain_emitter_bypassed")),
    "ce-follower": (("bias_top", "bias_bottom", "collector"), ("emitter", "emitter_bypassed")),
    "cb-sum": (("bias_top", "bias_bottom", "collector"), ("emitter",)),
}


def design_key(design) -> tuple[str, str]:
    """(bias/load values, emitter values) of a design as value codes, e.g. ``47K/10K/2K2`` and
    ``100+1K`` (``0`` for a grounded emitter), by the roles of :data:`KEY_ROLES` for its
    topology (every fixed resistor role but the emitter ones for a topology not listed)."""
    core = {p.role: p for p in design.parts if p.input is None}
    roles = KEY_ROLES.get(design.topology)
    if roles is None:
        emit_roles = tuple(r for r in core if r.endswith(("emitter", "emitter_bypassed")))
        roles = (tuple(r for r, p in core.items() if not p.ref.startswith("C") and r not in emit_roles), emit_roles)
    key = "/".join(format_code(core[r].value, "resistance") for r in roles[0] if r in core)
    emit = "+".join(format_code(core[r].value, "resistance") for r in roles[1] if r in core) or "0"
    return key, emit


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
    if result.conflicts or result.status == "infeasible":  # empty when none was found in time
        out["conflicts"] = [c.to_json() for c in result.conflicts]
    if not result.designs:  # an empty list when no design was verified at all
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
        key, emit = design_key(v.design)
        sw = an.large_worst.get("swing", float("nan"))
        rows.append([
            i,
            f"{v.margin:+.3f}",
            len(v.design.parts) + len(an.circuit.transistors),
            v.design.transistor,
            key,
            emit,
            f"{gl:+.1f}..{gh:+.1f}",
            format_si(sw, "V"),
            format_si(max(an.high[f"low_cutoff:{k}"] for k in range(1, n + 1)), "Hz"),
            format_si(an.high["supply_current"], "A"),
        ])
    topologies = {v.design.topology for v in result.designs}
    heads = ["#", "margin", "parts", "transistor", "bias/load", "emitter", "gain dB", "swing", "low -3dB", "current"]
    align = "rrrlllrrrr"
    if len(topologies) > 1:  # designs of several topologies: say which each is
        for r, v in zip(rows, result.designs):
            r.insert(3, v.design.topology)
        heads.insert(3, "topology")
        align = "rrrl" + align[3:]
    return table(heads, rows, align)
