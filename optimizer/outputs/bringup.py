"""The bring-up sheet: what a meter should read on the finished stage, and what to suspect.

Every reading is a DC voltage from ground (black probe on ground, no signal) or the supply
current, as min – typical – max over the corners the design was checked at (supply range,
temperature range, transistor gain range and part tolerances). The typical value is the
nominal supply and temperature with every part at its marked value.
"""

from __future__ import annotations

from ..spec.quantities import format_si

__all__ = ["bringup_rows", "bringup_text", "corners_text"]


def _refs(design, role: str) -> str:
    refs = [p.ref for p in design.parts if p.role == role]
    return "/".join(refs)


def bringup_rows(v) -> list[dict]:
    """Expected base, emitter and collector voltages and the supply current of one design.

    Returns
    -------
    list of dict
        One row each, in that order, with keys ``what``, ``figure`` (the analysis key),
        ``probe`` (where to measure), ``unit``, ``min``, ``typ``, ``max`` (floats, SI),
        ``shown`` (the range as text) and ``hint`` (what a reading outside it points to).
    """
    d, an = v.design, v.analysis
    c = an.circuit
    q = c.transistors[0]
    pnp = q.model is not None and q.model.polarity == "pnp"
    rtop = _refs(d, "bias_top") or "the top divider resistor"
    rbot = _refs(d, "bias_bottom") or "the bottom divider resistor"
    rc = _refs(d, "collector") or "the collector resistor"
    remit = "/".join(r for r in (_refs(d, "emitter"), _refs(d, "emitter_bypassed")) if r) or "the emitter lead"
    cbyp = _refs(d, "bypass_cap")
    couts = "/".join(r for r in (_refs(d, "output_cap"),) if r)
    cins = ", ".join(p.ref for p in d.parts if p.role == "input_cap")
    caps = ", ".join(x for x in (cins, cbyp, couts) if x)
    qn = q.ref
    lead = "the supply" if not pnp else "0 V"
    hints = {
        "vb": (f"Near 0 V: {rtop} open or the base shorted to ground. Near the supply: {rbot} open or missing. "
               f"Clearly off but not at a rail: {rtop} and {rbot} swapped or of the wrong value — read their colour "
               f"bands again."),
        "ve": (f"It should sit about 0.6–0.7 V {'below' if not pnp else 'above'} the base. The same as the base: "
               f"the base–emitter junction is shorted (a damaged {qn} or a solder bridge). Near "
               f"{'0 V' if not pnp else 'the supply'} while the base reads a little high: {qn} is not conducting — "
               f"wrong pinout, a damaged {qn} or an unsoldered lead. Right distance from the base but outside the "
               f"range: the base is off too, so look at the base first."),
        "vc": (f"Close to {lead}: {qn} is not conducting — check it is the right way round (pinout), the base bias "
               f"and {remit}. Close to the emitter (less than about 0.5 V between them): {qn} is saturated — "
               f"check {rc} is not too large and the divider {rtop}/{rbot} is not biasing too hard. "
               f"Anywhere else outside the range: a wrong value of {rc} or {remit}."),
        "supply_current": (f"Far above the maximum: disconnect at once and look for a short, a reversed electrolytic "
                           f"({caps}) or a wrong or reversed transistor. Zero: nothing is connected — battery clip, "
                           f"switch, supply lead or a broken ground. A little above: a resistor of the wrong value."),
    }
    rows = []
    for key, what, probe, unit in (
        ("vb", f"{qn} base", f"{qn} base to ground", "V"),
        ("ve", f"{qn} emitter", f"{qn} emitter to ground", "V"),
        ("vc", f"{qn} collector", f"{qn} collector to ground", "V"),
        ("supply_current", "supply current", "meter in series with the supply lead", "A"),
    ):
        lo, typ, hi = an.low[key], an.nominal[key], an.high[key]
        shown = f"{format_si(lo, unit)} – {format_si(typ, unit)} – {format_si(hi, unit)}"
        rows.append({"what": what, "figure": key, "probe": probe, "unit": unit, "min": float(lo), "typ": float(typ),
                     "max": float(hi), "shown": shown, "hint": hints[key]})
    return rows


def corners_text(an) -> str:
    """The corners a design was checked at, in one line."""
    cond = an.conditions
    s, a = cond.supply, cond.ambient
    parts = [f"supply {s[1]:g} V to {s[2]:g} V (typical {s[0]:g} V)",
             f"{a[1] - 273.15:.0f} °C to {a[2] - 273.15:.0f} °C"]
    for q, (nom, lo, hi) in sorted(cond.beta.items()):
        parts.append(f"{q} hFE {lo:.0f} to {hi:.0f}")
    if cond.tolerance:
        tols = sorted({round(t * 100, 6) for t in cond.tolerance.values()})
        parts.append("each part at the ends of its tolerance (" + ", ".join(f"±{t:g} %" for t in tols) + ")")
    return "; ".join(parts)


def bringup_text(v) -> str:
    """The bring-up sheet as plain text."""
    lines = ["Bring-up: DC readings with no signal (min – typical – max over the corners)", ""]
    for r in bringup_rows(v):
        lines.append(f"{r['what']:<16} {r['shown']:<32} ({r['probe']})")
        lines.append(f"    if outside: {r['hint']}")
    lines += ["", "checked at: " + corners_text(v.analysis)]
    return "\n".join(lines) + "\n"
