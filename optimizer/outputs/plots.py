"""Plots of an analysed stage, as PNG bytes.

Every plot takes its numbers from the analysis engine (:mod:`optimizer.analysis`): the
curves are operating points, AC responses and harmonic-balance swings of the design's own
netlist, not formulas restated here. Each plot has a small ``*_data`` helper that returns
the arrays it draws, so the numbers can be checked without looking at pixels.

Drawing uses matplotlib's object-oriented API on an Agg canvas (no pyplot state), with a
fixed figure size and resolution and no timestamp in the file, so the same design always
gives the same bytes. matplotlib is imported inside the functions: importing this module
stays light.
"""

from __future__ import annotations

import io
import math
from contextlib import contextmanager

import numpy as np

__all__ = [
    "DPI",
    "FIGSIZE",
    "compare_plot",
    "frequency_data",
    "frequency_plot",
    "gain_transistor",
    "headroom_data",
    "headroom_plot",
    "load_line_data",
    "load_line_plot",
    "montecarlo_plot",
]

#: Resolution of every PNG (dots per inch) and the size of a figure (inches).
DPI = 110
FIGSIZE = (7.0, 4.0)

#: Frequency span of the response plot (Hz) and its number of points.
F_LOW, F_HIGH, F_POINTS = 5.0, 200e3, 200

# A calm palette of muted inks on white, chosen for this project.
INK = "#2e3a44"
GRID = "#e2e6e9"
BAND = "#d3dee6"
SERIES = ("#3d6a8a", "#b0704f", "#5e8f6f", "#8a6a9c", "#b39449", "#4f8c99", "#9c5a63", "#6d7a4e")
NOT_MET = "#a85c5c"
SOFT = "#8d99a3"


# ------------------------------------------------------------------------------------
# Figure plumbing


@contextmanager
def _style():
    import matplotlib

    rc = {
        "font.size": 9,
        "axes.edgecolor": SOFT,
        "axes.labelcolor": INK,
        "axes.titlesize": 10,
        "axes.titlecolor": INK,
        "xtick.color": INK,
        "ytick.color": INK,
        "text.color": INK,
        "grid.color": GRID,
        "grid.linewidth": 0.8,
        "legend.frameon": False,
        "svg.hashsalt": "stagefit",
    }
    with matplotlib.rc_context(rc):
        yield


def _figure(ncols: int = 1):
    """A new figure on its own Agg canvas, with ``ncols`` axes side by side."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=FIGSIZE, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, ncols, squeeze=False)[0]
    for ax in axes:
        ax.grid(True, which="major")
        ax.set_axisbelow(True)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    return fig, list(axes)


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None}, facecolor="white")
    return buf.getvalue()


def _series_style(k: int) -> dict:
    """Colour and dash of input k (0-based): eight colours, then the same dashed."""
    return {"color": SERIES[k % len(SERIES)], "linestyle": "-" if (k // len(SERIES)) % 2 == 0 else "--"}


def input_label(design, k: int) -> str:
    """``in 1`` or ``in 1: phone`` for input k (1-based)."""
    names = tuple(getattr(design, "input_names", ()) or ())
    name = names[k - 1] if k - 1 < len(names) else str(k)
    return f"in {k}" if name in ("", str(k)) else f"in {k}: {name}"


# ------------------------------------------------------------------------------------
# Shared engine calls


def _points_batch(points: list[tuple[float, float, dict]]):
    """A batch from (supply V, temperature K, {transistor: beta}) points, values nominal."""
    from ..analysis.network import Batch

    refs = sorted({q for _, _, b in points for q in b})
    return Batch(
        len(points),
        np.array([p[0] for p in points], dtype=float),
        np.array([p[1] for p in points], dtype=float),
        beta={q: np.array([p[2][q] for p in points], dtype=float) for q in refs},
    )


def _nominal_point(cond) -> tuple[float, float, dict]:
    return (cond.supply[0], cond.ambient[0], {q: v[0] for q, v in cond.beta.items()})


def _corner_points(cond) -> list[tuple[float, float, dict]]:
    return [(g["supply"], g["temperature"], g["beta"]) for g in cond.globals()]


def _gain_db(net, op, freqs: np.ndarray, chunk: int = 32) -> np.ndarray:
    """(n_inputs, B, F) gain in dB from each EMF to the load, from the engine's AC solution.

    Frequencies are solved in chunks so a 16-input stage stays small in memory.
    """
    n = net.circuit.n_inputs
    parts = []
    for i in range(0, freqs.size, chunk):
        ac = net.ac(op, freqs[i : i + chunk])
        out = ac.node(net.circuit.output_node)[:n]
        parts.append(20 * np.log10(np.maximum(np.abs(out), 1e-30)))
    return np.concatenate(parts, axis=-1)


# ------------------------------------------------------------------------------------
# 1. Frequency response


def frequency_data(an, freqs=None) -> dict:
    """The response plot's numbers.

    Returns a dict with ``freqs`` (F,) Hz; ``gain_db`` (n_inputs, F) at nominal conditions
    (the design's nominal supply and ambient, nominal beta); ``corner_min``/``corner_max``
    (n_inputs, F), the lowest and highest gain over the corners of beta × supply ×
    temperature; ``gain_1k_db`` (n_inputs,) at 1 kHz, nominal; ``cutoffs``, per input the
    analysis' (low, high) −3 dB frequencies; ``labels`` per input.
    """
    from ..analysis.network import Network

    c, cond = an.circuit, an.conditions
    if freqs is None:
        freqs = np.logspace(math.log10(F_LOW), math.log10(F_HIGH), F_POINTS)
    freqs = np.asarray(freqs, dtype=float)
    net = Network(c)
    pts = [_nominal_point(cond)] + _corner_points(cond)
    op = net.operating_point(_points_batch(pts))
    g = _gain_db(net, op, freqs)  # (n, B, F)
    g1k = _gain_db(net, op, np.array([1000.0]))[:, 0, 0]
    n = c.n_inputs
    cut = [(an.nominal.get(f"low_cutoff:{k}", float("nan")), an.nominal.get(f"high_cutoff:{k}", float("nan")))
           for k in range(1, n + 1)]
    return {
        "freqs": freqs,
        "gain_db": g[:, 0, :],
        "corner_min": g[:, 1:, :].min(axis=1) if g.shape[1] > 1 else g[:, 0, :],
        "corner_max": g[:, 1:, :].max(axis=1) if g.shape[1] > 1 else g[:, 0, :],
        "gain_1k_db": g1k,
        "cutoffs": cut,
        "labels": [input_label(an.design, k) for k in range(1, n + 1)],
    }


def frequency_plot(an) -> bytes:
    """Gain against frequency for every input, with the corner spread of input 1 and the
    −3 dB points marked."""
    data = frequency_data(an)
    f, g = data["freqs"], data["gain_db"]
    n = g.shape[0]
    with _style():
        fig, (ax,) = _figure()
        ax.fill_between(f, data["corner_min"][0], data["corner_max"][0], color=BAND, linewidth=0,
                        label=f"{data['labels'][0]}, corner range")
        for k in range(n):
            ax.plot(f, g[k], linewidth=1.6, label=data["labels"][k], **_series_style(k))
        marked = False
        for k, (lo, hi) in enumerate(data["cutoffs"]):
            ref = data["gain_1k_db"][k] - 3.0103
            for fc in (lo, hi):
                if np.isfinite(fc) and F_LOW <= fc <= F_HIGH:
                    ax.plot([fc], [ref], marker="o", markersize=5, markerfacecolor="white",
                            markeredgecolor=_series_style(k)["color"], linestyle="none",
                            label=None if marked else "−3 dB point")
                    marked = True
            if k == 0:
                for fc in (lo, hi):
                    if np.isfinite(fc) and F_LOW <= fc <= F_HIGH:
                        ax.annotate(f"{_hz(fc)}", (fc, ref), textcoords="offset points", xytext=(6, -12),
                                    fontsize=8, color=INK)
        ax.set_xscale("log")
        ax.set_xlim(F_LOW, F_HIGH)
        top = float(np.nanmax([g.max(), data["corner_max"][0].max()]))
        mid = float(np.nanmax(data["gain_1k_db"]))
        low = float(np.nanmin([g.min(), data["corner_min"][0].min()]))
        ax.set_ylim(max(low, mid - 30.0) - 2.0, top + 3.0)
        ax.set_xlabel("frequency, Hz")
        ax.set_ylabel("gain from source to load, dB")
        fig.suptitle("Frequency response at nominal conditions (band: input 1 over the beta, supply and "
                     "temperature corners)", fontsize=9, color=INK)
        if n <= 3:
            ax.legend(loc="best", fontsize=7)
        else:
            fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", fontsize=6.5,
                       ncol=min(n + 2, 6))
        return _png(fig)


def _hz(f: float) -> str:
    from ..spec.quantities import format_si

    return format_si(f, "Hz")


# ------------------------------------------------------------------------------------
# 2. Load lines


def gain_transistor(circuit):
    """The transistor whose collector carries the stage's gain: the first one whose
    collector is not tied to a rail (a follower's is), else Q1."""
    rails = {circuit.supply_node, "0"}
    return next((q for q in circuit.transistors if q.nodes[0] not in rails), circuit.transistors[0])


def _series_to_rail(circuit, start: str, used: set) -> list:
    """Resistors (fitted parts, not an input's) in series from ``start`` to a rail, or []
    when the node has no such path: at each node the resistor leading on, never back."""
    rails = {circuit.supply_node, "0"}
    quiet = {n for q in circuit.transistors for n in q.nodes} - {start} - rails
    chain, node = [], start
    while node not in rails:
        nxt = [e for e, _ in circuit.neighbours(node) if e.kind == "R" and e.part and e.input is None
               and e.ref not in used and e not in chain
               and (e.nodes[1] if e.nodes[0] == node else e.nodes[0]) not in quiet]
        # Only a plain series chain counts: one way on (or one straight to a rail).
        to_rail = [e for e in nxt if set(e.nodes) & rails]
        if to_rail:
            nxt = to_rail[:1]
        if len(nxt) != 1:
            return []
        e = nxt[0]
        chain.append(e)
        node = e.nodes[1] if e.nodes[0] == node else e.nodes[0]
    return chain


def _bypassed(circuit, e) -> bool:
    """A resistor with a fitted capacitor across the same two nodes (an AC short)."""
    return any(c.kind == "C" and c.part and set(c.nodes) == set(e.nodes) for c in circuit.elements)


def _par(*rs: float) -> float:
    rs = [r for r in rs if r > 0]
    return 1.0 / sum(1.0 / r for r in rs) if rs else 0.0


def _resistances(circuit) -> dict:
    """The resistances the gain transistor's collector and emitter see, from the netlist.

    DC: the collector's resistor chain to its rail plus the emitter's chain to its rail. AC:
    the collector's chain in parallel with what the collector drives to signal ground — the
    load through the output capacitor, a feedback resistor back to a base held nearly still
    by the feedback (or to a junction a capacitor grounds), a follower's input (its β + 1 times
    what its emitter drives) — plus the emitter's chain less any resistor a capacitor
    bypasses; the emitter of a common-base stage is its input and counts as held.
    ``dc_parts``/``ac_parts`` say the same in designators, for the plot.
    """
    q = gain_transistor(circuit)
    c_node, b_node, e_node = q.nodes
    rails = {circuit.supply_node, "0"}
    rl_el = next((e for e in circuit.elements if e.role == "load"), None)
    rl = rl_el.value if rl_el is not None else 0.0
    rc_chain = _series_to_rail(circuit, c_node, set()) if c_node not in rails else []
    re_chain = _series_to_rail(circuit, e_node, {e.ref for e in rc_chain}) if e_node not in rails else []
    rc = sum(e.value for e in rc_chain)
    re_unbyp = [e for e in re_chain if not _bypassed(circuit, e)]
    common_base = any(e.role == "input_series" and e_node in e.nodes for e in circuit.elements)
    # What the collector drives, besides its own resistor.
    extra, words = [], []
    out = circuit.output_node
    for e, _ in circuit.neighbours(c_node):
        if e.kind == "C" and e.part and out in e.nodes:
            extra.append(rl)
            words.append("load")
        elif e.kind == "R" and e.part and e.role in ("feedback",):
            other = e.nodes[1] if e.nodes[0] == c_node else e.nodes[0]
            if other == b_node:
                extra.append(e.value)
                words.append(f"{e.ref} (to the base, held nearly still by the feedback)")
            else:
                grounded = any(x.kind == "C" and x.part and other in x.nodes and set(x.nodes) & rails
                               for x in circuit.elements)
                rest = sum(x.value for x in circuit.elements if x.kind == "R" and x.part and x is not e
                           and other in x.nodes and b_node in x.nodes)
                extra.append(e.value if grounded else e.value + rest)
                words.append(f"{e.ref} (to a junction its capacitor grounds)" if grounded else
                             f"{e.ref} + the rest of the feedback (to the base)")
    for f in circuit.transistors:
        if f is not q and f.nodes[1] == c_node:  # a follower's base on this collector
            f_chain = _series_to_rail(circuit, f.nodes[2], set())
            r_e = sum(x.value for x in f_chain)
            drives_out = any(x.kind == "C" and x.part and f.nodes[2] in x.nodes and out in x.nodes
                             for x in circuit.elements)
            load_f = _par(r_e, rl) if drives_out else r_e
            extra.append((f.model.beta + 1.0) * load_f)
            names = "/".join(x.ref for x in f_chain) + (" ∥ load" if drives_out else "")
            words.append(f"{f.ref}'s input (β + 1 = {f.model.beta + 1:.0f} times {names})")
    r_ac_c = _par(rc, *extra) if rc > 0 else _par(*extra)
    re_ac = 0.0 if common_base else sum(e.value for e in re_unbyp)
    by = lambda role: next((e.value for e in re_chain if e.role.endswith(role)), 0.0)  # noqa: E731
    re1, re2 = by("emitter"), by("emitter_bypassed")
    dc_names = [e.ref for e in rc_chain + re_chain]
    ac_c = " ∥ ".join([e.ref for e in rc_chain] + words) if words else "/".join(e.ref for e in rc_chain)
    ac_e = ("" if common_base or not re_unbyp else " + " + " + ".join(e.ref for e in re_unbyp))
    return {"transistor": q.ref, "rc": rc, "re1": re1, "re2": re2, "rl": rl, "re_total": sum(e.value for e in re_chain),
            "re_ac": re_ac, "r_ac_collector": r_ac_c, "r_dc": rc + sum(e.value for e in re_chain),
            "r_ac": r_ac_c + re_ac, "dc_parts": " + ".join(dc_names) or "no resistor",
            "ac_parts": (ac_c or "no resistor") + ac_e,
            "common_base": common_base}


def load_line_data(an) -> dict:
    """The load-line plot's numbers (currents in amperes, voltages in volts), for the gain
    transistor (:func:`gain_transistor`: Q2 of follower-ce, else Q1).

    ``transistor``: its designator; ``vce``, ``ic``: its nominal operating point, solved
    again by the engine at the design's nominal conditions; ``corners``: (vce, ic) arrays at
    every corner of beta × supply × temperature; ``vcc``: nominal supply; ``r_dc``, ``r_ac``:
    the slopes' ohms (:func:`_resistances`), ``dc_parts``/``ac_parts`` what they are made of;
    ``cutoff``/``saturation``: (vce, ic) where the output clips, from the analysis' clip
    limits moved along the AC load line, when that limit is this transistor's (None when the
    analysis has no large-signal part); ``other_limits``: the clip limits of another
    transistor, as (side, cause, excursion V) — they are not points on this load line.
    """
    from ..analysis.network import Network

    c, cond = an.circuit, an.conditions
    net = Network(c)
    q = gain_transistor(c)
    ref, cn, en, sign = q.ref, q.nodes[0], q.nodes[2], q.model.sign
    pts = [_nominal_point(cond)] + _corner_points(cond)
    op = net.operating_point(_points_batch(pts))
    vce = (op.v[cn] - op.v[en]) * sign
    ic = op.ic[ref]
    r = _resistances(c)
    out = {"vcc": cond.supply[0], "vce": float(vce[0]), "ic": float(ic[0]),
           "corners": (vce[1:], ic[1:]), **r, "cutoff": None, "saturation": None, "other_limits": []}
    # Along the AC load line the load sees the collector's swing; VCE moves by the same
    # amount plus the drop across the unbypassed emitter resistor.
    k = r["r_ac"] / r["r_ac_collector"] if r["r_ac_collector"] > 0 else 1.0
    several = len(c.transistors) > 1
    for side in ("up", "down"):
        exc = an.large.get(f"clip_{side}")
        cause = an.large.get(f"clip_{side}_cause")
        if exc is None or cause is None or not np.isfinite(exc):
            continue
        who, _, kind = cause.rpartition(" ")
        if kind not in ("cutoff", "saturation"):
            continue
        if (who or (ref if not several else "")) != ref:
            out["other_limits"].append((side, cause, float(exc)))
            continue
        dv = exc * k * (1.0 if kind == "cutoff" else -1.0)
        out[kind] = (out["vce"] + dv, out["ic"] - dv / r["r_ac"])
    return out


def load_line_plot(an) -> bytes:
    """Collector current against collector–emitter voltage of the gain transistor: DC and AC
    load lines, the operating point at nominal and at the corners, and the clip limits."""
    d = load_line_data(an)
    q = an.circuit.element(d["transistor"])
    pnp = q.model.polarity == "pnp"
    vcc, vq, iq = d["vcc"], d["vce"], d["ic"]
    ma = 1e3
    x_hi = max(vcc, vq + iq * d["r_ac"] if d["r_ac"] > 0 else vcc, float(np.max(d["corners"][0], initial=0.0)))
    x_hi = min(x_hi, 1.6 * vcc) * 1.05
    i_dc0 = vcc / d["r_dc"] if d["r_dc"] > 0 else 2 * iq
    y_hi = max(i_dc0, iq + vq / d["r_ac"] if d["r_ac"] > 0 else i_dc0, float(np.max(d["corners"][1], initial=0.0)))
    y_hi = min(y_hi, 3 * max(i_dc0, iq)) * 1.1
    with _style():
        fig, (ax,) = _figure()
        ax.plot([0, vcc], [i_dc0 * ma, 0], color=SERIES[0], linewidth=1.6,
                label=f"DC load line, {_ohm(d['r_dc'])} ({d['dc_parts']}) to a {vcc:g} V supply")
        if d["r_ac"] > 0:
            xs = np.array([0.0, vq + iq * d["r_ac"]])
            ys = iq - (xs - vq) / d["r_ac"]
            ax.plot(xs, ys * ma, color=SERIES[1], linewidth=1.6, linestyle="--",
                    label=f"AC load line, {_ohm(d['r_ac'])} ({_short(d['ac_parts'])})")
        cv, ci = d["corners"]
        ax.plot(cv, ci * ma, linestyle="none", marker="s", markersize=5, markerfacecolor="white",
                markeredgecolor=SOFT, label="operating point at the corners")
        ax.plot([vq], [iq * ma], linestyle="none", marker="o", markersize=7, color=INK,
                label=f"operating point: {vq:.2f} V, {iq * ma:.3g} mA")
        for name, off in (("cutoff", (8, 8)), ("saturation", (8, 8))):
            p = d[name]
            if p is None:
                continue
            ax.plot([p[0]], [p[1] * ma], linestyle="none", marker="D", markersize=6, color=NOT_MET)
            ax.annotate(f"{name} ({p[0]:.2f} V)", (p[0], p[1] * ma), textcoords="offset points", xytext=off,
                        fontsize=8, color=NOT_MET)
        for i, (side, cause, exc) in enumerate(d["other_limits"]):
            ax.annotate(f"output {'rising' if side == 'up' else 'falling'} clips first at {cause}, "
                        f"{exc:.2f} V from rest (not on {d['transistor']}'s lines)",
                        (0.01, 0.02 + 0.06 * i), xycoords="axes fraction", fontsize=7.5, color=NOT_MET)
        ax.set_xlim(0, x_hi)
        ax.set_ylim(0, y_hi * ma)
        ax.set_xlabel(f"{d['transistor']} " + ("emitter–collector voltage, V" if pnp else "collector–emitter voltage, V"))
        ax.set_ylabel(f"{d['transistor']} collector current, mA")
        what = f"{d['transistor']}" + (" (the gain stage)" if len(an.circuit.transistors) > 1 else "")
        ax.set_title(f"Load lines and operating point of {what}; clip points from the large-signal analysis",
                     fontsize=9)
        ax.legend(loc="upper right", fontsize=7)
        return _png(fig)


def _short(text: str, n: int = 70) -> str:
    return text if len(text) <= n else text[: n - 1] + "…"


def _ohm(r: float) -> str:
    from ..spec.quantities import format_si

    return format_si(r, "Ω")


# ------------------------------------------------------------------------------------
# 3. Headroom against supply


def headroom_data(an, supplies=None, points: int = 7) -> dict:
    """Swing at the THD limit (V peak at the load) against supply voltage.

    The supplies run from the design's minimum to maximum (``points`` of them, plus the
    nominal); nominal part values and ambient; beta nominal, minimum and maximum (every
    transistor at once: they are of one type). One batch of supplies × betas goes through
    the harmonic-balance search.

    Returns ``supplies`` (S,), ``betas`` (nb,), ``beta_labels``, ``swing`` (nb, S) with
    NaN where the search found no swing, and ``thd_limit``.
    """
    from ..analysis import figures as fig
    from ..analysis.large_signal import swing_at_thd
    from ..analysis.network import Network

    c, cond = an.circuit, an.conditions
    s_nom, s_min, s_max = cond.supply
    if supplies is None:
        supplies = np.linspace(s_min, s_max, points) if s_max > s_min else np.array([s_nom])
        supplies = np.unique(np.round(np.append(supplies, s_nom), 9))
    supplies = np.asarray(supplies, dtype=float)
    refs = [t.ref for t in c.transistors]  # every transistor is of the one type: they move together
    b_nom, b_lo, b_hi = cond.beta[refs[0]]
    betas, labels = [b_nom], [f"beta nominal ({b_nom:.0f})"]
    if b_lo != b_nom:
        betas.append(b_lo)
        labels.append(f"beta minimum ({b_lo:.0f})")
    if b_hi != b_nom:
        betas.append(b_hi)
        labels.append(f"beta maximum ({b_hi:.0f})")
    pts = [(s, cond.ambient[0], {q: b for q in refs}) for b in betas for s in supplies]
    net = Network(c)
    op = net.operating_point(_points_batch(pts))
    gain = np.abs(fig.midband(net, op).gain[0])
    limit = an.large.get("thd_limit", getattr(an.design, "thd_limit", 0.01))
    sw, _ = swing_at_thd(net, op, limit, gain=gain)
    return {"supplies": supplies, "betas": np.array(betas), "beta_labels": labels,
            "swing": np.asarray(sw, dtype=float).reshape(len(betas), supplies.size), "thd_limit": float(limit)}


def headroom_plot(an, nominal_level: float | None = None, required: float | None = None) -> bytes:
    """Swing at the THD limit against supply, for nominal and extreme beta.

    ``nominal_level`` (V peak) adds a right-hand axis in dB above that level; ``required``
    (V peak) draws a line labelled "needed".
    """
    d = headroom_data(an)
    s, sw = d["supplies"], d["swing"]
    with _style():
        fig, (ax,) = _figure()
        for i, lab in enumerate(d["beta_labels"]):
            st = {"color": (INK, SERIES[0], SERIES[1])[i % 3], "linestyle": ("-", "--", ":")[i % 3]}
            ax.plot(s, sw[i], marker="o", markersize=4, linewidth=1.6, label=lab, **st)
        top = float(np.nanmax(sw)) if np.isfinite(sw).any() else 1.0
        if required is not None:
            ax.axhline(required, color=NOT_MET, linewidth=1.2, linestyle="-.")
            ax.annotate(f"needed: {required:.3g} V peak", (s[0], required), textcoords="offset points",
                        xytext=(2, 4), fontsize=8, color=NOT_MET)
            top = max(top, required)
        ax.set_ylim(0, top * 1.2)
        if s.size > 1:
            ax.set_xlim(s[0] - 0.03 * (s[-1] - s[0]), s[-1] + 0.03 * (s[-1] - s[0]))
        ax.set_xlabel("supply voltage, V")
        ax.set_ylabel(f"swing at {d['thd_limit'] * 100:g} % THD, V peak at the load")
        ax.set_title("Output swing against supply (nominal parts and ambient)")
        if nominal_level is not None and nominal_level > 0:
            from matplotlib.ticker import FixedLocator

            lvl = float(nominal_level)

            def to_db(v):
                with np.errstate(divide="ignore", invalid="ignore"):
                    return 20 * np.log10(np.maximum(np.asarray(v, dtype=float), lvl * 1e-6) / lvl)

            def from_db(db):
                return lvl * 10 ** (np.asarray(db, dtype=float) / 20)

            sec = ax.secondary_yaxis("right", functions=(to_db, from_db))
            sec.yaxis.set_major_locator(FixedLocator(_db_ticks(float(to_db(top * 1.2)), float(to_db(top * 0.15)))))
            sec.set_ylabel("headroom, dB above nominal")
            sec.spines["right"].set_visible(True)
            ax.axhline(lvl, color=SOFT, linewidth=1.0, linestyle=":")
            ax.annotate(f"nominal level: {lvl:.3g} V peak", (s[-1], lvl), textcoords="offset points",
                        xytext=(-4, 4), fontsize=8, color=SOFT, ha="right")
        ax.legend(loc="upper left", fontsize=7)
        return _png(fig)


def _db_ticks(hi: float, lo: float) -> list[float]:
    """Round decibel ticks between ``lo`` and ``hi`` (at most about seven)."""
    step = next((s for s in (1.0, 2.0, 3.0, 5.0, 6.0, 10.0, 20.0) if (hi - lo) / s <= 7), 40.0)
    return [k * step for k in range(math.ceil(lo / step), math.floor(hi / step) + 1)]


# ------------------------------------------------------------------------------------
# 4. Monte Carlo


def montecarlo_plot(mc: dict) -> bytes:
    """Histograms of input 1's gain and of the swing over the Monte Carlo samples."""
    gain = np.asarray(mc.get("gain_samples") or [], dtype=float)
    swing = np.asarray(mc.get("swing_samples") or [], dtype=float)
    gain, swing = gain[np.isfinite(gain)], swing[np.isfinite(swing)]
    n, seed = mc.get("samples", gain.size), mc.get("seed")
    with _style():
        fig, (a1, a2) = _figure(2)
        for ax, x, color, xlabel in ((a1, gain, SERIES[0], "gain of input 1, dB"),
                                     (a2, swing, SERIES[2], "swing at the THD limit, V peak")):
            if x.size:
                ax.hist(x, bins=30, color=color, edgecolor="white", linewidth=0.5)
                ax.axvline(float(np.median(x)), color=INK, linewidth=1.0, linestyle="--")
                ax.annotate(f"median {np.median(x):.3g}", (float(np.median(x)), 1), xycoords=("data", "axes fraction"),
                            textcoords="offset points", xytext=(3, -12), fontsize=8)
            else:
                ax.text(0.5, 0.5, "no samples", transform=ax.transAxes, ha="center", va="center", color=SOFT)
            ax.set_xlabel(xlabel)
            ax.set_ylabel("number of samples")
        where = (mc.get("conditions") or [{}])[0]
        at = (f" at {where['supply']:g} V, {where['ambient_c']:.0f} °C"
              if "supply" in where and "ambient_c" in where else "")
        a1.set_title(f"Gain: {gain.size} samples{at}")
        sw_info = mc.get("swing") or {}
        sup = sw_info.get("supply")
        a2.set_title(f"Swing: {swing.size} samples" + (f" at a {sup:g} V supply" if sup is not None else ""))
        fig.suptitle(f"Monte Carlo: {n} samples, seed {seed}", fontsize=10, color=INK)
        return _png(fig)


# ------------------------------------------------------------------------------------
# 5. Supply comparison


def compare_plot(rows: list[dict]) -> bytes:
    """Headroom and supply current against supply voltage for the supply comparison.

    Supplies where the design could not meet the spec are drawn hatched and marked
    "not met"; the gain of each supply is written under its bar.
    """
    rows = sorted(rows, key=lambda r: r["supply"])
    x = np.arange(len(rows))
    ticks = []
    for r in rows:
        g = r.get("gain_db")
        ticks.append(f"{r['supply']:g} V" + (f"\n{g:.1f} dB gain" if g is not None else ""))
    with _style():
        fig, (a1, a2) = _figure(2)
        for ax, key, scale, color, ylabel, fmt in (
            (a1, "headroom_db", 1.0, SERIES[0], "headroom above nominal, dB", "{:.1f} dB"),
            (a2, "supply_current", 1e3, SERIES[2], "supply current, mA", "{:.2f} mA"),
        ):
            vals = [r.get(key) for r in rows]
            for i, (r, v) in enumerate(zip(rows, vals)):
                ok = bool(r.get("feasible"))
                h = v * scale if v is not None and np.isfinite(v) else None
                if ok and h is not None:
                    ax.bar(i, h, width=0.6, color=color, edgecolor=color)
                    text = fmt.format(h)
                    m = r.get("margin")
                    if key == "headroom_db" and m is not None and np.isfinite(m):
                        text += f"\nmargin {m:.2f}"
                    ax.annotate(text, (i, max(h, 0.0)), textcoords="offset points", xytext=(0, 2),
                                ha="center", va="bottom", fontsize=7)
                else:
                    edge = NOT_MET if not ok else SOFT
                    word = "not met" if not ok else "no value"
                    if h is not None:
                        ax.bar(i, h, width=0.6, facecolor="white", edgecolor=edge, hatch="///", linewidth=1.0)
                        ax.annotate(f"{word}\n{fmt.format(h)}", (i, max(h, 0.0)), textcoords="offset points",
                                    xytext=(0, 2), ha="center", va="bottom", fontsize=7, color=edge)
                    else:
                        # No figure at all: hatch the whole column.
                        ax.axvspan(i - 0.3, i + 0.3, facecolor="white", edgecolor=edge, hatch="///", linewidth=1.0)
                        ax.annotate(word, (i, 0.5), xycoords=("data", "axes fraction"), ha="center", va="center",
                                    fontsize=7, color=edge, backgroundcolor="white")
            ax.axhline(0, color=SOFT, linewidth=0.8)
            ax.set_xticks(x, ticks, fontsize=7)
            ax.set_xlim(-0.6, len(rows) - 0.4)
            ax.set_xlabel("supply voltage")
            ax.set_ylabel(ylabel)
            ax.margins(y=0.15)
        a1.set_title("Headroom at each supply")
        a2.set_title("Supply current at each supply")
        return _png(fig)
