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


def _q_terminals(circuit):
    q = circuit.transistors[0]
    return q.ref, q.nodes[0], q.nodes[2], q.model.sign


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


def _resistances(circuit) -> dict:
    """Collector, emitter (unbypassed, bypassed) and load resistances of a divider-ce stage."""
    def val(role):
        els = circuit.by_role(role)
        return els[0].value if els else 0.0

    rc, re1, re2, rl = val("collector"), val("emitter"), val("emitter_bypassed"), val("load")
    bypassed = bool(circuit.by_role("bypass_cap"))
    r_ac_c = rc * rl / (rc + rl) if rl > 0 else rc
    re_ac = re1 + (0.0 if bypassed else re2)
    return {"rc": rc, "re1": re1, "re2": re2, "rl": rl, "re_total": re1 + re2, "re_ac": re_ac,
            "r_ac_collector": r_ac_c, "r_dc": rc + re1 + re2, "r_ac": r_ac_c + re_ac}


def load_line_data(an) -> dict:
    """The load-line plot's numbers (currents in amperes, voltages in volts).

    ``vce``, ``ic``: the nominal operating point, solved again by the engine at the
    design's nominal conditions; ``corners``: (vce, ic) arrays at every corner of beta ×
    supply × temperature; ``vcc``: nominal supply; ``r_dc``, ``r_ac``: the slopes' ohms;
    ``cutoff``/``saturation``: (vce, ic) where the output clips, from the analysis' clip
    limits moved along the AC load line (None when the analysis has no large-signal part).
    """
    from ..analysis.network import Network

    c, cond = an.circuit, an.conditions
    net = Network(c)
    ref, cn, en, sign = _q_terminals(c)
    pts = [_nominal_point(cond)] + _corner_points(cond)
    op = net.operating_point(_points_batch(pts))
    vce = (op.v[cn] - op.v[en]) * sign
    ic = op.ic[ref]
    r = _resistances(c)
    out = {"vcc": cond.supply[0], "vce": float(vce[0]), "ic": float(ic[0]),
           "corners": (vce[1:], ic[1:]), **r, "cutoff": None, "saturation": None}
    # Along the AC load line the load sees the collector's swing; VCE moves by the same
    # amount plus the drop across the unbypassed emitter resistor.
    k = r["r_ac"] / r["r_ac_collector"] if r["r_ac_collector"] > 0 else 1.0
    for side in ("up", "down"):
        exc = an.large.get(f"clip_{side}")
        cause = an.large.get(f"clip_{side}_cause")
        if exc is None or cause not in ("cutoff", "saturation") or not np.isfinite(exc):
            continue
        dv = exc * k * (1.0 if cause == "cutoff" else -1.0)
        out[cause] = (out["vce"] + dv, out["ic"] - dv / r["r_ac"])
    return out


def load_line_plot(an) -> bytes:
    """Collector current against collector–emitter voltage: DC and AC load lines, the
    operating point at nominal and at the corners, and the clip limits."""
    d = load_line_data(an)
    pnp = an.circuit.transistors[0].model.polarity == "pnp"
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
                label=f"DC load line, {_ohm(d['r_dc'])} to a {vcc:g} V supply")
        if d["r_ac"] > 0:
            xs = np.array([0.0, vq + iq * d["r_ac"]])
            ys = iq - (xs - vq) / d["r_ac"]
            ax.plot(xs, ys * ma, color=SERIES[1], linewidth=1.6, linestyle="--",
                    label=f"AC load line, {_ohm(d['r_ac'])}")
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
        ax.set_xlim(0, x_hi)
        ax.set_ylim(0, y_hi * ma)
        ax.set_xlabel("emitter–collector voltage, V" if pnp else "collector–emitter voltage, V")
        ax.set_ylabel("collector current, mA")
        ax.set_title("Load lines and operating point (clip points from the large-signal analysis)")
        ax.legend(loc="upper right", fontsize=7)
        return _png(fig)


def _ohm(r: float) -> str:
    from ..spec.quantities import format_si

    return format_si(r, "Ω")


# ------------------------------------------------------------------------------------
# 3. Headroom against supply


def headroom_data(an, supplies=None, points: int = 7) -> dict:
    """Swing at the THD limit (V peak at the load) against supply voltage.

    The supplies run from the design's minimum to maximum (``points`` of them, plus the
    nominal); nominal part values and ambient; beta nominal, minimum and maximum. One
    batch of supplies × betas goes through the harmonic-balance search.

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
    q = c.transistors[0].ref
    b_nom, b_lo, b_hi = cond.beta[q]
    betas, labels = [b_nom], [f"beta nominal ({b_nom:.0f})"]
    if b_lo != b_nom:
        betas.append(b_lo)
        labels.append(f"beta minimum ({b_lo:.0f})")
    if b_hi != b_nom:
        betas.append(b_hi)
        labels.append(f"beta maximum ({b_hi:.0f})")
    pts = [(s, cond.ambient[0], {q: b}) for b in betas for s in supplies]
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
