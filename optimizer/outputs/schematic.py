"""A schematic of a divider-ce stage, drawn with schemdraw, as SVG text or PNG bytes.

The layout is fixed and plain: the supply rail on top, the ground rail at the bottom, the
bias divider on the base, the transistor's collector and emitter branches in one column,
the output capacitor and the load on the right, and the inputs stacked on the left, each
a row of source jack, input capacitor, optional level pot and summing resistor into a
vertical bus that feeds the base. Every part carries its designator and value code.

Polarised (electrolytic) capacitors get their + side on the node with the higher DC
voltage, taken from the engine's operating point at the design's nominal conditions.

The drawing is rendered on a matplotlib figure of our own (object-oriented API, Agg
canvas); the SVG has a fixed hash salt and no date, so the same design always gives the
same text. schemdraw and matplotlib are imported inside the functions.
"""

from __future__ import annotations

import io

__all__ = ["polarised_caps", "render_figure", "schematic_drawing", "schematic_layout", "schematic_png", "schematic_svg"]

#: Length of a vertical or horizontal part (drawing units), and spacing constants.
L = 2.5
FONT = 10
INCHES_PER_UNIT = 0.42
PNG_DPI = 100
MARGIN = 0.8
LABEL_INK = "#2e3a44"
LINE_INK = "#1f2a33"


def _resolve(an_or_circuit, design):
    """(circuit, design) from an Analysis or a Circuit plus its Design."""
    if hasattr(an_or_circuit, "circuit") and hasattr(an_or_circuit, "nominal"):
        return an_or_circuit.circuit, design if design is not None else an_or_circuit.design
    if design is None:
        raise ValueError("a schematic of a bare circuit needs its design (supply, load and input names)")
    return an_or_circuit, design


def _code(el) -> str:
    from ..spec.quantities import format_code

    return format_code(el.value, "capacitance" if el.kind == "C" else "resistance")


def _is_polarised(el) -> bool:
    from ..catalog.parts import default_capacitor_type, polarised

    try:
        return polarised(el.type or default_capacitor_type(el.value))
    except Exception:  # an unknown type name: draw it without polarity
        return False


def polarised_caps(circuit) -> list[str]:
    """Designators of the capacitors drawn with a + mark (electrolytic parts)."""
    return [e.ref for e in circuit.parts if e.kind == "C" and _is_polarised(e)]


def _cap_voltages(circuit, design) -> dict[str, float]:
    """DC voltage across every capacitor, v(node 0) − v(node 1), at nominal conditions."""
    from ..analysis.network import Batch, Network

    op = Network(circuit).operating_point(Batch.single(circuit, design.supply.nominal, design.ambient.nominal))
    return {ref: float(v[0]) for ref, v in op.cap_voltage.items()}


class _Sheet:
    """A schemdraw drawing with the few primitives this layout needs."""

    def __init__(self):
        import schemdraw
        import schemdraw.elements as elm

        self.elm = elm
        self.d = schemdraw.Drawing(show=False)
        self.d.config(fontsize=FONT, font="DejaVu Sans", color=LINE_INK, lw=1.4, unit=L, margin=MARGIN)
        self.transistor = None
        self.plus: dict[str, str] = {}  # capacitor → the node its + mark is drawn on

    def add(self, e):
        return self.d.add(e)

    def wire(self, a, b):
        if (abs(a[0] - b[0]) + abs(a[1] - b[1])) > 1e-9:
            self.add(self.elm.Line().endpoints(a, b))

    def dot(self, p, open_=False):
        self.add(self.elm.Dot(open=open_).at(p))

    def text(self, p, s, ha="center", va="center", color=LABEL_INK):
        self.add(self.elm.Label().at(p).label(s, halign=ha, valign=va, fontsize=FONT, color=color))

    def resistor(self, a, b):
        return self.add(self.elm.Resistor().endpoints(a, b))

    def pot(self, a, b):
        return self.add(self.elm.Potentiometer().endpoints(a, b))

    def capacitor(self, el, points: dict, volts: dict):
        """A capacitor between the points of its two nodes, + toward the higher DC node."""
        n0, n1 = el.nodes
        p0, p1 = points[n0], points[n1]
        polar = _is_polarised(el)
        if polar:
            plus = n0 if volts.get(el.ref, 0.0) >= 0 else n1
            if plus == n1:
                p0, p1 = p1, p0  # the start of schemdraw's capacitor carries the + mark
            self.plus[el.ref] = plus
        return self.add(self.elm.Capacitor(polar=polar).endpoints(p0, p1))

    def ground(self, p):
        self.add(self.elm.Ground().theta(0).at(p))


def schematic_drawing(an_or_circuit, design=None):
    """The schemdraw Drawing of the stage (for tests and further rendering)."""
    return schematic_layout(an_or_circuit, design)[0]


def schematic_layout(an_or_circuit, design=None):
    """(Drawing, facts) where facts has ``plus`` (capacitor → node of its + mark) and
    ``transistor`` (the schemdraw element drawn for Q1)."""
    circuit, design = _resolve(an_or_circuit, design)
    d, sheet = _draw(circuit, design)
    return d, {"plus": dict(sheet.plus), "transistor": sheet.transistor}


def _draw(circuit, design):
    from ..spec.quantities import format_si
    from .plots import input_label

    s = _Sheet()
    elm = s.elm
    volts = _cap_voltages(circuit, design)
    q = circuit.transistors[0]
    pnp = q.model.polarity == "pnp"

    def one(role, k=None):
        els = circuit.by_role(role, k)
        return els[0] if els else None

    rc, re1, re2 = one("collector"), one("emitter"), one("emitter_bypassed")
    ce, co = one("bypass_cap"), one("output_cap")
    r_top, r_bot = one("bias_top"), one("bias_bottom")
    c_node, b_node, e_node = q.nodes
    rail_top, rail_bot = circuit.supply_node, "0"

    # The transistor's column: which parts sit above (between the supply and the upper
    # terminal) and below (between the lower terminal and ground).
    emitter_parts = [p for p in (re1, re2) if p is not None]
    if pnp:
        upper, lower = list(reversed(emitter_parts)), [rc]
        upper_node, lower_node = e_node, c_node
    else:
        upper, lower = [rc], emitter_parts
        upper_node, lower_node = c_node, e_node

    XD, XBUS, XQ = 0.0, -3.0, 2.4
    dq = 0.7516666666666666, 0.6966666666666667  # schemdraw's BJT terminal offsets from the base
    XC = XQ + dq[0]
    XCAP = XC + 2.9
    y_low = max(len(lower) * L + 0.5, L + 0.6)  # the lower terminal
    yb = y_low + dq[1]
    y_up = yb + dq[1]
    y_top = max(y_up + 0.5 + len(upper) * L, yb + L + 0.6)

    # Rails, bias divider and the transistor.
    s.add(elm.Vdd().theta(0).at((XD, y_top)).label(f"supply {format_si(design.supply.nominal, 'V')}", loc="top",
                                                    fontsize=FONT))
    s.resistor((XD, y_top), (XD, yb))
    s.text((XD - 0.45, (y_top + yb) / 2), f"{r_top.ref} {_code(r_top)}", ha="right")
    s.resistor((XD, yb), (XD, 0.0))
    s.text((XD - 0.45, yb / 2), f"{r_bot.ref} {_code(r_bot)}", ha="right")
    s.dot((XD, yb))
    s.wire((XD, yb), (XQ, yb))
    bjt = (elm.BjtPnp if pnp else elm.BjtNpn)(circle=True)
    s.transistor = s.add(bjt.theta(0).anchor("base").at((XQ, yb)))
    s.text((XC + 0.55, yb), f"{q.ref} {design.transistor} ({'PNP' if pnp else 'NPN'})", ha="left")

    def stack(parts, start_node, x, y_start, y_end, end_node):
        """Parts in series down a column from y_start; returns {node: (x, y)} of the joints."""
        pts = {start_node: (x, y_start)}
        node, y = start_node, y_start
        for p in parts:
            other = p.nodes[1] if p.nodes[0] == node else p.nodes[0]
            y2 = y - L
            s.resistor((x, y), (x, y2))
            s.text((x + 0.45, y - L / 2), f"{p.ref} {_code(p)}", ha="left")
            pts[other] = (x, y2)
            node, y = other, y2
        if node != end_node:
            raise ValueError(f"the column from {start_node} does not reach {end_node}")
        s.wire((x, y), (x, y_end))
        return pts

    # Upper part of the column: supply → ... → upper terminal.
    up_pts: dict = {}
    if upper:
        up_pts = stack(upper, rail_top, XC, y_top, y_up, upper_node)
    else:
        s.wire((XC, y_top), (XC, y_up))
    # Lower part: lower terminal → ... → ground.
    lo_pts: dict = {}
    if lower:
        s.wire((XC, y_low), (XC, y_low - 0.5))
        lo_pts = stack(lower, lower_node, XC, y_low - 0.5, 0.0, rail_bot)
    else:
        s.wire((XC, y_low), (XC, 0.0))
    s.wire((XD, y_top), (XC, y_top))

    # Bypass capacitor beside its resistor.
    x_right = XC
    if ce is not None:
        pts = {**up_pts, **lo_pts}
        a, b = (pts[n] for n in ce.nodes)
        pa, pb = (XCAP, a[1]), (XCAP, b[1])
        s.wire(a, pa)
        s.wire(b, pb)
        for p in (a, b):
            if abs(p[1] - y_top) > 1e-9 and abs(p[1]) > 1e-9:
                s.dot(p)  # the joint between the emitter resistors
        s.capacitor(ce, {ce.nodes[0]: pa, ce.nodes[1]: pb}, volts)
        s.text((XCAP + 0.45, (pa[1] + pb[1]) / 2), f"{ce.ref} {_code(ce)}", ha="left")
        if pnp:
            s.wire((XC, y_top), pa if abs(pa[1] - y_top) < 1e-9 else pb)
        x_right = XCAP

    # Output: collector → output capacitor → out → load to ground.
    yj = y_up + 0.5 if not pnp else y_low - 0.5
    jn = (XC, yj)
    s.dot(jn)
    x0 = max(x_right, XC) + 1.2
    s.wire(jn, (x0, yj))
    x1 = x0 + L
    s.capacitor(co, {co.nodes[0]: (x0, yj), co.nodes[1]: (x1, yj)}, volts)
    s.text(((x0 + x1) / 2, yj + 0.6), f"{co.ref} {_code(co)}", va="bottom")
    x_out = x1 + 1.0
    s.wire((x1, yj), (x_out, yj))
    s.dot((x_out, yj))
    s.text((x_out + 0.2, yj + 0.35), "out", ha="left", va="bottom")
    s.resistor((x_out, yj), (x_out, 0.0))
    load = f"load {format_si(design.load.resistance, 'Ω')}"
    if getattr(design.load, "capacitance", 0.0):
        load += f" ∥ {format_si(design.load.capacitance, 'F')}"
    s.text((x_out + 0.45, yj / 2), load, ha="left")
    # Ground rail under the stage, and the T joints on both rails.
    s.wire((XD, 0.0), (x_out, 0.0))
    s.dot((XC, 0.0))
    if ce is not None and not pnp:
        s.dot((XCAP, 0.0))
    if ce is not None and pnp:
        s.dot((XC, y_top))
    s.ground(((XD + XC) / 2, 0.0))

    # Inputs, stacked on the left.
    n = circuit.n_inputs
    has_pot = any(circuit.by_role("level_pot", k) for k in range(1, n + 1))
    h = 4.8 if has_pot else 2.4
    rows = [yb + (n - 1) * h / 2 - (k - 1) * h for k in range(1, n + 1)]
    for k, ys in enumerate(rows, start=1):
        series, cin, pot = one("input_series", k), one("input_cap", k), one("level_pot", k)
        xs0 = XBUS - L
        s.resistor((xs0, ys), (XBUS, ys))
        s.text(((xs0 + XBUS) / 2, ys + 0.45), f"{series.ref} {_code(series)}", va="bottom")
        if pot is not None:
            xp = xs0 - 1.3
            top, bot = (xp, ys + L / 2), (xp, ys - L / 2)
            pe = s.pot(top, bot)
            tap = (float(pe.tap.x), float(pe.tap.y))
            s.wire(tap, (xs0, ys))
            s.ground(bot)
            taper = "log" if pot.taper == "log" else "linear"
            s.text((xp - 0.45, ys), f"{pot.ref} {_code(pot)} {taper}", ha="right")
            y_in, x_cap_end = top[1], xp
        else:
            y_in, x_cap_end = ys, xs0 - 0.5
            s.wire((x_cap_end, ys), (xs0, ys))
        xc0 = x_cap_end - L
        src, a_node = cin.nodes
        s.capacitor(cin, {src: (xc0, y_in), a_node: (x_cap_end, y_in)}, volts)
        s.text(((xc0 + x_cap_end) / 2, y_in + 0.6), f"{cin.ref} {_code(cin)}", va="bottom")
        s.wire((xc0 - 0.5, y_in), (xc0, y_in))
        s.dot((xc0 - 0.5, y_in), open_=True)
        s.text((xc0 - 0.8, y_in), input_label(design, k), ha="right")
        if n > 1:
            s.dot((XBUS, ys))
    ys_all = rows + [yb]
    s.wire((XBUS, max(ys_all)), (XBUS, min(ys_all)))
    s.wire((XBUS, yb), (XD, yb))
    if n > 1:
        s.dot((XBUS, yb))
    return s.d, s


_RC = {"svg.hashsalt": "stagefit-schematic", "svg.fonttype": "none", "font.family": "DejaVu Sans"}


def render_figure(drawing):
    """A matplotlib Figure (own Agg canvas) with the drawing on it, sized to fit every label."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    bb = drawing.get_bbox()
    x0, x1 = bb.xmin - MARGIN, bb.xmax + MARGIN
    y0, y1 = bb.ymin - MARGIN, bb.ymax + MARGIN
    fig = Figure(figsize=((x1 - x0) * INCHES_PER_UNIT, (y1 - y0) * INCHES_PER_UNIT), dpi=PNG_DPI)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_axis_off()
    drawing.draw(show=False, canvas=ax)
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)
    # schemdraw only estimates text widths: measure the labels and widen the sheet so none
    # is cut off. The scale (inches per unit) stays the same, so one pass is enough.
    renderer = fig.canvas.get_renderer()
    inv = ax.transData.inverted()
    for t in ax.texts:
        e = t.get_window_extent(renderer)
        (ax_, ay_), (bx_, by_) = inv.transform([[e.x0, e.y0], [e.x1, e.y1]])
        x0, x1 = min(x0, ax_ - 0.2), max(x1, bx_ + 0.2)
        y0, y1 = min(y0, ay_ - 0.2), max(y1, by_ + 0.2)
    fig.set_size_inches((x1 - x0) * INCHES_PER_UNIT, (y1 - y0) * INCHES_PER_UNIT)
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)
    return fig


def _render(drawing, fmt: str) -> bytes:
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = render_figure(drawing)
        buf = io.BytesIO()
        if fmt == "svg":
            fig.savefig(buf, format="svg", metadata={"Date": None}, facecolor="white")
        else:
            fig.savefig(buf, format="png", dpi=PNG_DPI, metadata={"Software": None}, facecolor="white")
    return buf.getvalue()


def schematic_svg(an_or_circuit, design=None) -> str:
    """The schematic as SVG text (text kept as text, so designators are searchable)."""
    return _render(schematic_drawing(an_or_circuit, design), "svg").decode("utf-8")


def schematic_png(an_or_circuit, design=None) -> bytes:
    """The schematic as PNG bytes (size follows the drawing; 100 dots per inch)."""
    return _render(schematic_drawing(an_or_circuit, design), "png")
