"""The documents a builder takes to the bench: BOM, buy list, figures and the report.

Written for design 1 (the best ranked): ``bom.csv``, ``bom.md``, ``buy.csv``, the
schematic (``schematic.svg``, ``schematic.png``), the plots (``frequency.png``,
``loadline.png``, ``headroom.png``, ``montecarlo.png``) and ``report.html``, which holds
all of them. A figure that cannot be drawn is left out and the report says why.
"""

from __future__ import annotations

from .bom import bom_csv, bom_md, bom_rows, buy_csv, buy_rows, load_stock_for
from .report import report_html

__all__ = ["MONTE_CARLO_SAMPLES", "render_figures", "write_documents"]

#: Random builds for the Monte Carlo plot and yield table of design 1.
MONTE_CARLO_SAMPLES = 400
#: Of those, how many also get the large-signal (swing) analysis. It costs 0.1–0.5 s per
#: sample for a two-input stage (the 400 small-signal samples take about 2 s together), so
#: it is kept small and fixed (a time-based count would make the output depend on the
#: machine); the report states the count.
MONTE_CARLO_LARGE = 20

#: File name of each figure.
FIGURE_FILES = {"schematic_svg": "schematic.svg", "schematic_png": "schematic.png", "frequency": "frequency.png",
                "loadline": "loadline.png", "headroom": "headroom.png", "montecarlo": "montecarlo.png"}


def _why(err: BaseException) -> str:
    text = str(err).strip().splitlines()[0] if str(err).strip() else ""
    return f"{type(err).__name__}: {text}" if text else type(err).__name__


def render_figures(spec, v, mc: dict | None, mc_problem: str = "") -> dict:
    """Every figure of one design, drawn by the plot and schematic modules where they exist.

    Returns a dict with the figures that could be drawn (``schematic_svg`` text, the others
    PNG bytes), ``monte_carlo`` (``mc``) and ``missing`` ({figure: why it is not there}).
    """
    an = v.analysis
    figures: dict = {"missing": {}}
    if mc is not None:
        figures["monte_carlo"] = mc
    if mc_problem:
        figures["missing"]["monte_carlo"] = mc_problem
    try:
        from . import schematic
    except ImportError as err:
        figures["missing"]["schematic"] = f"the schematic module is not available ({_why(err)})"
    else:
        for key, fn in (("schematic_svg", "schematic_svg"), ("schematic_png", "schematic_png")):
            try:
                figures[key] = getattr(schematic, fn)(an, v.design)
            except Exception as err:  # a figure must never stop the documents
                figures["missing"][key] = _why(err)
        if "schematic_svg" not in figures and "schematic_png" not in figures:
            figures["missing"]["schematic"] = "; ".join(figures["missing"].get(k, "") for k in
                                                        ("schematic_svg", "schematic_png"))
    try:
        from . import plots
    except ImportError as err:
        for key in ("frequency", "loadline", "headroom", "montecarlo"):
            figures["missing"][key] = f"the plot module is not available ({_why(err)})"
        return figures
    t = spec.targets
    calls = {
        "frequency": lambda: plots.frequency_plot(an),
        "loadline": lambda: plots.load_line_plot(an),
        "headroom": lambda: plots.headroom_plot(an, nominal_level=t.headroom_nominal, required=t.required_swing()),
        "montecarlo": (lambda: plots.montecarlo_plot(mc)) if mc is not None else None,
    }
    for key, call in calls.items():
        if call is None:
            figures["missing"][key] = mc_problem or "no Monte Carlo run"
            continue
        try:
            data = call()
        except Exception as err:  # a figure must never stop the documents
            figures["missing"][key] = _why(err)
            continue
        if isinstance(data, (bytes, bytearray)) and data:
            figures[key] = bytes(data)
        else:
            figures["missing"][key] = "the plot came back empty"
    return figures


def _monte_carlo(spec, v) -> tuple[dict | None, str]:
    """The Monte Carlo run of one design, and why it is missing or incomplete ("" when whole)."""
    from ..analysis.montecarlo import monte_carlo

    an = v.analysis
    args = (v.design, an.circuit, an.conditions, MONTE_CARLO_SAMPLES, spec.search.seed)
    try:
        return monte_carlo(*args, spec, v.design.thd_limit, large_samples=MONTE_CARLO_LARGE), ""
    except Exception as err:  # without the yields the spread can still be drawn
        first = _why(err)
    try:
        return monte_carlo(*args, None, v.design.thd_limit, large_samples=MONTE_CARLO_LARGE), (
            f"yields not computed ({first})")
    except Exception as err:  # the report names the missing plot; the other documents still get written
        return None, f"Monte Carlo failed ({_why(err)})"


def write_documents(out, spec, result, rated: dict) -> None:
    """Write the BOM, buy list, figures and report of design 1 into ``out``.

    Parameters
    ----------
    out
        An :class:`~optimizer.outputs.files.OutputDir`.
    spec, result
        The spec and its :class:`~optimizer.search.solve.SearchResult` (at least one design).
    rated
        ``{id(verified): ratings}`` for every design.
    """
    stock = load_stock_for(spec)
    if not result.designs:
        out.write("report.html", report_html(spec, result, rated, {"missing": {}}))
        return
    v = result.designs[0]
    rows = bom_rows(v, rated.get(id(v)), stock)
    out.write("bom.csv", bom_csv(rows))
    out.write("bom.md", bom_md(rows, f"Parts list: {spec.name}, design 1 ({v.design.topology}, {v.design.transistor})"))
    out.write("buy.csv", buy_csv(buy_rows(rows, stock)))
    mc, mc_problem = _monte_carlo(spec, v)
    figures = render_figures(spec, v, mc, mc_problem)
    for key, name in FIGURE_FILES.items():
        if key in figures:
            out.write(name, figures[key])
    out.write("report.html", report_html(spec, result, rated, figures))
