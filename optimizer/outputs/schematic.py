"""A schematic of any stagefit topology, drawn with schemdraw, as SVG text or PNG bytes.

The layout is fixed and plain: the supply rail on top, the ground rail at the bottom, every
transistor with its collector and emitter branches in a column, bias networks beside the
base, the output capacitor and the load on the right, and the inputs stacked on the left,
each a row of source jack, input capacitor, optional level pot and summing resistor into a
vertical bus that feeds the node the topology sums into (a base, or the emitter of
``cb-sum``). Every part carries its designator and value code, every transistor its type.

Each topology is laid out once, in a *frame* drawn the NPN way up: the collector rail at
the top, the emitter rail at the bottom. A PNP stage runs from the same positive supply
with those rails swapped (its emitter parts go to the supply), so it is the same frame
mirrored top to bottom: the supply still ends up on top and ground at the bottom. The
parts that always sit between a node and ground or the supply whatever the polarity (the
inputs, the load, the bias dividers) are placed by their netlist nodes, so they land on
the right rail either way. Where a branch cannot reach its rail without crossing another
wire it ends in a local ground or supply symbol instead.

Junction dots are placed wherever three or more wires and leads meet, from the geometry
itself. :func:`schematic_layout` returns that geometry (every wire, every lead's end and the
node it belongs to) so tests can check that the drawing connects what the netlist connects.

Polarised (electrolytic) capacitors get their + side on the node with the higher DC
voltage, taken from the engine's operating point at the design's nominal conditions.

The drawing is rendered on a matplotlib figure of our own (object-oriented API, Agg
canvas); the SVG has a fixed hash salt and no date, so the same design always gives the
same text. schemdraw and matplotlib are imported inside the functions.
"""

from __future__ import annotations

import io

from .bom import is_polarised, polarised_caps

__all__ = ["polarised_caps", "render_figure", "schematic_drawing", "schematic_layout", "schematic_png", "schematic_svg"]

#: Length of a vertical or horizontal part (drawing units), and spacing constants.
L = 2.5
FONT = 10
INCHES_PER_UNIT = 0.42
PNG_DPI = 100
MARGIN = 0.8
LABEL_INK = "#2e3a44"
LINE_INK = "#1f2a33"

#: schemdraw's BJT terminal offsets from the base (collector and emitter, NPN at theta 0).
DQX, DQY = 0.7516666666666666, 0.6966666666666667
#: Estimated width of one character of a label (drawing units), for spacing columns; the
#: rendered sheet is measured afterwards (render_figure), so this only needs to be generous.
CHAR = 0.23
#: How far a terminal's junction sits from the transistor (output taps a little further).
GAP = 0.5
TAP = 0.8


def _tw(text: str) -> float:
    return CHAR * len(text)


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


def _label(el) -> str:
    return f"{el.ref} {_code(el)}"


def _cap_voltages(circuit, design) -> dict[str, float]:
    """DC voltage across every capacitor, v(node 0) − v(node 1), at nominal conditions."""
    from ..analysis.network import Batch, Network

    op = Network(circuit).operating_point(Batch.single(circuit, design.supply.nominal, design.ambient.nominal))
    return {ref: float(v[0]) for ref, v in op.cap_voltage.items()}


def _key(p) -> tuple[float, float]:
    return (round(float(p[0]), 6), round(float(p[1]), 6))


class _Sheet:
    """A schemdraw drawing in frame coordinates, recording its geometry.

    Frame coordinates put the collector rail (``top``) at ``y = H`` and the emitter rail
    (``bottom``) at ``y = 0``; for a PNP stage the frame is mirrored (``y → −y``) when drawn,
    which puts the supply on top again. Methods take frame points unless ``true=True``.
    """

    def __init__(self, circuit, design, volts: dict, H: float):
        import schemdraw
        import schemdraw.elements as elm

        from ..circuit.topologies._common import rails

        self.elm = elm
        self.d = schemdraw.Drawing(show=False)
        self.d.config(fontsize=FONT, font="DejaVu Sans", color=LINE_INK, lw=1.4, unit=L, margin=MARGIN)
        self.circuit, self.design, self.volts, self.H = circuit, design, volts, H
        q = circuit.transistors[0]
        self.pnp = q.model.polarity == "pnp"
        self.bottom, self.top = rails(q.model)  # emitter rail, collector rail
        self.transistors: dict = {}
        self.plus: dict[str, str] = {}  # capacitor → the node its + mark is drawn on
        self.wires: list[tuple] = []  # (a, b) in true coordinates
        self.bodies: list[tuple] = []  # (a, b, ref) of two-lead part bodies
        self.terminals: list[tuple] = []  # (ref, node, point)
        self.symbols: list[tuple] = []  # (node, point) of ground and supply symbols
        self.rail_x: dict[str, list[float]] = {"vcc": [], "0": []}

    # -- coordinates --------------------------------------------------------------------
    def T(self, p, true: bool = False):
        x, y = float(p[0]), float(p[1])
        return (x, y) if (true or not self.pnp) else (x, -y)

    def rail_y(self, node: str) -> float:
        """True y of a rail node."""
        return self.T((0.0, self.H if node == self.top else 0.0))[1]

    def frame_y(self, node: str) -> float:
        return self.H if node == self.top else 0.0

    # -- primitives -----------------------------------------------------------------------
    def add(self, e):
        return self.d.add(e)

    def wire(self, a, b, true: bool = False):
        a, b = self.T(a, true), self.T(b, true)
        if abs(a[0] - b[0]) + abs(a[1] - b[1]) <= 1e-9:
            return
        if abs(a[0] - b[0]) > 1e-9 and abs(a[1] - b[1]) > 1e-9:
            raise ValueError(f"the schematic draws wires across and down only ({a} to {b})")
        self.wires.append((a, b))
        self.add(self.elm.Line().endpoints(a, b))

    def text(self, p, s, ha="center", va="center", true: bool = False, color=LABEL_INK):
        x, y = self.T(p, true)
        if self.pnp and not true:
            va = {"bottom": "top", "top": "bottom"}.get(va, va)
        self.add(self.elm.Label().at((x, y)).label(s, halign=ha, valign=va, fontsize=FONT, color=color))

    def _two(self, el, pts: dict, true: bool):
        n0, n1 = el.nodes
        p0, p1 = self.T(pts[n0], true), self.T(pts[n1], true)
        self.bodies.append((p0, p1, el.ref))
        self.terminals += [(el.ref, n0, p0), (el.ref, n1, p1)]
        return p0, p1

    def resistor(self, el, pts: dict, true: bool = False):
        """A resistor between the points of its two nodes ({node: point})."""
        p0, p1 = self._two(el, pts, true)
        return self.add(self.elm.Resistor().endpoints(p0, p1))

    def capacitor(self, el, pts: dict, true: bool = False):
        """A capacitor between the points of its two nodes, + toward the higher DC node."""
        n0, n1 = el.nodes
        p0, p1 = self._two(el, pts, true)
        polar = is_polarised(el)
        if polar:
            plus = n0 if self.volts.get(el.ref, 0.0) >= 0 else n1
            if plus == n1:
                p0, p1 = p1, p0  # the start of schemdraw's capacitor carries the + mark
            self.plus[el.ref] = plus
        return self.add(self.elm.Capacitor(polar=polar).endpoints(p0, p1))

    def part(self, el, pts: dict, true: bool = False):
        return (self.capacitor if el.kind == "C" else self.resistor)(el, pts, true)

    def pot(self, el, top, bottom):
        """A level pot from its top (node 0 of the element) down to its bottom, true coordinates;
        returns the wiper's point."""
        pe = self.add(self.elm.Potentiometer().endpoints(top, bottom))
        tap = (float(pe.tap.x), float(pe.tap.y))
        a, w, g = el.nodes
        self.bodies.append((top, bottom, el.ref))
        self.terminals += [(el.ref, a, top), (el.ref, w, tap), (el.ref, g, bottom)]
        return tap

    def bjt(self, q, base):
        """A transistor with its base lead's end at ``base`` (frame)."""
        pnp = q.model.polarity == "pnp"
        e = self.add((self.elm.BjtPnp if pnp else self.elm.BjtNpn)(circle=True).theta(0).anchor("base")
                     .at(self.T(base)))
        self.transistors[q.ref] = e
        c, b, em = q.nodes
        for node, anchor in ((c, e.collector), (b, e.base), (em, e.emitter)):
            self.terminals.append((q.ref, node, (float(anchor.x), float(anchor.y))))
        return e

    def jack(self, node, p):
        """An input jack (open dot), true coordinates."""
        self.add(self.elm.Dot(open=True).at(p))
        self.terminals.append(("jack", node, p))

    def symbol(self, node, p, true: bool = False, label: str | None = None):
        """A ground or supply symbol at p: ground points down, the supply up (as drawn)."""
        p = self.T(p, true)
        if node == "0":
            self.add(self.elm.Ground().theta(0).at(p))
        else:
            e = self.elm.Vdd().theta(0).at(p)
            if label:
                e = e.label(label, loc="top", fontsize=FONT)
            self.add(e)
        self.symbols.append((node, p))

    def to_rail(self, p, node: str):
        """A wire from frame point p straight to the rail of ``node`` (top or bottom)."""
        y = self.frame_y(node)
        self.wire(p, (p[0], y))
        self.rail_x[node].append(float(p[0]))

    def attach(self, node: str, x: float):
        self.rail_x[node].append(float(x))

    def local(self, p, node: str, toward: int):
        """A local ground/supply symbol at frame point p for a branch that cannot reach its
        rail; ``toward`` is the frame direction the branch runs (+1 up, −1 down)."""
        self.symbol(node, p, label="supply" if node != "0" else None)

    # -- finishing ------------------------------------------------------------------------
    def rails(self):
        """Both rails across every branch that reaches them, the supply and ground symbols."""
        from ..spec.quantities import format_si

        for node in ("vcc", "0"):
            xs = sorted(set(self.rail_x[node]))
            if not xs:
                continue
            y = self.rail_y(node)
            self.wire((xs[0], y), (xs[-1], y), true=True)
            if node == "vcc":
                self.symbol("vcc", (xs[0], y), true=True, label=f"supply {format_si(self.design.supply.nominal, 'V')}")
            else:
                self.symbol("0", (xs[0], y), true=True)

    def dots(self) -> list[tuple]:
        """Junction dots wherever three or more wire ends and leads meet (a wire passing
        through counts twice)."""
        segs = [(_key(a), _key(b)) for a, b in self.wires] + [(_key(a), _key(b)) for a, b, _ in self.bodies]
        ends: dict = {}
        for a, b in segs:
            ends[a] = ends.get(a, 0) + 1
            ends[b] = ends.get(b, 0) + 1
        for ref, _, p in self.terminals:
            if ref in self.transistors or ref == "jack":
                ends[_key(p)] = ends.get(_key(p), 0) + 1
        for ref, node, p in self.terminals:  # a pot's wiper is a lead of its own
            if ref.startswith("RV") and node.startswith("w"):
                ends[_key(p)] = ends.get(_key(p), 0) + 1
        out = []
        for p, n in sorted(ends.items()):
            through = sum(1 for a, b in segs if _inside(p, a, b))
            if n + 2 * through >= 3:
                out.append(p)
                self.add(self.elm.Dot().at(p))
        return out


def _inside(p, a, b) -> bool:
    """p lies on segment a–b (axis-parallel), strictly between its ends."""
    if p in (a, b):
        return False
    (x, y), (x0, y0), (x1, y1) = p, a, b
    if abs(x0 - x1) < 1e-9:
        return abs(x - x0) < 1e-6 and min(y0, y1) < y < max(y0, y1)
    if abs(y0 - y1) < 1e-9:
        return abs(y - y0) < 1e-6 and min(x0, x1) < x < max(x0, x1)
    return False


# --------------------------------------------------------------------------------------
# Building blocks (frame coordinates unless said otherwise)


def _one(circuit, role, k=None):
    els = circuit.by_role(role, k)
    return els[0] if els else None


def _other(el, node):
    return el.nodes[1] if el.nodes[0] == node else el.nodes[0]


def _vstack(s, parts, node, x, y, side="right"):
    """Parts in series down a column from (x, y), starting at ``node``; every part L long.
    Returns ({node: point}, the last node, the last y)."""
    pts = {node: (x, y)}
    for p in parts:
        other = _other(p, node)
        if node not in p.nodes:
            raise ValueError(f"{p.ref} does not continue the column from {node}")
        s.part(p, {node: (x, y), other: (x, y - L)})
        dx, ha = (0.45, "left") if side == "right" else (-0.45, "right")
        s.text((x + dx, y - L / 2), _label(p), ha=ha)
        node, y = other, y - L
        pts[node] = (x, y)
    return pts, node, y


def _emitter_parts(circuit, prefix=""):
    return [p for p in (_one(circuit, prefix + "emitter"), _one(circuit, prefix + "emitter_bypassed")) if p]


def _low_height(n_parts: int) -> float:
    """Base height a common-emitter column needs above the emitter rail for n emitter parts."""
    return max(n_parts * L + GAP, L + 0.6) + DQY


def _ce_column(s, q, xq, yb, rc, emitters, bypass, tap=TAP, e_at=None):
    """A transistor with its collector resistor up to the top rail and its emitter parts
    down to the bottom rail (either may be absent), bypass capacitor beside. ``e_at`` puts
    the emitter's junction lower than usual (the summing node of cb-sum).

    Returns {"c": collector junction, "e": emitter junction, "x": column x, "x_right": the
    rightmost x used, "label": the transistor label's right end}.
    """
    c_node, b_node, e_node = q.nodes
    xc = xq + DQX
    y_up, y_low = yb + DQY, yb - DQY
    s.bjt(q, (xq, yb))
    qlabel = f"{q.ref} {s.design.transistor} ({'PNP' if q.model.polarity == 'pnp' else 'NPN'})"
    s.text((xc + 0.55, yb), qlabel, ha="left")
    # Collector: the rail, the resistor, a wire down to the transistor.
    if rc is not None:
        pts, end, y_end = _vstack(s, [rc], s.top, xc, s.H)
        s.attach(s.top, xc)
        if end != c_node:
            raise ValueError(f"{rc.ref} does not reach {q.ref}'s collector")
        s.wire((xc, y_end), (xc, y_up))
    else:
        s.to_rail((xc, y_up), s.top)
    # Emitter: a short wire, then the resistors down to the rail.
    pts_e = {}
    y_ej = y_low - GAP if e_at is None else e_at
    if emitters:
        s.wire((xc, y_low), (xc, y_ej))
        pts_e, end, y_end = _vstack(s, emitters, e_node, xc, y_ej)
        if end != s.bottom:
            raise ValueError(f"the emitter column of {q.ref} does not reach its rail")
        s.to_rail((xc, y_end), s.bottom)
    else:
        s.to_rail((xc, y_low), s.bottom)
    x_right = xc + 0.45 + max([_tw(_label(p)) for p in ([rc] if rc else []) + emitters] or [0.0])
    if bypass is not None:
        split = _other(bypass, s.bottom)
        ys = pts_e[split][1]
        xcap = xc + 2.9
        s.wire((xc, ys), (xcap, ys))
        s.capacitor(bypass, {split: (xcap, ys), s.bottom: (xcap, ys - L)})
        s.text((xcap + 0.45, ys - L / 2), _label(bypass), ha="left")
        s.to_rail((xcap, ys - L), s.bottom)
        x_right = xcap + 0.45 + _tw(_label(bypass))
    return {"c": (xc, y_up + tap), "e": (xc, y_ej), "x": xc, "x_right": x_right,
            "label": xc + 0.55 + _tw(qlabel)}


def _divider(s, node, x, y, parts):
    """Resistors from a node at (x, y) straight up to the top rail or down to the bottom
    rail, each by the rail its netlist element reaches; labels on the left."""
    for p in parts:
        rail = _other(p, node)
        y_rail = s.frame_y(rail)
        s.part(p, {node: (x, y), rail: (x, y_rail)})
        s.attach(rail, x)
        s.text((x - 0.45, (y + y_rail) / 2), _label(p), ha="right")


def _output(s, tap, x_min: float, clear_of: float):
    """Output capacitor from a junction (frame) to ``out``, then the load to ground.

    ``x_min``: the capacitor starts right of it; ``clear_of``: the load's column stays right
    of it (a transistor's label at the same height)."""
    from ..spec.quantities import format_si

    co = _one(s.circuit, "output_cap")
    tnode = _other(co, s.circuit.output_node)
    j = s.T(tap)
    x0 = max(x_min, j[0]) + 1.2
    x1 = x0 + L
    x_out = max(x1 + 1.0, clear_of + 0.4)
    y = j[1]
    s.wire(j, (x0, y), true=True)
    s.capacitor(co, {tnode: (x0, y), s.circuit.output_node: (x1, y)}, true=True)
    s.text(((x0 + x1) / 2, y + 0.6), _label(co), va="bottom", true=True)
    s.wire((x1, y), (x_out, y), true=True)
    s.text((x_out + 0.2, y + 0.35), "out", ha="left", va="bottom", true=True)
    rl = _one(s.circuit, "load")
    yg = s.rail_y("0")
    s.resistor(rl, {s.circuit.output_node: (x_out, y), "0": (x_out, yg)}, true=True)
    s.attach("0", x_out)
    load = f"load {format_si(s.design.load.resistance, 'Ω')}"
    if getattr(s.design.load, "capacitance", 0.0):
        load += f" ∥ {format_si(s.design.load.capacitance, 'F')}"
    s.text((x_out + 0.45, (y + yg) / 2), load, ha="left", true=True)


def _inputs(s, into_pt, xbus: float):
    """Every input as a row into a vertical bus at ``xbus`` that feeds ``into_pt`` (frame)."""
    from .plots import input_label

    c, design = s.circuit, s.design
    S = s.T(into_pt)
    n = c.n_inputs
    has_pot = any(c.by_role("level_pot", k) for k in range(1, n + 1))
    h = 4.8 if has_pot else 2.4
    rows = [S[1] + (n - 1) * h / 2 - (k - 1) * h for k in range(1, n + 1)]
    for k, ys in enumerate(rows, start=1):
        series, cin, pot = _one(c, "input_series", k), _one(c, "input_cap", k), _one(c, "level_pot", k)
        xs0 = xbus - L
        far = next(nd for nd in series.nodes if nd in (f"a{k}", f"w{k}"))
        into = _other(series, far)
        s.resistor(series, {far: (xs0, ys), into: (xbus, ys)}, true=True)
        s.text(((xs0 + xbus) / 2, ys + 0.45), _label(series), va="bottom", true=True)
        src, a_node = cin.nodes
        if pot is not None:
            xp = xs0 - 1.3
            top, bot = (xp, ys + L / 2), (xp, ys - L / 2)
            tap = s.pot(pot, top, bot)
            s.wire(tap, (xs0, ys), true=True)
            s.symbol("0", bot, true=True)
            taper = "log" if pot.taper == "log" else "linear"
            s.text((xp - 0.45, ys), f"{pot.ref} {_code(pot)} {taper}", ha="right", true=True)
            y_in, x_cap_end = top[1], xp
        else:
            y_in, x_cap_end = ys, xs0 - 0.5
            s.wire((x_cap_end, ys), (xs0, ys), true=True)
        xc0 = x_cap_end - L
        s.capacitor(cin, {src: (xc0, y_in), a_node: (x_cap_end, y_in)}, true=True)
        s.text(((xc0 + x_cap_end) / 2, y_in + 0.6), _label(cin), va="bottom", true=True)
        s.wire((xc0 - 0.5, y_in), (xc0, y_in), true=True)
        s.jack(src, (xc0 - 0.5, y_in))
        s.text((xc0 - 0.8, y_in), input_label(design, k), ha="right", true=True)
    ys_all = rows + [S[1]]
    s.wire((xbus, max(ys_all)), (xbus, min(ys_all)), true=True)
    s.wire((xbus, S[1]), S, true=True)


# --------------------------------------------------------------------------------------
# The topologies


def _layout_divider_ce(circuit, design, volts):
    q = circuit.transistors[0]
    em = _emitter_parts(circuit)
    yb = _low_height(len(em))
    H = max(yb + DQY + TAP + L, yb + L + 0.6)
    s = _Sheet(circuit, design, volts, H)
    XD, XQ = 0.0, 2.4
    _divider(s, "b", XD, yb, [_one(circuit, "bias_top"), _one(circuit, "bias_bottom")])
    s.wire((XD, yb), (XQ, yb))
    col = _ce_column(s, q, XQ, yb, _one(circuit, "collector"), em, _one(circuit, "bypass_cap"))
    _output(s, col["c"], col["x_right"], col["label"])
    _inputs(s, (XD, yb), XD - 3.0)
    return s


def _layout_feedback_ce(circuit, design, volts):
    q = circuit.transistors[0]
    em = _emitter_parts(circuit)
    rf, rsplit, cf = _one(circuit, "feedback"), _one(circuit, "feedback_split"), _one(circuit, "feedback_cap")
    bottom_r = _one(circuit, "bias_bottom")
    rail_e, rail_c = _rails_of(q)
    yb = _low_height(len(em))
    y_up = yb + DQY
    # The feedback row runs above the transistor, from the collector back to the base. Its
    # capacitor goes straight up to ground when ground is the collector rail (PNP); otherwise
    # it hangs down from the row to a local ground, so the row is raised to make room.
    cap_down = cf is not None and rail_c != "0"
    yj = y_up + TAP + 0.9
    if cap_down:
        yj = max(yj, yb + L + 1.6)
    H = yj + L
    s = _Sheet(circuit, design, volts, H)
    XD = 0.0
    XF0 = XD + 1.4
    if rsplit is not None:
        xf = XF0 + 0.5 + L + 0.5
        x_row_end = xf + 0.5 + L
    else:
        xf = None
        x_row_end = XF0 + 0.5 + L
    XQ = max(x_row_end + 0.5 - DQX, XD + 2.4)
    xc = XQ + DQX
    if bottom_r is not None:
        _divider(s, "b", XD, yb, [bottom_r])
    s.wire((XD, yb), (XQ, yb))
    col = _ce_column(s, q, XQ, yb, _one(circuit, "collector"), em, _one(circuit, "bypass_cap"))
    # The row: base ← [split ← f ←] feedback ← collector.
    s.wire((XF0, yb), (XF0, yj))
    s.wire((XF0, yj), (XF0 + 0.5, yj))
    if rsplit is not None:
        s.resistor(rsplit, {"b": (XF0 + 0.5, yj), "f": (XF0 + 0.5 + L, yj)})
        s.text((XF0 + 0.5 + L / 2, yj + 0.45), _label(rsplit), va="bottom")
        s.wire((XF0 + 0.5 + L, yj), (xf + 0.5, yj))
        s.resistor(rf, {"f": (xf + 0.5, yj), "c": (xf + 0.5 + L, yj)})
        s.text((xf + 0.5 + L / 2, yj + 0.45), _label(rf), va="bottom")
        if cf is not None:
            if cap_down:
                s.capacitor(cf, {"f": (xf, yj), "0": (xf, yj - L)})
                s.local((xf, yj - L), "0", -1)
                s.text((xf + 0.45, yj - L / 2), _label(cf), ha="left")
            else:
                s.capacitor(cf, {"f": (xf, yj), "0": (xf, H)})
                s.attach("0", xf)
                s.text((xf + 0.45, yj + L / 2 + 0.3), _label(cf), ha="left")
    else:
        s.resistor(rf, {"b": (XF0 + 0.5, yj), "c": (XF0 + 0.5 + L, yj)})
        s.text((XF0 + 0.5 + L / 2, yj + 0.45), _label(rf), va="bottom")
    s.wire((x_row_end, yj), (xc, yj))
    _output(s, (xc, y_up + TAP), col["x_right"], col["label"])
    _inputs(s, (XD, yb), XD - 3.0)
    return s


def _layout_follower_ce(circuit, design, volts):
    q1, q2 = circuit.transistors[:2]
    em2 = _emitter_parts(circuit, "gain_")
    boot, cboot = _one(circuit, "bootstrap"), _one(circuit, "bootstrap_cap")
    bs_parts = [_one(circuit, "bias_top"), _one(circuit, "bias_bottom")]
    bottom, top = _rails_of(q1)
    down = next(p for p in bs_parts if _other(p, "bs") == bottom)  # straight down to its rail
    side = next(p for p in bs_parts if p is not down)  # to the other rail: a local symbol
    yb2 = _low_height(len(em2))
    y_bs = max(L + 0.3, yb2 - 0.9)
    yb2 = y_bs + 0.9
    yb = y_bs + L
    H = max(yb + DQY + 0.8, yb2 + DQY + TAP + L, yb2 + L + 0.6)
    s = _Sheet(circuit, design, volts, H)
    XB = 0.0
    XQ1 = XB + 3.0
    xc1 = XQ1 + DQX
    y_ct = y_bs + 0.9
    # The follower: base, bootstrap resistor down to bs, bs's divider, bootstrap capacitor.
    s.wire((XB, yb), (XQ1, yb))
    s.resistor(boot, {"b": (XB, yb), "bs": (XB, y_bs)})
    s.text((XB - 0.45, (yb + y_bs) / 2), _label(boot), ha="right")
    s.resistor(down, {"bs": (XB, y_bs), bottom: (XB, 0.0)})
    s.attach(bottom, XB)
    s.text((XB - 0.45, y_bs / 2), _label(down), ha="right")
    xs = XB - 0.6
    s.wire((XB, y_bs), (xs, y_bs))
    s.resistor(side, {"bs": (xs, y_bs), top: (xs - L, y_bs)})
    s.text((xs - L / 2, y_bs - 0.45), _label(side), va="top")
    s.local((xs - L, y_bs), top, +1)
    s.wire((XB, y_bs), (XB + 0.5, y_bs))
    s.capacitor(cboot, {"bs": (XB + 0.5, y_bs), "e": (XB + 0.5 + L, y_bs)})
    s.text((XB + 0.5 + L / 2, y_bs + 0.6), _label(cboot), va="bottom")
    s.wire((XB + 0.5 + L, y_bs), (xc1, y_bs))
    s.bjt(q1, (XQ1, yb))
    q1label = f"{q1.ref} {design.transistor} ({'PNP' if q1.model.polarity == 'pnp' else 'NPN'})"
    s.text((xc1 + 0.55, yb), q1label, ha="left")
    s.to_rail((xc1, yb + DQY), top)
    s.wire((xc1, yb - DQY), (xc1, y_bs))
    fe = _one(circuit, "follower_emitter")
    s.resistor(fe, {"e": (xc1, y_bs), bottom: (xc1, 0.0)})
    s.attach(bottom, xc1)
    s.text((xc1 + 0.45, y_bs / 2), _label(fe), ha="left")
    # Coupling capacitor into the gain stage's divider.
    cc = _one(circuit, "coupling_cap")
    g_top, g_bot = _one(circuit, "gain_bias_top"), _one(circuit, "gain_bias_bottom")
    w_div = max(_tw(_label(g_top)), _tw(_label(g_bot)))
    XD2 = max(xc1 + 0.6 + L + 0.8, xc1 + 0.55 + _tw(q1label) + 0.4 + w_div + 0.45,
              xc1 + 0.45 + _tw(_label(fe)) + 0.4 + w_div + 0.45)
    s.wire((xc1, y_ct), (xc1 + 0.6, y_ct))
    s.capacitor(cc, {"e": (xc1 + 0.6, y_ct), "b_q2": (xc1 + 0.6 + L, y_ct)})
    s.text((xc1 + 0.6 + L / 2, y_ct + 0.6), _label(cc), va="bottom")
    s.wire((xc1 + 0.6 + L, y_ct), (XD2, y_ct))
    # The gain stage.
    _divider(s, "b_q2", XD2, yb2, [g_top, g_bot])
    XQ2 = XD2 + 2.4
    s.wire((XD2, yb2), (XQ2, yb2))
    col = _ce_column(s, q2, XQ2, yb2, _one(circuit, "gain_collector"), em2, _one(circuit, "gain_bypass_cap"))
    _output(s, col["c"], col["x_right"], col["label"])
    x_left = xs - L - 0.7
    _inputs(s, (XB, yb), x_left - 0.6)
    return s


def _layout_ce_follower(circuit, design, volts):
    q1, q2 = circuit.transistors[:2]
    em = _emitter_parts(circuit)
    yb1 = _low_height(len(em))
    yt = yb1 + DQY + TAP
    yb2 = yt
    y_et = yb2 - DQY - 0.9
    H = max(yt + L, yb2 + DQY + 0.6)
    s = _Sheet(circuit, design, volts, H)
    XD, XQ1 = 0.0, 2.4
    _divider(s, "b", XD, yb1, [_one(circuit, "bias_top"), _one(circuit, "bias_bottom")])
    s.wire((XD, yb1), (XQ1, yb1))
    col = _ce_column(s, q1, XQ1, yb1, _one(circuit, "collector"), em, _one(circuit, "bypass_cap"))
    be = _one(circuit, "buffer_emitter")
    XQ2 = max(col["label"] + 0.4, col["x_right"] + 0.4) - DQX + 0.3
    xc2 = XQ2 + DQX
    s.wire(col["c"], (XQ2, yb2))
    s.bjt(q2, (XQ2, yb2))
    q2label = f"{q2.ref} {design.transistor} ({'PNP' if q2.model.polarity == 'pnp' else 'NPN'})"
    s.text((xc2 + 0.55, yb2), q2label, ha="left")
    s.to_rail((xc2, yb2 + DQY), s.top)
    s.wire((xc2, yb2 - DQY), (xc2, y_et))
    s.resistor(be, {"e_q2": (xc2, y_et), s.bottom: (xc2, 0.0)})
    s.attach(s.bottom, xc2)
    s.text((xc2 + 0.45, y_et / 2), _label(be), ha="left")
    _output(s, (xc2, y_et), xc2 + 0.45 + _tw(_label(be)), xc2 + 0.55 + _tw(q2label))
    _inputs(s, (XD, yb1), XD - 3.0)
    return s


def _layout_cb_sum(circuit, design, volts):
    q = circuit.transistors[0]
    bottom, top = _rails_of(q)
    at_b = [_one(circuit, "bias_top"), _one(circuit, "bias_bottom"), _one(circuit, "base_cap")]
    ups = [p for p in at_b if _other(p, "b") == top]
    downs = [p for p in at_b if _other(p, "b") == bottom]
    y_e = L + 0.6  # the summing node: the input wire runs along it into the emitter
    # The parts that run from the base toward the emitter rail would cross the input wire:
    # they end in local symbols above it (a ground is shorter than a labelled supply).
    sym = 0.64 if bottom == "0" else 1.35
    yb = y_e + L + sym + 0.6
    H = max(yb + DQY + TAP + L, yb + L + 0.6)
    s = _Sheet(circuit, design, volts, H)
    XD, X2 = 0.0, 1.8
    second = ups[1:] + downs[1:]
    XQ = (X2 + 0.45 + max(_tw(_label(p)) for p in second) + 0.6) if second else XD + 2.4
    for i, p in enumerate(ups):
        x = XD if i == 0 else X2
        s.part(p, {"b": (x, yb), top: (x, H)})
        s.attach(top, x)
        dx, ha = (-0.45, "right") if i == 0 else (0.45, "left")
        s.text((x + dx, (yb + H) / 2), _label(p), ha=ha)
    for i, p in enumerate(downs):
        x = XD if i == 0 else X2
        s.part(p, {"b": (x, yb), bottom: (x, yb - L)})
        s.local((x, yb - L), bottom, -1)
        dx, ha = (-0.45, "right") if i == 0 else (0.45, "left")
        s.text((x + dx, yb - L / 2), _label(p), ha=ha)
    s.wire((XD, yb), (XQ, yb))
    col = _ce_column(s, q, XQ, yb, _one(circuit, "collector"), [_one(circuit, "emitter")], None, e_at=y_e)
    _output(s, col["c"], col["x_right"], col["label"])
    w_left = max(_tw(_label(p)) for p in at_b)
    _inputs(s, col["e"], XD - 0.45 - w_left - 0.9)
    return s


def _rails_of(q):
    from ..circuit.topologies._common import rails

    return rails(q.model)


_LAYOUTS = {
    "divider-ce": _layout_divider_ce,
    "feedback-ce": _layout_feedback_ce,
    "follower-ce": _layout_follower_ce,
    "ce-follower": _layout_ce_follower,
    "cb-sum": _layout_cb_sum,
}


def schematic_drawing(an_or_circuit, design=None):
    """The schemdraw Drawing of the stage (for tests and further rendering)."""
    return schematic_layout(an_or_circuit, design)[0]


def schematic_layout(an_or_circuit, design=None):
    """(Drawing, facts) of the stage.

    facts: ``plus`` (capacitor → node of its + mark), ``transistor`` (the schemdraw element
    drawn for Q1), ``transistors`` ({designator: element}), and the geometry in drawing
    units: ``wires`` ((x, y), (x, y)) pairs, ``bodies`` (the two ends of each resistor,
    capacitor and pot body with its designator), ``terminals`` ((designator, node, point)
    for every lead's end, ``jack`` for an input jack), ``symbols`` ((node, point) of every
    ground and supply symbol) and ``dots`` (the junction dots drawn).
    """
    circuit, design = _resolve(an_or_circuit, design)
    layout = _LAYOUTS.get(circuit.topology)
    if layout is None:
        raise ValueError(f"no schematic layout for topology {circuit.topology!r}")
    s = layout(circuit, design, _cap_voltages(circuit, design))
    s.rails()
    dots = s.dots()
    facts = {"plus": dict(s.plus), "transistor": s.transistors.get(circuit.transistors[0].ref),
             "transistors": dict(s.transistors), "wires": list(s.wires), "bodies": list(s.bodies),
             "terminals": list(s.terminals), "symbols": list(s.symbols), "dots": dots}
    return s.d, facts


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
