"""The figures of an analysed design as JSON (``check --json``) and as text for people.

JSON keys (all SI: V, A, Ω, Hz, dB as stated):

``model``            the transistor parameters used: ``is``, ``beta``, ``va``, ``beta_reverse``,
                     ``cjc``, ``cje``, ``tf`` (plus ``xtb``, ``tnom``, ``beta_min``, ``beta_max``…)
``conditions``       supply (V), ambient (°C) and beta ranges the corners span
``operating_point``  ``vb``, ``ve``, ``vc``, ``ic``, ``ib``, ``supply_current``, ``vce`` at nominal
                     (of the first transistor, Q1)
``transistors``      every transistor's operating point by designator: ``{"Q1": {"vb", "ve", "vc",
                     "ic", "ib", "vce"}, "Q2": …}`` at nominal (``worst.transistors``: min/max)
``inputs``           per input: ``gain_db`` (source EMF to load, 1 kHz), ``input_impedance``
                     (|Z| at the jack, 1 kHz), ``low_cutoff``, ``high_cutoff``, ``crosstalk_db``
``low_cutoff``       highest low −3 dB corner over the inputs; ``high_cutoff`` the lowest high one
``output_impedance`` |Z| looking back from the load at 1 kHz
``swing``            V peak at the load when THD reaches ``thd_limit`` (percent)
``thd``              THD in percent at ``thd_level`` (V peak at the load)
``clip``             output excursions (V) at which the stage clips, up and down, and why
``noise``            output noise (V rms, 20 Hz–20 kHz)
``worst``            the same figures at their adverse corners: lowest gain, impedance and swing,
                     highest THD, low cutoff, output impedance and current; the operating point
                     as ``{"min": …, "max": …}`` ranges
``range``            ``{"min", "max"}`` of every figure over the corners
``corners``          which corner gave each worst value
``ratings``          resistor power, capacitor DC voltage / polarity / rating, transistor dissipation
                     (``transistor``: Q1; ``transistors``: every one)
``targets``          with ``--spec``: one verdict per target (limit, worst, margin, pass)
"""

from __future__ import annotations

import math

from ..spec.quantities import format_code, format_si

__all__ = ["analysis_json", "analysis_text"]

OP_KEYS = ("vb", "ve", "vc", "ic", "ib", "supply_current", "vce")
Q_KEYS = ("vb", "ve", "vc", "ic", "ib", "vce")


def _refs(an) -> list[str]:
    """The transistors whose per-designator figures the analysis holds."""
    return [q.ref for q in an.circuit.transistors if f"vce:{q.ref}" in an.nominal]


def _f(x):
    if x is None:
        return None
    x = float(x)
    if math.isinf(x):
        return None if math.isnan(x) else (1e300 if x > 0 else -1e300)
    if math.isnan(x):
        return None
    return x


def _worst_over(an, base: str, d: str) -> float:
    n = an.circuit.n_inputs
    vals = [an.low[f"{base}:{k}"] if d == "min" else an.high[f"{base}:{k}"] for k in range(1, n + 1)]
    return min(vals) if d == "min" else max(vals)


def analysis_json(an, ratings: dict | None = None, targets=None, mc=None) -> dict:
    """The ``check --json`` object of an Analysis."""
    d = an.design
    n = an.circuit.n_inputs
    model = d.model.to_json()
    cond = an.conditions
    out: dict = {
        "topology": d.topology,
        "transistor": d.transistor,
        "model": {k: _f(v) if isinstance(v, (int, float)) else v for k, v in model.items()},
        "conditions": {
            "supply": {"nominal": cond.supply[0], "min": cond.supply[1], "max": cond.supply[2]},
            "ambient_c": {"nominal": cond.ambient[0] - 273.15, "min": cond.ambient[1] - 273.15, "max": cond.ambient[2] - 273.15},
            "beta": {k: {"nominal": v[0], "min": v[1], "max": v[2]} for k, v in cond.beta.items()},
        },
        "operating_point": {k: _f(an.nominal[k]) for k in OP_KEYS},
        "transistors": {q: {k: _f(an.nominal[f"{k}:{q}"]) for k in Q_KEYS} for q in _refs(an)},
        "inputs": [],
    }
    names = d.input_names or tuple(str(k) for k in range(1, n + 1))
    for k in range(1, n + 1):
        item = {
            "name": names[k - 1],
            "source_resistance": d.sources[k - 1],
            "gain_db": _f(an.nominal[f"gain_db:{k}"]),
            "input_impedance": _f(an.nominal[f"input_impedance:{k}"]),
            "low_cutoff": _f(an.nominal[f"low_cutoff:{k}"]),
            "high_cutoff": _f(an.nominal[f"high_cutoff:{k}"]),
        }
        if n > 1:
            item["crosstalk_db"] = _f(an.nominal[f"crosstalk_db:{k}"])
        out["inputs"].append(item)
    out["low_cutoff"] = _f(max(an.nominal[f"low_cutoff:{k}"] for k in range(1, n + 1)))
    out["high_cutoff"] = _f(min(an.nominal[f"high_cutoff:{k}"] for k in range(1, n + 1)))
    out["output_impedance"] = _f(an.nominal["output_impedance"])
    if an.large:
        out["swing"] = _f(an.large["swing"])
        out["thd_limit"] = 100 * an.large["thd_limit"]
        out["thd"] = _f(100 * an.large["thd"])
        out["thd_level"] = _f(an.large["thd_level"])
        out["clip"] = {"up": _f(an.large["clip_up"]), "down": _f(an.large["clip_down"]),
                       "up_cause": an.large["clip_up_cause"], "down_cause": an.large["clip_down_cause"],
                       "asymmetry_db": _f(20 * math.log10(an.large["clip_up"] / an.large["clip_down"]))
                       if an.large["clip_up"] > 0 and an.large["clip_down"] > 0 else None}
    if an.noise:
        out["noise"] = {"output_rms": _f(an.noise["output_rms"])}
    mx = mixing_of(an)
    if mx is not None:
        out["mixing"] = mx
    worst: dict = {
        "operating_point": {k: {"min": _f(an.low[k]), "max": _f(an.high[k])} for k in OP_KEYS},
        "transistors": {q: {k: {"min": _f(an.low[f"{k}:{q}"]), "max": _f(an.high[f"{k}:{q}"])} for k in Q_KEYS}
                        for q in _refs(an)},
        "inputs": [
            {
                "gain_db": _f(an.low[f"gain_db:{k}"]),
                "gain_db_max": _f(an.high[f"gain_db:{k}"]),
                "input_impedance": _f(an.low[f"input_impedance:{k}"]),
                "low_cutoff": _f(an.high[f"low_cutoff:{k}"]),
                "high_cutoff": _f(an.low[f"high_cutoff:{k}"]),
            }
            for k in range(1, n + 1)
        ],
        "low_cutoff": _f(_worst_over(an, "low_cutoff", "max")),
        "high_cutoff": _f(_worst_over(an, "high_cutoff", "min")),
        "output_impedance": _f(an.high["output_impedance"]),
        "supply_current": _f(an.high["supply_current"]),
    }
    if an.large_worst:
        worst["swing"] = _f(an.large_worst["swing"])
        worst["thd"] = _f(100 * an.large_worst["thd"])
        worst["clip"] = {"up": _f(an.large_worst["clip_up"]), "down": _f(an.large_worst["clip_down"])}
    out["worst"] = worst
    out["range"] = {k: {"min": _f(an.low[k]), "max": _f(an.high[k])} for k in an.nominal
                    if not k.startswith(("power:", "capv:", "pq:"))}
    corners = {k: v for k, v in an.corner_of.items() if not k.startswith(("power:", "capv:", "pq:"))}
    corners.update({f"{k}:worst": v for k, v in an.large_corner.items()})
    out["corners"] = corners
    if ratings is not None:
        out["ratings"] = ratings
    if targets is not None:
        out["targets"] = [t.to_json() for t in targets]
        out["margin"] = _f(min((t.margin for t in targets), default=math.inf))
        out["pass"] = all(t.passed for t in targets)
    if mc is not None:
        out["monte_carlo"] = mc
    return out


def _db(x):
    return f"{x:+.2f} dB"


def worst_text(t) -> str:
    """A target result's worst value with its unit, as the tables show it."""
    return format_si(t.worst, t.unit) if t.unit not in ("dB", "%") else f"{t.worst:.2f} {t.unit}"


def mixing_of(an) -> dict | None:
    """The mixing figures (:func:`optimizer.analysis.mixing.mixing`) of a stage with several
    inputs or a level control, at nominal conditions; None for one input without a control."""
    c = an.circuit
    if c.n_inputs < 2 and not any(e.kind == "POT" and e.input is not None for e in c.elements):
        return None
    from ..analysis.mixing import mixing

    names = an.design.input_names or tuple(str(k) for k in range(1, c.n_inputs + 1))
    return mixing(c, an.conditions.supply[0], an.conditions.ambient[0], tuple(names))


def analysis_text(an, ratings: dict | None = None, targets=None) -> str:
    """A page of text for people: parts, operating point, figures (nominal and worst)."""
    d = an.design
    c = an.circuit
    n = c.n_inputs
    L = []
    cond = an.conditions
    L.append(f"{d.topology} with {d.transistor}  (supply {cond.supply[1]:g}–{cond.supply[2]:g} V, "
             f"{cond.ambient[1] - 273.15:.0f}–{cond.ambient[2] - 273.15:.0f} °C, β "
             + ", ".join(f"{v[1]:.0f}–{v[2]:.0f}" for v in cond.beta.values()) + ")")
    parts = []
    for e in c.parts:
        if e.kind in ("R", "C", "POT"):
            kind = "capacitance" if e.kind == "C" else "resistance"
            parts.append(f"{e.ref} {format_code(e.value, kind)}")
    L.append("  parts: " + ", ".join(parts))
    L.append("")
    L.append("                          nominal        worst")
    row = lambda label, nom, worst: L.append(f"  {label:<22}  {nom:>12}  {worst:>12}")  # noqa: E731
    refs = _refs(an)
    rows = [("vb", "base", "V"), ("ve", "emitter", "V"), ("vc", "collector", "V"), ("ic", "collector current", "A")]
    if len(refs) > 1:  # several transistors: each one's operating point, by designator
        rows = [(f"{key}:{q}", f"{q} {label}", unit) for q in refs
                for key, label, unit in (("vb", "base", "V"), ("ve", "emitter", "V"), ("vc", "collector", "V"),
                                         ("vce", "VCE", "V"), ("ic", "collector current", "A"))]
    for key, label, unit in [*rows, ("supply_current", "supply current", "A")]:
        row(label, format_si(an.nominal[key], unit), f"{format_si(an.low[key], unit)} .. {format_si(an.high[key], unit)}")
    for k in range(1, n + 1):
        name = d.input_names[k - 1] if d.input_names else str(k)
        row(f"input {name}: gain", _db(an.nominal[f"gain_db:{k}"]),
            f"{an.low[f'gain_db:{k}']:+.2f} .. {an.high[f'gain_db:{k}']:+.2f}")
        row("  input impedance", format_si(an.nominal[f"input_impedance:{k}"], "Ω"),
            format_si(an.low[f"input_impedance:{k}"], "Ω"))
        row("  low −3 dB", format_si(an.nominal[f"low_cutoff:{k}"], "Hz"), format_si(an.high[f"low_cutoff:{k}"], "Hz"))
        row("  high −3 dB", format_si(an.nominal[f"high_cutoff:{k}"], "Hz"), format_si(an.low[f"high_cutoff:{k}"], "Hz"))
        if n > 1:
            row("  leak into other inputs", _db(an.nominal[f"crosstalk_db:{k}"]), _db(an.high[f"crosstalk_db:{k}"]))
    row("output impedance", format_si(an.nominal["output_impedance"], "Ω"), format_si(an.high["output_impedance"], "Ω"))
    if an.large:
        row(f"swing at {an.large['thd_limit'] * 100:g} % THD", format_si(an.large["swing"], "V") + " pk",
            format_si(an.large_worst["swing"], "V") + " pk")
        row(f"THD at {format_si(an.large['thd_level'], 'V')} pk", f"{an.large['thd'] * 100:.3f} %",
            f"{an.large_worst['thd'] * 100:.3f} %")
        row("clips up / down", f"{an.large['clip_up']:.2f} / {an.large['clip_down']:.2f} V",
            f"{an.large_worst['clip_up']:.2f} / {an.large_worst['clip_down']:.2f} V")
    if an.noise:
        row("output noise", format_si(an.noise["output_rms"], "V") + " rms", "")
    if ratings:
        L.append("")
        hot = [r for r in ratings["resistors"] if r["rating"] > 0.25]
        L.append("  resistors: " + ("¼ W is enough for every resistor" if not hot else
                                    ", ".join(f"{r['ref']} needs {r['rating']:g} W" for r in hot)))
        for cap in ratings["capacitors"]:
            if cap["plus_node"]:
                # dc_min/dc_max are across the capacitor's first node to its second; show + to −.
                lo, hi = cap["dc_min"], cap["dc_max"]
                if cap["plus_node"] != c.element(cap["ref"]).nodes[0]:
                    lo, hi = -hi, -lo
                L.append(f"  {cap['ref']}: + to node {cap['plus_node']}, {lo:+.2f}..{hi:+.2f} V DC, "
                         f"rate ≥ {cap['rating']:g} V")
            else:
                L.append(f"  {cap['ref']}: DC near 0 or changing sign: use a non-polarised (film or bipolar) part")
    mx = mixing_of(an)
    if mx is not None:
        from ..analysis.mixing import mixing_text

        L.append("")
        L.append(mixing_text(mx))
    if targets:
        L.append("")
        L.append("  target                 limit                          worst        margin")
        for t in targets:
            mark = "pass" if t.passed else "FAIL"
            val = worst_text(t)
            L.append(f"  {t.name:<22} {t.limit:<30} {val:>12}  {t.margin:+.3f}  {mark}")
    return "\n".join(L)
