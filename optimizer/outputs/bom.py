"""The bill of materials of one design, and the list of what has to be bought.

One BOM line per distinct part: parts of the same kind, value, tolerance, type, rating and
source share a line and list all their designators. Every polarised capacitor carries its
orientation in words, worked out from the DC voltage across it at every corner of the
analysis; a capacitor whose DC voltage changes sign over the corners is marked non-polar.
"""

from __future__ import annotations

import csv
import io
import math
import re

from ..catalog.parts import default_capacitor_type
from ..spec.quantities import format_code, format_si

__all__ = ["BOM_COLUMNS", "BUY_COLUMNS", "bom_rows", "bom_csv", "bom_md", "buy_rows", "buy_csv", "node_words",
           "designator_key", "part_order", "power_text", "load_stock_for"]

BOM_COLUMNS = ("designators", "code", "value", "kind", "type", "tolerance", "rating", "quantity", "source", "price",
               "orientation", "note")
BUY_COLUMNS = ("kind", "code", "value", "type", "tolerance", "rating", "quantity", "unit_price", "line_cost",
               "designators", "note")

_KIND_ORDER = {"resistor": 0, "capacitor": 1, "potentiometer": 2, "transistor": 3}
_KIND_OF_PREFIX = {"R": "resistor", "C": "capacitor", "RV": "potentiometer", "VR": "potentiometer", "P": "potentiometer",
                   "Q": "transistor"}
_STOCK_KIND = {"resistor": "resistor", "capacitor": "capacitor", "potentiometer": "pot", "transistor": "transistor"}
_FRACTIONS = {0.125: "1/8", 0.25: "1/4", 0.5: "1/2"}


def designator_key(ref: str) -> tuple[str, int]:
    """Sort key for designators: letters, then the number (R2 before R10)."""
    m = re.match(r"^([A-Za-z]+)(\d+)$", ref)
    return (m.group(1), int(m.group(2))) if m else (ref, 0)


def part_order(ref: str) -> tuple[int, str, int]:
    """Sort key in a builder's order: resistors, capacitors, pots, transistors, then by number."""
    letters, number = designator_key(ref)
    return (_KIND_ORDER.get(_KIND_OF_PREFIX.get(letters, ""), 9), letters, number)


def _kind_of(ref: str) -> str:
    m = re.match(r"^([A-Za-z]+)", ref)
    return _KIND_OF_PREFIX.get(m.group(1) if m else "", "resistor")


def power_text(watts: float) -> str:
    """A resistor power rating as builders write it: ``1/4 W``, ``1 W``."""
    for w, frac in _FRACTIONS.items():
        if abs(watts - w) < 1e-9:
            return f"{frac} W"
    return f"{watts:g} W"


def _pct(tol: float | None) -> str:
    return "" if tol is None else f"{tol * 100:g} %"


def _volts(v: float) -> str:
    return f"{v:+.2f} V".replace("-", "−")


# ---------------------------------------------------------------------------------------
# Where a capacitor lead goes, in words


def _input_name(design, k: int) -> str:
    names = getattr(design, "input_names", ()) or ()
    if 0 < k <= len(names) and names[k - 1] and names[k - 1] != str(k):
        return f"input {k} ({names[k - 1]})"
    return f"input {k}"


#: Nodes named by what they are rather than by a transistor terminal.
_NAMED_NODES = {"f": "the feedback junction", "bs": "the bootstrap node"}
_TERMINALS = ("collector", "base", "emitter")


def node_words(node: str, circuit, design, away_from: str = "") -> str:
    """A circuit node in a builder's words, named by the part it connects to.

    A transistor's terminal is named by the transistor: ``b`` is "Q1 base", ``c`` "Q1
    collector", ``b_q2`` "Q2 base"; a node that is two terminals names both ("Q1 collector
    and Q2 base"). An emitter and the junction between its emitter resistors (``e``/``e2``,
    ``e_q2``/``e2_q2``) are "Q1 emitter side" (with the parts on it). ``f`` is "the feedback
    junction" and ``bs`` "the bootstrap node" (with their parts); ``a{k}`` and ``w{k}`` "the
    input-k side away from the source", ``src{k}`` "the input-k jack", ``out`` "the output",
    ``vcc`` "the supply (+)" and ``0`` "ground". ``away_from`` is the element whose lead this
    is, left out when naming the parts on the node.
    """
    others = sorted({e.ref for e, _ in circuit.neighbours(node) if e.part and e.kind != "Q" and e.ref != away_from},
                    key=designator_key)
    via = f" ({', '.join(others)})" if others else ""
    if node == "0":
        return "ground"
    if node == circuit.supply_node:
        return "the supply (+)"
    if node == circuit.output_node:
        return "the output"
    terms = [(q.ref, _TERMINALS[i]) for q in circuit.transistors for i, n in enumerate(q.nodes) if n == node]
    if terms:
        if len(terms) == 1 and terms[0][1] == "emitter":
            return f"{terms[0][0]} emitter side{via}"
        return " and ".join(f"{ref} {what}" for ref, what in terms)
    m = re.fullmatch(r"e2(?:_q(\d+))?", node)
    if m:
        return f"Q{m.group(1) or 1} emitter side{via}"
    if node in _NAMED_NODES:
        return f"{_NAMED_NODES[node]}{via}"
    m = re.fullmatch(r"(a|w|src)(\d+)", node)
    if m:
        k = int(m.group(2))
        if m.group(1) == "src":
            return f"the {_input_name(design, k)} jack"
        return f"the {_input_name(design, k)} side away from the source{via}"
    return circuit.describe_node(node)


def _orientation(ref: str, cap: dict, an, design) -> dict:
    """Which way a polarised capacitor goes, from the DC voltage across it over the corners."""
    c = an.circuit
    nodes = c.element(ref).nodes
    lo = an.low.get(f"capv:{ref}", cap.get("dc_min", 0.0))
    hi = an.high.get(f"capv:{ref}", cap.get("dc_max", 0.0))
    nom = an.nominal.get(f"capv:{ref}", 0.5 * (lo + hi))
    if cap.get("needs_non_polar") or cap.get("plus_node") is None:
        text = (f"{ref}: non-polar — the DC voltage across it runs from {_volts(lo)} to {_volts(hi)} over the corners "
                f"(it changes sign or stays near 0 V), so fit a non-polar part either way round")
        return {"ref": ref, "plus_node": None, "minus_node": None, "dc": nom, "dc_min": lo, "dc_max": hi,
                "non_polar": True, "text": text}
    plus, minus = cap["plus_node"], cap["minus_node"]
    sign = 1.0 if plus == nodes[0] else -1.0
    dc, dlo, dhi = sign * nom, min(sign * lo, sign * hi), max(sign * lo, sign * hi)
    text = (f"{ref}: + toward {node_words(plus, c, design, ref)}, − toward {node_words(minus, c, design, ref)}; "
            f"{_volts(dc)} DC ({dlo:.2f} to {dhi:.2f} V over the corners)")
    return {"ref": ref, "plus_node": plus, "minus_node": minus, "dc": dc, "dc_min": dlo, "dc_max": dhi,
            "non_polar": False, "text": text}


def load_stock_for(spec):
    """The stock list the spec's search chose from, or None (series-only, no list, unreadable)."""
    pp = getattr(spec, "parts", None)
    if pp is None or pp.stock is None or pp.use == "series-only":
        return None
    from ..errors import FileProblems
    from ..spec.stockfile import load_stock

    try:
        return load_stock(pp.stock)
    except (FileProblems, OSError):
        return None


# ---------------------------------------------------------------------------------------
# BOM rows


def _stock_item(stock, it):
    if stock is None or it is None or it.stock_line is None:
        return None
    if 0 <= it.stock_line < len(stock.items):
        return stock.items[it.stock_line]
    return None


#: Positions whose β matters most, first, with why (topologies not named: designator order).
HFE_PRIORITY = {
    "follower-ce": (("Q1", "the input buffer: its β sets the input impedance"),),
    "ce-follower": (("Q2", "the output buffer: its β sets how lightly it loads Q1's collector"),),
}


def hfe_assignment(topology: str, refs: list[str], beta: dict, pieces) -> dict[str, str]:
    """Which measured piece goes where, as a BOM note per designator.

    ``beta`` maps designators to the (nominal, min, max) β the design was verified over;
    ``pieces`` are the drawer's measured hFE values, one per piece. The positions of
    :data:`HFE_PRIORITY` take the highest pieces inside their verified range; the rest
    take the highest left inside theirs. A position with no piece inside its range is
    told so: the design was not verified with those pieces.
    """
    why = dict(HFE_PRIORITY.get(topology, ()))
    order = [r for r in why if r in refs] + sorted((r for r in refs if r not in why), key=designator_key)
    left = sorted((float(h) for h in pieces), reverse=True)
    out = {}
    for ref in order:
        _, lo, hi = beta.get(ref, (0.0, 0.0, math.inf))
        fit = [h for h in left if lo <= h <= hi]
        outside = sorted({h for h in left if not lo <= h <= hi})
        if fit:
            h = fit[0]
            left.remove(h)
            text = f"fit the piece measured at hFE {h:.0f}"
            text += f" (the highest left in range: {ref} is {why[ref]})" if ref in why else (
                f" (inside the β range {lo:.0f}–{hi:.0f} the design was verified over)")
        else:
            text = (f"no measured piece lies inside the β range {lo:.0f}–{hi:.0f} the design was verified over:"
                    f" buy one or re-check the design with the pieces' values")
        if outside:
            text += "; not verified with the pieces at hFE " + ", ".join(f"{h:.0f}" for h in outside)
        out[ref] = f"{ref}: {text}"
    return out


def _transistor_rows(v, rating: dict, stock) -> list[dict]:
    """One BOM row per transistor (``rating["transistors"]``, else the circuit's), in
    designator order; all are of the design's one type."""
    from ..catalog.transistors import transistor_types

    d = v.design
    qs = list((rating or {}).get("transistors") or [])
    if not qs:
        one = (rating or {}).get("transistor")
        refs = [q.ref for q in v.analysis.circuit.transistors] or ["Q1"]
        qs = [one] if one and len(refs) == 1 else [{"ref": r} for r in refs]
    qs.sort(key=lambda q: designator_key(q.get("ref", "Q1")))
    tt = transistor_types().get(d.transistor)
    drawer = None
    if stock is not None:
        drawer = next((s for s in stock.items if s.kind == "transistor" and str(s.value) == d.transistor), None)
    assigned = hfe_assignment(d.topology, [q.get("ref", "Q1") for q in qs], v.analysis.conditions.beta,
                              drawer.hfe) if drawer is not None and drawer.hfe else {}
    rows = []
    for q in qs:
        ref = q.get("ref", "Q1")
        diss = q.get("dissipation")
        tmax = q.get("ambient_max", d.ambient.max)
        notes = []
        if tt is not None:
            pins = "-".join(tt.pinout)
            orientation = f"{ref}: pins {pins}, flat face toward you, leads down (check your part's datasheet)"
            ttype = f"{tt.polarity.upper()}, {tt.package}"
            rating_text = f"VCEO {tt.vceo:g} V, {format_si(tt.ptot_at(tmax), 'W')} at {tmax - 273.15:.0f} °C"
            if diss is not None:
                notes.append(f"dissipates up to {format_si(diss, 'W')}")
        else:
            orientation = f"{ref}: pinout not in the catalog; read it from your part's datasheet"
            ttype = d.model.polarity.upper()
            rating_text = ""
        source, price = "buy", None
        if drawer is not None:
            source, price = "stock", drawer.price
            notes.append(f"stock line {drawer.line}: {drawer.quantity} in the drawer" +
                         (f", {drawer.note}" if drawer.note else ""))
            if isinstance(drawer.quantity, (int, float)) and drawer.quantity < len(qs):
                notes.append(f"the stage needs {len(qs)} of them")
            if drawer.hfe and ref in assigned:
                notes.append(assigned[ref])
        rows.append({"designators": ref, "refs": [ref], "code": d.transistor, "value": "", "si": None,
                     "kind": "transistor", "type": ttype, "tolerance": "", "rating": rating_text, "quantity": 1,
                     "source": source, "price": price, "orientation": orientation, "orientations": [],
                     "note": "; ".join(notes), "stock_line": None})
    return rows


def bom_rows(v, rating: dict | None, stock=None) -> list[dict]:
    """The BOM of one verified design: one row per distinct part, then one per transistor.

    Parameters
    ----------
    v
        A :class:`~optimizer.search.verify.Verified` (or anything with ``design``,
        ``analysis`` and ``items``).
    rating
        Its ratings (:func:`~optimizer.analysis.evaluate.ratings`).
    stock
        The stock list the search chose from, for prices, ratings and notes of stock parts.

    Returns
    -------
    list of dict
        Keys: the :data:`BOM_COLUMNS` (``price`` a float or None, ``quantity`` an int) plus
        ``refs`` (the designators as a list), ``si`` (the value as a float),
        ``orientations`` (one dict per polarised or non-polar capacitor: ``ref``,
        ``plus_node``, ``minus_node``, ``dc``, ``dc_min``, ``dc_max``, ``non_polar``,
        ``text``) and ``stock_line`` (the stock file line, or None).
    """
    d, an = v.design, v.analysis
    items = getattr(v, "items", {}) or {}
    rating = rating or {}
    rr = {r["ref"]: r for r in rating.get("resistors", [])}
    cr = {r["ref"]: r for r in rating.get("capacitors", [])}
    groups: dict[tuple, dict] = {}
    for p in d.parts:
        kind = _kind_of(p.ref)
        it = items.get(p.ref)
        st = _stock_item(stock, it)
        source = "stock" if (it is not None and it.source == "stock") else "buy"
        notes: list[str] = []
        orient = None
        if kind == "capacitor":
            code = format_code(p.value, "capacitance")
            ptype = p.type or (it.type if it else "") or default_capacitor_type(p.value)
            cap = cr.get(p.ref)
            rating_text = f"{cap['rating']:g} V" if cap else ""
            if cap and ptype == "electrolytic":
                orient = _orientation(p.ref, cap, an, d)
                if orient["non_polar"]:
                    ptype = "bipolar"
                    notes.append("needs a non-polar part (bipolar electrolytic, or film if it fits)")
            if st is not None and st.rating is not None and cap and st.rating < cap["rating"] - 1e-9:
                notes.append(f"the drawer part is rated {st.rating:g} V, below the {cap['rating']:g} V needed")
        elif kind == "potentiometer":
            code = format_code(p.value, "resistance")
            ptype = f"{p.taper} pot"
            rating_text = ""
        else:
            code = format_code(p.value, "resistance")
            ptype = p.type or (it.type if it else "") or (st.type if st is not None and st.type else "") or "film"
            res = rr.get(p.ref)
            rating_text = power_text(res["rating"]) if res else ""
            if res and not res["full_supply_ok"]:
                notes.append(f"{format_si(res['full_supply'], 'W')} if the full supply ever lands across it "
                             f"(a fault elsewhere); {rating_text} is enough in normal use")
            if st is not None and st.rating is not None and res and st.rating < res["rating"] - 1e-12:
                notes.append(f"the drawer part is rated {power_text(st.rating)}, below the {rating_text} needed")
        tol = p.tolerance
        key = (kind, round(p.value, 15), round(tol, 6), ptype, rating_text, source,
               st.line if st is not None else None)
        row = groups.get(key)
        if row is None:
            price = it.price if (source == "stock" and it is not None and it.price is not None) else (
                st.price if (source == "stock" and st is not None) else None)
            row = {"refs": [], "code": code, "value": repr(float(p.value)), "si": float(p.value), "kind": kind,
                   "type": ptype, "tolerance": _pct(tol), "rating": rating_text, "quantity": 0, "source": source,
                   "price": price, "orientations": [], "notes": [], "stock_line": st.line if st is not None else None}
            if st is not None:
                extra = [f"{st.quantity} in the drawer"]
                if st.rating is not None:
                    extra.append(f"rated {power_text(st.rating) if kind != 'capacitor' else f'{st.rating:g} V'}")
                if st.note:
                    extra.append(st.note)
                row["notes"].append(f"stock line {st.line}: " + ", ".join(extra))
            groups[key] = row
        row["refs"].append(p.ref)
        row["quantity"] += 1
        if orient is not None:
            row["orientations"].append(orient)
        for n in notes:
            if n not in row["notes"]:
                row["notes"].append(n)
    rows = []
    for row in groups.values():
        row["refs"].sort(key=designator_key)
        row["orientations"].sort(key=lambda o: designator_key(o["ref"]))
        row["designators"] = ", ".join(row["refs"])
        row["orientation"] = "; ".join(o["text"] for o in row["orientations"])
        row["note"] = "; ".join(row.pop("notes"))
        rows.append(row)
    rows.sort(key=lambda r: (_KIND_ORDER[r["kind"]], designator_key(r["refs"][0])))
    if an.circuit.transistors:
        rows.extend(_transistor_rows(v, rating, stock))
    return rows


def _money(x: float | None) -> str:
    return "" if x is None else f"{x:.2f}"


def bom_csv(rows: list[dict]) -> str:
    """The BOM as CSV with the header of :data:`BOM_COLUMNS`."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(BOM_COLUMNS)
    for r in rows:
        w.writerow([_money(r[c]) if c == "price" else r[c] for c in BOM_COLUMNS])
    return buf.getvalue()


def _md_cell(x: object) -> str:
    return str(x).replace("|", "\\|").replace("\n", " ")


def bom_md(rows: list[dict], title: str) -> str:
    """The BOM as a Markdown table, with the capacitor orientations listed under it."""
    out = [f"# {title}", ""]
    heads = ["Designators", "Part", "Kind", "Type", "Tol.", "Rating", "Qty", "Source", "Each"]
    out.append("| " + " | ".join(heads) + " |")
    out.append("|" + "|".join(["---"] * len(heads)) + "|")
    for r in rows:
        cells = [r["designators"], r["code"], r["kind"], r["type"], r["tolerance"], r["rating"], r["quantity"],
                 r["source"], _money(r["price"])]
        out.append("| " + " | ".join(_md_cell(c) for c in cells) + " |")
    total = sum(r["quantity"] for r in rows)
    out += ["", f"{total} parts on {len(rows)} lines; "
            f"{sum(r['quantity'] for r in rows if r['source'] == 'stock')} from stock, "
            f"{sum(r['quantity'] for r in rows if r['source'] != 'stock')} to buy.", ""]
    orient = [o["text"] for r in rows for o in r["orientations"]] + [r["orientation"] for r in rows
                                                                     if r["kind"] == "transistor" and r["orientation"]]
    if orient:
        out += ["## Which way round", ""] + [f"- {_md_cell(t)}" for t in orient] + [""]
    notes = [(r["designators"], r["note"]) for r in rows if r["note"]]
    if notes:
        out += ["## Notes", ""] + [f"- {_md_cell(refs)}: {_md_cell(n)}" for refs, n in notes] + [""]
    return "\n".join(out)


# ---------------------------------------------------------------------------------------
# What to buy


def _stock_price(stock, kind: str, value, ptype: str) -> float | None:
    """The price the stock list gives for the same part (its price column is the price of one
    piece when bought), the lowest when several lines match."""
    if stock is None:
        return None
    sk = _STOCK_KIND[kind]
    best = None
    for s in stock.items:
        if s.kind != sk or s.price is None:
            continue
        if kind == "transistor":
            same = str(s.value) == str(value)
        else:
            # A capacitor's type sets its price; a resistor's hardly does.
            same = isinstance(s.value, float) and math.isclose(s.value, value, rel_tol=1e-9) and (
                kind != "capacitor" or not s.type or not ptype or s.type == ptype)
        if same and (best is None or s.price < best):
            best = s.price
    return best


def buy_rows(designs_rows, stock=None) -> list[dict]:
    """What is not in stock, one line per part (kind, value, type, tolerance, rating).

    ``designs_rows`` is the BOM of one design (a list of rows) or of several (a list of such
    lists, to buy for several builds at once). Unit prices come from the BOM row, else from
    the stock list's price for the same part; a last row with ``kind`` "total" sums the
    line costs when any price is known, and says how many lines have none.
    """
    seq = list(designs_rows)
    if seq and isinstance(seq[0], list):
        flat = [r for rows in seq for r in rows]
    else:
        flat = seq
    groups: dict[tuple, dict] = {}
    for r in flat:
        if r["source"] == "stock":
            continue
        key = (r["kind"], r["code"], r["type"], r["tolerance"], r["rating"])
        g = groups.get(key)
        if g is None:
            price = r.get("price")
            if price is None:
                price = _stock_price(stock, r["kind"], r["si"] if r["si"] is not None else r["code"], r["type"])
            g = {"kind": r["kind"], "code": r["code"], "value": r["value"], "type": r["type"],
                 "tolerance": r["tolerance"], "rating": r["rating"], "quantity": 0, "unit_price": price,
                 "line_cost": None, "refs": [], "note": ""}
            groups[key] = g
        g["quantity"] += r["quantity"]
        g["refs"] += [x for x in r["refs"] if x not in g["refs"]]
    rows = sorted(groups.values(), key=lambda g: (_KIND_ORDER[g["kind"]], float(g["value"]) if g["value"] else 0.0,
                                                  g["code"], g["type"], g["tolerance"], g["rating"]))
    for g in rows:
        g["refs"].sort(key=designator_key)
        g["designators"] = ", ".join(g["refs"])
        if g["unit_price"] is not None:
            g["line_cost"] = round(g["unit_price"] * g["quantity"], 6)
        else:
            g["note"] = "price unknown"
    if rows:
        known = [g["line_cost"] for g in rows if g["line_cost"] is not None]
        missing = sum(1 for g in rows if g["line_cost"] is None)
        note = "all prices known" if not missing else (
            f"{missing} line(s) without a price are not included" if known else "no prices known")
        rows.append({"kind": "total", "code": "", "value": "", "type": "", "tolerance": "", "rating": "",
                     "quantity": sum(g["quantity"] for g in rows), "unit_price": None,
                     "line_cost": round(sum(known), 6) if known else None, "refs": [], "designators": "",
                     "note": note})
    return rows


def buy_csv(rows: list[dict]) -> str:
    """The buy list as CSV with the header of :data:`BUY_COLUMNS`."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(BUY_COLUMNS)
    for r in rows:
        w.writerow([_money(r[c]) if c in ("unit_price", "line_cost") else r[c] for c in BUY_COLUMNS])
    return buf.getvalue()


def is_polarised(el) -> bool:
    from ..catalog.parts import default_capacitor_type, polarised

    try:
        return polarised(el.type or default_capacitor_type(el.value))
    except Exception:  # an unknown type name: draw it without polarity
        return False


def polarised_caps(circuit) -> list[str]:
    """Designators of the capacitors drawn with a + mark (electrolytic parts)."""
    return [e.ref for e in circuit.parts if e.kind == "C" and is_polarised(e)]
