"""Stock lists: the parts in the drawer.

CSV with the header ``kind,value,quantity,tolerance,rating,type,price,note`` (plus an
optional ``hfe`` column), or the same fields as a YAML list. Only ``kind``, ``value`` and
``quantity`` are required. ``kind`` is resistor, capacitor, pot or transistor; ``value`` is
a part value in any notation :mod:`optimizer.spec.quantities` reads, or a transistor type;
``rating`` is watts for resistors and volts for capacitors; measured hFE may be given in
the ``hfe`` column or in the note (``hFE 212`` or ``hFE 180 205 230``, one per piece).

Every bad row is reported with its line number, all at once; nothing is dropped silently.
Rows that describe the same part are merged (quantities added) and a warning says so.
"""

from __future__ import annotations

import csv
import difflib
import io
import re
from dataclasses import dataclass, replace
from pathlib import Path

from ..errors import FileProblems, Problem, display_path
from .quantities import format_code, parse_quantity, parse_tolerance, parse_value
from .source import Node, Reader, load_yaml

__all__ = ["KINDS", "Stock", "StockItem", "load_stock"]

KINDS = ("resistor", "capacitor", "pot", "transistor")
COLUMNS = ("kind", "value", "quantity", "tolerance", "rating", "type", "price", "note", "hfe")
REQUIRED = ("kind", "value", "quantity")
TYPES = {
    "resistor": ("metal-film", "carbon-film", "thick-film", "wirewound", "carbon-composition"),
    "capacitor": ("ceramic", "film", "electrolytic", "bipolar", "tantalum"),
    "pot": ("linear", "log"),
    "transistor": (),
}


@dataclass(frozen=True)
class StockItem:
    """One line of stock. ``value`` is SI (ohm, farad) or the transistor type name."""

    kind: str
    value: float | str
    quantity: int
    tolerance: float | None = None
    rating: float | None = None
    type: str | None = None
    price: float | None = None
    note: str = ""
    hfe: tuple[float, ...] = ()
    line: int = 0

    def key(self) -> tuple:
        """What makes two rows the same part."""
        return (self.kind, self.value, self.tolerance, self.rating, self.type, self.price)

    def to_json(self) -> dict:
        d = {"kind": self.kind, "value": self.value, "quantity": self.quantity}
        for k in ("tolerance", "rating", "type", "price"):
            if getattr(self, k) is not None:
                d[k] = getattr(self, k)
        if self.note:
            d["note"] = self.note
        if self.hfe:
            d["hfe"] = list(self.hfe)
        return d


@dataclass(frozen=True)
class Stock:
    """A parsed stock list."""

    items: tuple[StockItem, ...]
    path: Path | None = None
    warnings: tuple[str, ...] = ()

    def of_kind(self, kind: str) -> tuple[StockItem, ...]:
        return tuple(i for i in self.items if i.kind == kind)


_HFE_NOTE = re.compile(r"\bh[Ff][Ee]\s*[=:]?\s*((?:\d+(?:\.\d+)?)(?:\s*[,;/ ]\s*\d+(?:\.\d+)?)*)")


def _parse_row(
    r: Reader, line: int, fields: dict[str, str], known_transistors: set[str], lines: dict[str, int] | None = None
) -> StockItem | None:
    """One row; ``lines`` gives a field's own line when it differs from the row's (YAML)."""
    n0 = len(r.problems)
    at = lambda col: (lines or {}).get(col, line)  # noqa: E731

    def bad(col: str, msg: str) -> None:
        r.problem(at(col), col, msg)

    kind_text = (fields.get("kind") or "").strip().lower()
    if not kind_text:
        bad("kind", "is empty (allowed: " + ", ".join(KINDS) + ")")
        return None
    if kind_text not in KINDS:
        close = difflib.get_close_matches(kind_text, KINDS, n=1, cutoff=0.5)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        bad("kind", f"{kind_text!r} is not a kind of part{hint} (allowed: {', '.join(KINDS)})")
        return None
    kind = kind_text
    raw_value = (fields.get("value") or "").strip()
    value: float | str | None = None
    tol_from_code = None
    if not raw_value:
        bad("value", "is empty")
    elif kind == "transistor":
        if raw_value not in known_transistors:
            close = difflib.get_close_matches(raw_value, sorted(known_transistors), n=1, cutoff=0.6)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            bad("value", f"unknown transistor type {raw_value!r}{hint} (add it to catalog/transistors.yaml)")
        else:
            value = raw_value
    else:
        vk = "capacitance" if kind == "capacitor" else "resistance"
        pv = r.parse(Node(_maybe_number(raw_value, vk), at("value"), "value"), lambda t: parse_value(t, vk))
        if pv is not None:
            value, tol_from_code = pv.value, pv.tolerance
    qty_text = (fields.get("quantity") or "").strip()
    qty = None
    if not qty_text:
        bad("quantity", "is empty")
    elif not re.fullmatch(r"\d+", qty_text) or int(qty_text) < 1:
        bad("quantity", f"{qty_text!r} must be a whole number of pieces, 1 or more")
    else:
        qty = int(qty_text)
    tol = tol_from_code
    if fields.get("tolerance", "").strip():
        tol = r.parse(Node(fields["tolerance"].strip(), at("tolerance"), "tolerance"), parse_tolerance)
    rating = None
    if fields.get("rating", "").strip():
        rt = fields["rating"].strip()
        if kind in ("resistor", "pot"):
            rating = r.parse(Node(rt, at("rating"), "rating"), lambda t: parse_quantity(t, "power"))
        elif kind == "capacitor":
            rating = r.parse(Node(rt, at("rating"), "rating"), lambda t: parse_quantity(t, "voltage"))
        else:
            bad("rating", "a transistor's ratings come from its type; leave this empty")
    ptype = None
    if fields.get("type", "").strip():
        ptype = fields["type"].strip().lower()
        allowed = TYPES[kind]
        if allowed and ptype not in allowed:
            close = difflib.get_close_matches(ptype, allowed, n=1, cutoff=0.5)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            bad("type", f"{ptype!r} is not a {kind} type{hint} (allowed: {', '.join(allowed)})")
    price = None
    if fields.get("price", "").strip():
        pt = fields["price"].strip()
        try:
            price = float(pt)
            if price < 0:
                raise ValueError
        except ValueError:
            bad("price", f"{pt!r} must be a number, the price of one piece (no currency sign)")
    note = (fields.get("note") or "").strip()
    hfe: tuple[float, ...] = ()
    hfe_text = (fields.get("hfe") or "").strip()
    if not hfe_text:
        mm = _HFE_NOTE.search(note)
        hfe_text = mm.group(1) if mm else ""
    if hfe_text:
        if kind != "transistor":
            bad("hfe", f"{hfe_text!r}: measured hFE applies to transistors only (this row is a {kind})")
        else:
            parts = [p for p in re.split(r"[\s,;/]+", hfe_text) if p]
            try:
                hfe = tuple(float(p) for p in parts)
            except ValueError:
                bad("hfe", f"{hfe_text!r} must be numbers, one per piece measured")
            if hfe and (min(hfe) < 5 or max(hfe) > 5000):
                bad("hfe", f"{hfe_text!r}: a measured hFE should lie between 5 and 5000")
            if hfe and qty is not None and len(hfe) > qty:
                bad("hfe", f"{len(hfe)} measurements for {qty} pieces")
    if len(r.problems) > n0:
        return None
    return StockItem(kind, value, qty, tol, rating, ptype, price, note, hfe, line)


def _cell(node: Node) -> str:
    """A YAML field as the text a CSV cell would hold (a list of readings joined by spaces)."""
    if node.value is None:
        return ""
    if node.is_list:
        return " ".join("" if v.value is None else str(v.plain()) for v in node.value)
    return str(node.plain())


def _maybe_number(text: str, kind: str):
    """CSV cells are text; a bare number is a resistance in ohms (capacitances need units)."""
    if kind == "resistance" and re.fullmatch(r"\d+(\.\d+)?", text):
        return float(text)
    return text


def _shown_value(it: StockItem) -> str:
    if it.kind == "transistor":
        return str(it.value)
    return format_code(it.value, "capacitance" if it.kind == "capacitor" else "resistance")


def _merge(items: list[StockItem]) -> tuple[list[StockItem], list[str]]:
    out: dict[tuple, StockItem] = {}
    warnings = []
    for it in items:
        k = it.key()
        if k in out:
            first = out[k]
            warnings.append(
                f"line {it.line}: same part as line {first.line} ({it.kind} {_shown_value(it)}); "
                f"merged, {first.quantity} + {it.quantity} = {first.quantity + it.quantity} pieces"
            )
            note = "; ".join(x for x in (first.note, it.note) if x)
            out[k] = replace(first, quantity=first.quantity + it.quantity, note=note, hfe=first.hfe + it.hfe)
        else:
            out[k] = it
    return list(out.values()), warnings


def load_stock(path: str | Path, known_transistors: set[str] | None = None) -> Stock:
    """Read a stock list (CSV or YAML, by file extension).

    Raises
    ------
    FileProblems
        Listing every bad row with its line number.
    """
    from ..catalog.transistors import transistor_types

    p = Path(path)
    shown = display_path(p)
    if known_transistors is None:
        known_transistors = set(transistor_types())
    r = Reader(shown)
    rows: list[tuple[int, dict[str, str], dict[str, int]]] = []
    if p.suffix.lower() in (".yaml", ".yml"):
        root = load_yaml(p)
        items = root.value.get("items") if root.is_map else root
        seq = r.seq(items if isinstance(items, Node) else root, "a list of parts (or a mapping with items:)")
        for n in seq or []:
            m = r.keys(n, COLUMNS, REQUIRED)
            if m is None or any(k not in m for k in REQUIRED):
                continue
            rows.append((n.line, {k: _cell(v) for k, v in m.items()}, {k: v.line for k, v in m.items()}))
    else:
        try:
            text = p.read_text(encoding="utf-8-sig")
        except FileNotFoundError:
            raise FileProblems([Problem(shown, 0, "", "the stock file does not exist")]) from None
        except (OSError, UnicodeDecodeError) as err:
            raise FileProblems([Problem(shown, 0, "", f"cannot be read ({err})")]) from None
        lines = [ln for ln in text.splitlines()]
        # Comment lines (starting with #) are allowed anywhere; keep line numbers right.
        body = "\n".join("" if ln.lstrip().startswith("#") else ln for ln in lines)
        reader = csv.reader(io.StringIO(body))
        header: list[str] | None = None
        for rec in reader:
            lineno = reader.line_num
            if not any(c.strip() for c in rec):
                continue
            if header is None:
                header = [c.strip().lower() for c in rec]
                for col in header:
                    if col not in COLUMNS:
                        close = difflib.get_close_matches(col, COLUMNS, n=1, cutoff=0.6)
                        hint = f"; did you mean {close[0]!r}?" if close else ""
                        r.problem(lineno, "header", f"unknown column {col!r}{hint} (allowed: {', '.join(COLUMNS)})")
                for col in REQUIRED:
                    if col not in header:
                        r.problem(lineno, "header", f"the {col!r} column is missing (required: {', '.join(REQUIRED)})")
                if r.problems:
                    r.raise_if_any()
                continue
            if len(rec) > len(header):
                r.problem(lineno, "", f"has {len(rec)} cells but the header has {len(header)} (a comma in a value? quote it)")
                continue
            rows.append((lineno, dict(zip(header, (c.strip() for c in rec))), {}))
        if header is None:
            raise FileProblems([Problem(shown, 1, "", "the stock file is empty (it needs a header: kind,value,quantity,...)")])
    parsed = []
    for lineno, fields, lines in rows:
        it = _parse_row(r, lineno, fields, known_transistors, lines)
        if it is not None:
            parsed.append(it)
    r.raise_if_any()
    merged, warnings = _merge(parsed)
    return Stock(tuple(merged), p, tuple(warnings))
