"""The builder's report: one self-contained HTML file.

Everything it shows is inside the file: the style sheet is inline, the schematic is inline
SVG and the plots are PNG data URIs, so it opens the same on a bench laptop with no
network. Nothing in it depends on the time it was written, so the same design gives the
same bytes.
"""

from __future__ import annotations

import base64
import html
import math
import re

from ..spec.quantities import format_code, format_si
from .bom import bom_rows, buy_rows, load_stock_for, part_order
from .bringup import bringup_rows, corners_text
from .cautions import CAUTIONS

__all__ = ["report_html", "FIGURES"]

#: The plots of design 1, in report order: (key in ``figures``, heading, caption).
FIGURES = (
    ("frequency", "Frequency response",
     "Gain from each input to the load against frequency, at the nominal point and the corners."),
    ("loadline", "Load line",
     "The gain transistor's operating point on its DC and AC load lines; the distance to the ends is the room to "
     "swing."),
    ("headroom", "Headroom against supply",
     "Undistorted output swing as the supply falls from fresh to tired, against the level the spec asks for."),
    ("montecarlo", "Monte Carlo spread",
     "How the main figures spread when every part is a random draw within its tolerance."),
)

_CSS = """
body{margin:0;background:#f7f5f0;color:#22282c;font:15px/1.45 "DejaVu Sans",Verdana,sans-serif}
main{max-width:1100px;margin:0 auto;padding:18px 22px 40px}
h1{font-size:24px;margin:6px 0 4px;color:#1d3b4a}
h2{font-size:18px;margin:28px 0 8px;padding-bottom:3px;border-bottom:2px solid #c28b3c;color:#1d3b4a}
h3{font-size:15px;margin:18px 0 6px;color:#3d4f58}
p.lede{margin:2px 0 10px;color:#4a555b}
.status{display:inline-block;padding:1px 9px;border-radius:3px;font-weight:bold;color:#fff;background:#5b6b73}
.status.optimal{background:#2d6a4f}.status.feasible{background:#a86b1d}.status.infeasible{background:#9b2c2c}
table{border-collapse:collapse;margin:6px 0 10px;background:#fff}
th,td{border:1px solid #d3ccbf;padding:3px 7px;text-align:left;vertical-align:top}
th{background:#ebe5d8;font-weight:600}
td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
td.ok{color:#2d6a4f;font-weight:600}td.bad{color:#9b2c2c;font-weight:600}
tr.sub th{background:#f3efe6;font-weight:normal;font-style:italic}
.fig{margin:8px 0 18px;padding:8px;background:#fff;border:1px solid #d3ccbf}
.fig img,.fig svg{max-width:100%;height:auto;display:block}
.fig p{margin:6px 0 0;color:#4a555b;font-size:13px}
.missing{color:#8a5a14;font-style:italic}
ul.cautions li{margin-bottom:6px}
footer{margin-top:30px;padding-top:8px;border-top:1px solid #d3ccbf;color:#5b6b73;font-size:13px}
""".strip()


def _e(x: object) -> str:
    return html.escape("" if x is None else str(x), quote=True)


def _png(data: bytes, alt: str) -> str:
    b64 = base64.b64encode(data).decode("ascii")
    return f'<img src="data:image/png;base64,{b64}" alt="{_e(alt)}">'


def _inline_svg(text: str) -> str:
    """An SVG document as an inline element: no XML prolog, doctype, comments, scripts or metadata."""
    s = re.sub(r"<\?xml[^>]*\?>", "", text)
    s = re.sub(r"<!DOCTYPE[^>]*>", "", s, flags=re.IGNORECASE)
    s = re.sub(r"<!--.*?-->", "", s, flags=re.DOTALL)
    s = re.sub(r"<script\b.*?</script\s*>", "", s, flags=re.DOTALL | re.IGNORECASE)
    s = re.sub(r"<metadata\b.*?</metadata\s*>", "", s, flags=re.DOTALL | re.IGNORECASE)
    return s.strip()


def _value_text(value: float, unit: str) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "—"
    if math.isinf(value):
        return "∞" if value > 0 else "−∞"
    if unit == "dB":
        return f"{value:+.2f} dB".replace("-", "−")
    if unit == "%":
        return f"{value:.3g} %"
    return format_si(value, unit)


def _margin_text(m: float) -> str:
    if math.isinf(m):
        return "∞" if m > 0 else "−∞"
    return f"{m:+.3f}".replace("-", "−")


def _code(ref: str, value: float) -> str:
    return format_code(value, "capacitance" if ref.startswith("C") else "resistance")


def _status_block(spec, result) -> str:
    st = result.status
    out = [f'<h1>{_e(spec.name)} <span class="status {_e(st)}">{_e(st)}</span></h1>']
    if getattr(spec, "description", None):
        out.append(f'<p class="lede">{_e(spec.description)}</p>')
    n = len(result.designs)
    says = {"optimal": "proved best: no design left out can beat the margin of the last one listed",
            "feasible": "the best designs verified before the search stopped; better ones may exist",
            "infeasible": "no design can meet every target"}
    out.append(f"<p>{n} design{'s' if n != 1 else ''} listed, topology {_e(result.topology)}; "
               f"{_e(says.get(st, st))}.</p>")
    if result.bound is not None:
        out.append(f"<p>Bound: no design that is not listed can reach a margin above {_e(_margin_text(result.bound))}.</p>")
    if result.notes:
        out.append("<ul>" + "".join(f"<li>{_e(n)}</li>" for n in result.notes) + "</ul>")
    return "\n".join(out)


def _ranked(result, rated, stock) -> str:
    ds = result.designs
    heads = "".join(f"<th>design {i}</th>" for i in range(1, len(ds) + 1))
    rows = []

    def row(label: str, cells: list[str], cls: list[str] | None = None) -> None:
        cls = cls or ["num"] * len(cells)
        tds = "".join(f'<td class="{c}">{x}</td>' for x, c in zip(cells, cls))
        rows.append(f"<tr><th>{_e(label)}</th>{tds}</tr>")

    boms = [bom_rows(v, rated.get(id(v)), stock) for v in ds]
    row("margin", [_e(_margin_text(v.margin)) for v in ds])
    row("parts (with the transistors)", [str(len(v.design.parts) + len(v.analysis.circuit.transistors)) for v in ds])
    row("distinct values (BOM lines)", [str(len(b)) for b in boms])
    row("parts from stock", [f"{sum(1 for it in v.items.values() if it.source == 'stock')} of {len(v.design.parts)}"
                             for v in ds])
    row("transistor", [_e(v.design.transistor) for v in ds], ["" for _ in ds])
    rows.append(f'<tr class="sub"><th colspan="{len(ds) + 1}">parts</th></tr>')
    refs = sorted({p.ref for v in ds for p in v.design.parts}, key=part_order)
    roles = {}
    for v in ds:
        for p in v.design.parts:
            roles.setdefault(p.ref, p.role.replace("_", " ") + (f" {p.input}" if p.input else ""))
    for ref in refs:
        cells = []
        for v in ds:
            p = next((p for p in v.design.parts if p.ref == ref), None)
            cells.append("—" if p is None else _e(_code(ref, p.value)))
        row(f"{ref} ({roles[ref]})", cells)
    rows.append(f'<tr class="sub"><th colspan="{len(ds) + 1}">targets: worst value over the corners, margin</th></tr>')
    names = []
    for v in ds:
        for t in v.targets:
            if t.name not in names:
                names.append(t.name)
    for name in names:
        cells, cls, limit = [], [], ""
        for v in ds:
            t = next((t for t in v.targets if t.name == name), None)
            if t is None:
                cells.append("—")
                cls.append("num")
                continue
            limit = t.limit
            verdict = "pass" if t.passed else "FAIL"
            cells.append(f"{_e(_value_text(t.worst, t.unit))}<br>{_e(_margin_text(t.margin))} {verdict}")
            cls.append("num ok" if t.passed else "num bad")
        row(f"{name} ({limit})", cells, cls)
    return f"<table><tr><th></th>{heads}</tr>\n" + "\n".join(rows) + "\n</table>"


def _bom_table(rows: list[dict]) -> str:
    heads = ["designators", "part", "kind", "type", "tolerance", "rating", "qty", "source", "each", "notes"]
    out = ["<table><tr>" + "".join(f"<th>{_e(h)}</th>" for h in heads) + "</tr>"]
    for r in rows:
        note = "; ".join(x for x in (r["orientation"], r["note"]) if x)
        cells = [(r["designators"], ""), (r["code"], ""), (r["kind"], ""), (r["type"], ""), (r["tolerance"], "num"),
                 (r["rating"], ""), (r["quantity"], "num"), (r["source"], ""),
                 ("" if r["price"] is None else f"{r['price']:.2f}", "num"), (note, "")]
        out.append("<tr>" + "".join(f'<td class="{c}">{_e(x)}</td>' if c else f"<td>{_e(x)}</td>"
                                    for x, c in cells) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _buy_table(rows: list[dict]) -> str:
    if not rows:
        return "<p>Everything comes from the stock list: nothing to buy.</p>"
    heads = ["part", "kind", "type", "rating", "qty", "each", "line", "for", "note"]
    out = ["<table><tr>" + "".join(f"<th>{_e(h)}</th>" for h in heads) + "</tr>"]
    for r in rows:
        m = lambda x: "" if x is None else f"{x:.2f}"  # noqa: E731
        cells = [r["code"], r["kind"], r["type"], r["rating"], r["quantity"], m(r["unit_price"]), m(r["line_cost"]),
                 r["designators"], r["note"]]
        out.append("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in cells) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _bringup_table(v) -> str:
    out = ["<table><tr><th>reading</th><th>where</th><th>min</th><th>typical</th><th>max</th><th>if it is outside</th></tr>"]
    for r in bringup_rows(v):
        u = r["unit"]
        out.append(f"<tr><td>{_e(r['what'])}</td><td>{_e(r['probe'])}</td>"
                   f'<td class="num">{_e(format_si(r["min"], u))}</td><td class="num">{_e(format_si(r["typ"], u))}</td>'
                   f'<td class="num">{_e(format_si(r["max"], u))}</td><td>{_e(r["hint"])}</td></tr>')
    out.append("</table>")
    return "\n".join(out)


def _mc_table(mc: dict) -> str:
    y = mc.get("yield") or {}
    rows = [(k, x) for k, x in sorted(y.items()) if k != "large_signal_samples"]
    n = mc.get("samples", 0)
    sw = mc.get("swing") or {}
    intro = f"{_e(n)} random builds (seed {_e(mc.get('seed'))})"
    if sw.get("samples"):
        intro += (f"; the swing (large-signal) analysis covers the first {_e(sw['samples'])} of them, "
                  f"at the lowest supply ({_e(format_si(sw.get('supply', 0.0), 'V'))})")
    out = [f"<p>{intro}.</p>"]
    if rows:
        out.append("<p>A build counts as meeting a target when it does so at every end of the supply and "
                   "temperature ranges.</p>")
        out.append("<table><tr><th>target</th><th>builds that meet it</th></tr>")
        for k, x in rows:
            out.append(f'<tr><td>{_e(k)}</td><td class="num">{_e(f"{100 * x:.1f} %")}</td></tr>')
        out.append("</table>")
    return "\n".join(out)


def _figure(key: str, title: str, caption: str, figures: dict) -> str:
    data = figures.get(key)
    if isinstance(data, (bytes, bytearray)) and data:
        body = _png(bytes(data), title)
    else:
        why = (figures.get("missing") or {}).get(key, "not available")
        body = f'<p class="missing">{_e(title)}: not drawn ({_e(why)}).</p>'
        return f'<div class="fig">{body}</div>'
    return f'<div class="fig">{body}<p>{_e(caption)}</p></div>'


def _schematic(figures: dict) -> str:
    svg = figures.get("schematic_svg")
    if isinstance(svg, str) and "<svg" in svg:
        return f'<div class="fig">{_inline_svg(svg)}</div>'
    png = figures.get("schematic_png")
    if isinstance(png, (bytes, bytearray)) and png:
        return f'<div class="fig">{_png(bytes(png), "schematic of design 1")}</div>'
    why = (figures.get("missing") or {}).get("schematic", "not available")
    return f'<div class="fig"><p class="missing">Schematic: not drawn ({_e(why)}).</p></div>'


def report_html(spec, result, rated: dict, figures: dict) -> str:
    """The whole report as one HTML document.

    Parameters
    ----------
    spec
        The :class:`~optimizer.spec.specfile.Spec` searched.
    result
        Its :class:`~optimizer.search.solve.SearchResult`.
    rated
        ``{id(verified): ratings}`` for every design.
    figures
        ``schematic_svg`` (text) or ``schematic_png``, and ``frequency``, ``loadline``,
        ``headroom``, ``montecarlo`` (PNG bytes) for design 1; ``monte_carlo`` (the Monte
        Carlo result, for the yield table); ``missing`` ({name: why}) for what could not be
        drawn. Absent figures are named in the report with the reason.
    """
    stock = load_stock_for(spec)
    body = [_status_block(spec, result)]
    if result.designs:
        v = result.designs[0]
        d = v.design
        body.append("<h2>Schematic of design 1</h2>")
        body.append(_schematic(figures))
        body.append("<h2>Ranked designs</h2>")
        body.append("<p>Margin is the smallest, over all targets, of how far the worst corner sits inside the limit "
                    "(natural-log ratio: 0.10 is about 10 % to spare; below 0 misses).</p>")
        body.append(_ranked(result, rated, stock))
        rows = bom_rows(v, rated.get(id(v)), stock)
        body.append("<h2>Bill of materials, design 1</h2>")
        body.append(f"<p>{_e(d.topology)} with {_e(d.transistor)}, "
                    f"{sum(r['quantity'] for r in rows)} parts on {len(rows)} lines.</p>")
        body.append(_bom_table(rows))
        body.append("<h3>To buy</h3>")
        body.append(_buy_table(buy_rows(rows, stock)))
        body.append("<h2>Bring-up sheet</h2>")
        body.append("<p>Measure with no signal, black probe on ground. Each range covers every corner checked; on one "
                    "build at one supply the readings sit well inside it.</p>")
        body.append(_bringup_table(v))
        body.append("<h2>Plots, design 1</h2>")
        for key, title, caption in FIGURES:
            body.append(f"<h3>{_e(title)}</h3>")
            body.append(_figure(key, title, caption, figures))
            if key == "montecarlo" and figures.get("monte_carlo"):
                body.append(_mc_table(figures["monte_carlo"]))
            if key == "montecarlo" and (figures.get("missing") or {}).get("monte_carlo"):
                body.append(f'<p class="missing">Monte Carlo: {_e(figures["missing"]["monte_carlo"])}.</p>')
        corners = corners_text(v.analysis)
    else:
        body.append("<p>No design to show.</p>")
        for c in getattr(result, "conflicts", []) or []:
            body.append(f"<p>{_e(getattr(c, 'text', c))}</p>")
        corners = ""
    body.append("<h2>Cautions</h2>")
    body.append('<ul class="cautions">' + "".join(f"<li><strong>{_e(t)}.</strong> {_e(x)}</li>" for t, x in CAUTIONS)
                + "</ul>")
    foot = ("Values were checked at these corners: " + corners + "." if corners
            else "No design was checked.")
    body.append(f"<footer>{_e(foot)} Written by stagefit.</footer>")
    title = f"stagefit report: {spec.name} ({result.status})"
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>{_e(title)}</title>\n"
            f"<style>\n{_CSS}\n</style>\n</head>\n<body>\n<main>\n" + "\n".join(body) + "\n</main>\n</body>\n</html>\n")
