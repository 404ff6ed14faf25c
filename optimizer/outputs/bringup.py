"""The bring-up sheet: what a meter should read on the finished stage, and what to suspect.

Every reading is a DC voltage from ground (black probe on ground, no signal) or the supply
current, as min – typical – max over the corners the design was checked at (supply range,
temperature range, transistor gain range and part tolerances). The typical value is the
nominal supply and temperature with every part at its marked value.

There is a reading for each terminal of each transistor — base, emitter, collector, in
designator order — then the supply current. A node that is two terminals (the gain stage's
collector that is also the output buffer's base) is read once and named for both. The hint
with each reading says what a value outside its window most likely means in that topology,
naming the parts by their designators.
"""

from __future__ import annotations

from ..spec.quantities import format_si

__all__ = ["bringup_rows", "bringup_text", "corners_text"]

_INDEX = {"collector": 0, "base": 1, "emitter": 2}
_KEY = {"base": "vb", "emitter": "ve", "collector": "vc"}


class _Words:
    """Designators of a circuit's parts by role, and the rails in words, for the hints."""

    def __init__(self, circuit):
        self.c = circuit

    def refs(self, *roles: str, default: str = "") -> str:
        out = [e.ref for role in roles for e in self.c.by_role(role) if e.part]
        return "/".join(out) or default

    def emitter(self, prefix: str = "") -> str:
        return self.refs(prefix + "emitter", prefix + "emitter_bypassed", default="the emitter lead")

    def caps(self) -> str:
        from .bom import polarised_caps

        return ", ".join(polarised_caps(self.c))


def _rail_words(q) -> tuple[str, str]:
    """(what the emitter side returns to, what the collector side returns to), in words."""
    pnp = q.model is not None and q.model.polarity == "pnp"
    return ("the supply", "0 V") if pnp else ("0 V", "the supply")


def _base_hint(w: _Words, topology: str, q, pnp: bool) -> str:
    qn = q.ref
    e_rail, _ = _rail_words(q)
    if topology == "feedback-ce":
        fb = w.refs("feedback", "feedback_split", default="the feedback resistor")
        bb = w.refs("bias_bottom")
        low = f"{fb} open (nothing biases the base)" + (f" or {bb} far too small" if bb else "")
        return (f"It should sit one junction drop (about 0.6–0.7 V) {'below' if pnp else 'above'} the emitter. Near "
                f"{e_rail}: {low}. Close to the collector's reading and {qn}'s collector far from its range: "
                f"{qn} is not conducting (pinout, a damaged {qn}), so no current flows in {fb}. Otherwise outside "
                f"the range: a wrong value of {fb}, {w.refs('collector', default='the collector resistor')} or "
                f"{w.emitter()} — read their colour bands again.")
    if topology == "follower-ce" and q.nodes[1] == "b":
        top, bot, boot = (w.refs("bias_top", default="the top divider resistor"),
                          w.refs("bias_bottom", default="the bottom divider resistor"),
                          w.refs("bootstrap", default="the bootstrap resistor"))
        return (f"Near 0 V: {top} open, or the base shorted to ground. Near the supply: {bot} open or missing. "
                f"It should read a little {'above' if pnp else 'below'} the node between {top} and {bot} (the base "
                f"current drops a little across {boot}); far from it: {boot} open or of the wrong "
                f"value. {top} and {bot} swapped or of the wrong value put the whole reading off — read their "
                f"colour bands again.")
    prefix = "gain_" if topology == "follower-ce" else ""
    top = w.refs(prefix + "bias_top", default="the top divider resistor")
    bot = w.refs(prefix + "bias_bottom", default="the bottom divider resistor")
    cap = w.refs("base_cap") if topology == "cb-sum" else ""
    low = f"{top} open or the base shorted to ground" + (f" ({cap} shorted or fitted the wrong way round)" if cap else "")
    return (f"Near 0 V: {low}. Near the supply: {bot} open or missing. Clearly off but not at a rail: {top} and "
            f"{bot} swapped or of the wrong value — read their colour bands again.")


def _emitter_hint(w: _Words, topology: str, q, pnp: bool) -> str:
    qn = q.ref
    e_rail, _ = _rail_words(q)
    if q.nodes[2] in ("vcc", "0"):
        where = "the supply" if q.nodes[2] == "vcc" else "ground"
        return (f"{qn}'s emitter is tied straight to {where}: any other reading means its lead, its solder joint "
                f"or the track to {where} is open.")
    extra = ""
    if topology == "cb-sum":
        extra = (" The emitter is also where the inputs are summed: a summing resistor or level pot wired to the "
                 "wrong place shows here first.")
    elif q.nodes[0] in ("vcc", "0"):  # a follower: its emitter drives the next stage
        extra = " It follows the base: if the base is out of its range, fix that first."
    return (f"It should sit about 0.6–0.7 V {'above' if pnp else 'below'} the base. The same as the base: the "
            f"base–emitter junction is shorted (a damaged {qn} or a solder bridge). Near {e_rail} while the base "
            f"reads a little high: {qn} is not conducting — wrong pinout, a damaged {qn} or an unsoldered lead. Right "
            f"distance from the base but outside the range: the base is off too, so look at the base first." + extra)


def _collector_hint(w: _Words, topology: str, q, pnp: bool, circuit) -> str:
    qn = q.ref
    node = q.nodes[0]
    if node in ("vcc", "0"):
        where = "the supply" if node == circuit.supply_node else "ground"
        return (f"{qn}'s collector is tied straight to {where}: any other reading means its lead, its solder joint "
                f"or the track to {where} is open.")
    _, c_rail = _rail_words(q)
    prefix = "gain_" if topology == "follower-ce" else ""
    rc = w.refs(prefix + "collector", default="the collector resistor")
    remit = w.emitter(prefix)
    if topology == "feedback-ce":
        fb = w.refs("feedback", "feedback_split", default="the feedback resistor")
        bias = f"the feedback resistor {fb} is not shorted or far too small"
    elif topology == "cb-sum":
        bias = f"the divider {w.refs('bias_top', 'bias_bottom')} is not biasing too hard"
    else:
        bias = f"the divider {w.refs(prefix + 'bias_top', prefix + 'bias_bottom')} is not biasing too hard"
    text = (f"Close to {c_rail}: {qn} is not conducting — check it is the right way round (pinout), the base bias "
            f"and {remit}. Close to the emitter (less than about 0.5 V between them): {qn} is saturated — check "
            f"{rc} is not too large and {bias}. Anywhere else outside the range: a wrong value of {rc} or {remit}.")
    buf = [t for t in circuit.transistors if t is not q and t.nodes[1] == node]
    if buf:
        b = buf[0].ref
        be = w.refs("buffer_emitter", default="its emitter resistor")
        text += (f" This node is also {b}'s base: if it reads far too low while {b}'s emitter reads nearly the "
                 f"same, {b}'s base–emitter junction is shorted or {be} is far too small.")
    return text


def bringup_rows(v) -> list[dict]:
    """Expected terminal voltages of every transistor and the supply current of one design.

    Returns
    -------
    list of dict
        One row per transistor terminal (base, emitter, collector of Q1, then of Q2 …; a node
        that is two terminals once) and one for the supply current, each with keys ``what``,
        ``figure`` (the analysis key: ``vb``, ``ve``, ``vc`` for a one-transistor stage,
        ``vb:Q1`` … for several), ``probe`` (where to measure), ``unit``, ``min``, ``typ``,
        ``max`` (floats, SI), ``shown`` (the range as text) and ``hint`` (what a reading
        outside it points to).
    """
    d, an = v.design, v.analysis
    c = an.circuit
    qs = list(c.transistors)
    several = len(qs) > 1
    w = _Words(c)
    topology = c.topology
    rows: list[dict] = []
    by_node: dict[str, dict] = {}
    for q in qs:
        pnp = q.model is not None and q.model.polarity == "pnp"
        for term in ("base", "emitter", "collector"):
            node = q.nodes[_INDEX[term]]
            if node in by_node:  # one node, two terminals: one reading named for both
                row = by_node[node]
                row["what"] += f" = {q.ref} {term}"
                continue
            key = f"{_KEY[term]}:{q.ref}" if several else _KEY[term]
            if term == "base":
                hint = _base_hint(w, topology, q, pnp)
            elif term == "emitter":
                hint = _emitter_hint(w, topology, q, pnp)
            else:
                hint = _collector_hint(w, topology, q, pnp, c)
            row = _row(an, key, f"{q.ref} {term}", f"{q.ref} {term} to ground", "V", hint)
            by_node[node] = row
            rows.append(row)
    caps = w.caps()
    hint = (f"Far above the maximum: disconnect at once and look for a short, a reversed electrolytic"
            + (f" ({caps})" if caps else "") + f" or a wrong or reversed transistor. Zero: nothing is connected — "
            f"battery clip, switch, supply lead or a broken ground. A little above: a resistor of the wrong value.")
    rows.append(_row(an, "supply_current", "supply current", "meter in series with the supply lead", "A", hint))
    return rows


def _row(an, key: str, what: str, probe: str, unit: str, hint: str) -> dict:
    lo, typ, hi = an.low[key], an.nominal[key], an.high[key]
    shown = f"{format_si(lo, unit)} – {format_si(typ, unit)} – {format_si(hi, unit)}"
    return {"what": what, "figure": key, "probe": probe, "unit": unit, "min": float(lo), "typ": float(typ),
            "max": float(hi), "shown": shown, "hint": hint}


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
    width = max([16] + [len(r["what"]) + 1 for r in bringup_rows(v)])
    for r in bringup_rows(v):
        lines.append(f"{r['what']:<{width}} {r['shown']:<32} ({r['probe']})")
        lines.append(f"    if outside: {r['hint']}")
    lines += ["", "checked at: " + corners_text(v.analysis)]
    return "\n".join(lines) + "\n"
