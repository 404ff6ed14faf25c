"""Plots and schematic of a divider-ce stage: valid images, repeatable bytes, and numbers
that agree with the analysis.

Reference for the numeric checks: the project's own analysis engine
(``optimizer.analysis``), which is itself checked against ngspice in
tests/test_vs_ngspice.py. The plot helpers must reproduce its figures exactly, because
they call the same engine rather than restating formulas.
"""

from __future__ import annotations

import io
import itertools
import math
import re

import numpy as np
import pytest

from optimizer.analysis.evaluate import analyse
from optimizer.analysis.montecarlo import monte_carlo
from optimizer.outputs import plots, schematic
from optimizer.spec.designfile import load_design
from optimizer.spec.quantities import format_code

# --------------------------------------------------------------------------------------
# Designs

ONE_INPUT = """\
topology: divider-ce
supply: {nominal: 12 V, min: 10 V, max: 13 V}
ambient: 25 °C
load: {resistance: 10k}
transistor: BC547B
inputs: [{source_resistance: 600, name: phone}]
parts:
  R1: {role: bias_top, value: 68k}
  R2: {role: bias_bottom, value: 10k}
  R3: {role: collector, value: 4k7}
  R4: {role: emitter, value: 1k}
  C1: {role: input_cap, input: 1, value: 4u7}
  R5: {role: input_series, input: 1, value: 1k}
  C2: {role: output_cap, value: 10u}
"""

TWO_INPUTS = """\
topology: divider-ce
supply: {nominal: 9 V, min: 7 V, max: 9.6 V}
ambient: {min: 5 °C, max: 35 °C}
load: {resistance: 10k}
transistor: 2N3904
inputs: [{source_resistance: 1k}, {source_resistance: 1k}]
parts:
  R1: {role: bias_top, value: 47k}
  R2: {role: bias_bottom, value: 10k}
  R3: {role: collector, value: 2k2}
  R4: {role: emitter, value: 100}
  R5: {role: emitter_bypassed, value: 1k}
  C3: {role: bypass_cap, value: 100u}
  C1: {role: input_cap, input: 1, value: 10u}
  R6: {role: input_series, input: 1, value: 10k}
  C2: {role: input_cap, input: 2, value: 10u}
  R7: {role: input_series, input: 2, value: 10k}
  C4: {role: output_cap, value: 10u}
"""

FOUR_POTS = """\
topology: divider-ce
supply: {nominal: 9 V, min: 8 V, max: 10 V}
ambient: {min: 10 °C, max: 40 °C}
load: {resistance: 10k, capacitance: 300p}
transistor: 2N3904
inputs:
  - {source_resistance: 1k, name: guitar}
  - {source_resistance: 1k, name: mic}
  - {source_resistance: 10k}
  - {source_resistance: 100}
parts:
  R1: {role: bias_top, value: 47k}
  R2: {role: bias_bottom, value: 47k}
  R3: {role: collector, value: 2k2}
  R4: {role: emitter, value: 220}
  R5: {role: emitter_bypassed, value: 820}
  C5: {role: bypass_cap, value: 47u}
  C1: {role: input_cap, input: 1, value: 1u}
  C2: {role: input_cap, input: 2, value: 1u}
  C3: {role: input_cap, input: 3, value: 220n}
  C4: {role: input_cap, input: 4, value: 1u}
  RV1: {role: level_pot, input: 1, value: 10k, position: 0.8}
  RV2: {role: level_pot, input: 2, value: 10k, taper: linear, position: 0.5}
  RV3: {role: level_pot, input: 3, value: 47k}
  RV4: {role: level_pot, input: 4, value: 10k}
  R6: {role: input_series, input: 1, value: 47k}
  R7: {role: input_series, input: 2, value: 47k}
  R8: {role: input_series, input: 3, value: 100k}
  R9: {role: input_series, input: 4, value: 47k}
  C6: {role: output_cap, value: 10u}
"""

PNP = """\
topology: divider-ce
supply: {nominal: 9 V, min: 7 V, max: 9.6 V}
ambient: {min: 5 °C, max: 35 °C}
load: {resistance: 10k}
transistor: BC557B
inputs: [{source_resistance: 1k, name: line}, {source_resistance: 1k}]
parts:
  R1: {role: bias_top, value: 10k}
  R2: {role: bias_bottom, value: 47k}
  R3: {role: collector, value: 2k2}
  R4: {role: emitter, value: 100}
  R5: {role: emitter_bypassed, value: 1k}
  C3: {role: bypass_cap, value: 100u}
  C1: {role: input_cap, input: 1, value: 10u}
  R6: {role: input_series, input: 1, value: 10k}
  C2: {role: input_cap, input: 2, value: 100n}
  R7: {role: input_series, input: 2, value: 10k}
  C4: {role: output_cap, value: 10u}
"""

NO_EMITTER = """\
topology: divider-ce
supply: {nominal: 9 V, min: 8 V, max: 10 V}
ambient: 25 °C
load: {resistance: 10k}
transistor: BC547B
inputs: [{source_resistance: 1k}]
parts:
  R1: {role: bias_top, value: 1M}
  R2: {role: bias_bottom, value: 100k}
  R3: {role: collector, value: 10k}
  C1: {role: input_cap, input: 1, value: 1u}
  R5: {role: input_series, input: 1, value: 10k}
  C2: {role: output_cap, value: 10u}
"""


def sixteen_inputs() -> str:
    names = ", ".join("{source_resistance: 1k, name: ch%d}" % k if k % 3 else "{source_resistance: 1k}"
                      for k in range(1, 17))
    lines = [
        "topology: divider-ce", "supply: {nominal: 9 V, min: 8 V, max: 10 V}", "ambient: 25 °C",
        "load: {resistance: 10k}", "transistor: 2N3904", f"inputs: [{names}]", "parts:",
        "  R1: {role: bias_top, value: 47k}", "  R2: {role: bias_bottom, value: 47k}",
        "  R3: {role: collector, value: 2k2}", "  R4: {role: emitter, value: 100}",
        "  R5: {role: emitter_bypassed, value: 1k}", "  C1: {role: bypass_cap, value: 100u}",
        "  C2: {role: output_cap, value: 10u}",
    ]
    for k in range(1, 17):
        lines.append(f"  C{k + 2}: {{role: input_cap, input: {k}, value: 1u}}")
        lines.append(f"  R{k + 5}: {{role: input_series, input: {k}, value: 470k}}")
        lines.append(f"  RV{k}: {{role: level_pot, input: {k}, value: 10k}}")
    return "\n".join(lines) + "\n"


DESIGNS = {"one": ONE_INPUT, "two": TWO_INPUTS, "four": FOUR_POTS, "pnp": PNP, "no_emitter": NO_EMITTER}
MAIN = ["one", "two", "four", "pnp"]




@pytest.fixture(scope="module")
def analyses(tmp_path_factory):
    root = tmp_path_factory.mktemp("designs")
    texts = dict(DESIGNS, sixteen=sixteen_inputs())
    out = {}
    for name, text in texts.items():
        p = root / f"{name}.yaml"
        p.write_text(text, encoding="utf-8")
        # The plots need the nominal figures and the conditions only; the corner search
        # is run for one design (it is slow and is not what these tests check).
        out[name] = analyse(load_design(p), worst_case=(name == "two"))
    return out


@pytest.fixture(scope="module")
def mc_two(analyses):
    an = analyses["two"]
    return monte_carlo(an.design, an.circuit, an.conditions, 60, seed=7, thd_limit=0.01, large_samples=12)


COMPARE_ROWS = [
    {"supply": 9.0, "gain_db": 11.1, "headroom_db": 6.2, "supply_current": 1.0e-3, "margin": 0.12, "feasible": True},
    {"supply": 6.0, "gain_db": None, "headroom_db": None, "supply_current": None, "margin": None, "feasible": False},
    {"supply": 7.5, "gain_db": 10.4, "headroom_db": -1.5, "supply_current": 0.8e-3, "margin": -0.05, "feasible": False},
    {"supply": 12.0, "gain_db": 11.3, "headroom_db": 9.1, "supply_current": 1.4e-3, "margin": 0.3, "feasible": True},
]


def assert_png(data: bytes, width: int = 770, height: int = 440) -> None:
    from matplotlib import image

    assert isinstance(data, bytes)
    assert data.startswith(b"\x89PNG\r\n\x1a\n")
    arr = image.imread(io.BytesIO(data), format="png")
    assert arr.shape[:2] == (height, width)
    assert arr.ndim == 3
    # Something is drawn: not a blank page.
    assert float(arr[..., :3].std()) > 0.01


# --------------------------------------------------------------------------------------
# Valid PNGs


@pytest.mark.parametrize("name", MAIN + ["no_emitter"])
def test_frequency_plot_is_png(analyses, name):
    assert_png(plots.frequency_plot(analyses[name]))


@pytest.mark.parametrize("name", MAIN + ["no_emitter"])
def test_load_line_plot_is_png(analyses, name):
    assert_png(plots.load_line_plot(analyses[name]))


@pytest.mark.parametrize(
    "name", MAIN + ["no_emitter"])
def test_headroom_plot_is_png(analyses, name):
    an = analyses[name]
    assert_png(plots.headroom_plot(an))
    swing = an.large["swing"] if np.isfinite(an.large["swing"]) else 0.5
    assert_png(plots.headroom_plot(an, nominal_level=swing / 3, required=swing / 2))


@pytest.mark.parametrize("name", ["one", "four", "pnp"])
def test_montecarlo_plot_is_png(analyses, name):
    an = analyses[name]
    mc = monte_carlo(an.design, an.circuit, an.conditions, 40, seed=3, thd_limit=0.01, large_samples=8)
    assert_png(plots.montecarlo_plot(mc))


def test_montecarlo_plot_without_swing_samples():
    mc = {"samples": 5, "seed": 1, "gain_samples": [10.0, 10.2, 9.9, 10.1, 10.0]}
    assert_png(plots.montecarlo_plot(mc))


def test_compare_plot_is_png():
    assert_png(plots.compare_plot(COMPARE_ROWS))
    assert_png(plots.compare_plot(COMPARE_ROWS[:1]))


def test_sixteen_inputs_plot(analyses):
    an = analyses["sixteen"]
    assert an.circuit.n_inputs == 16
    assert_png(plots.frequency_plot(an))
    assert_png(plots.load_line_plot(an))
    assert_png(plots.headroom_plot(an, nominal_level=0.2))


# --------------------------------------------------------------------------------------
# Determinism


def test_plots_repeat_byte_for_byte(analyses, mc_two):
    an = analyses["two"]
    for make in (plots.frequency_plot, plots.load_line_plot):
        assert make(an) == make(an)
    assert plots.headroom_plot(an, 0.1, 0.2) == plots.headroom_plot(an, 0.1, 0.2)
    assert plots.montecarlo_plot(mc_two) == plots.montecarlo_plot(mc_two)
    assert plots.compare_plot(COMPARE_ROWS) == plots.compare_plot(COMPARE_ROWS)


def test_schematic_repeats_byte_for_byte(analyses):
    an = analyses["four"]
    assert schematic.schematic_svg(an) == schematic.schematic_svg(an)
    assert schematic.schematic_png(an) == schematic.schematic_png(an)
    svg = schematic.schematic_svg(an)
    assert "<dc:date>" not in svg


# --------------------------------------------------------------------------------------
# The plotted numbers are the analysis' numbers


@pytest.mark.parametrize("name", MAIN + ["no_emitter", "sixteen"])
def test_frequency_data_matches_analysis(analyses, name):
    # Reference: an.nominal comes from the analysis engine (checked against ngspice in
    # tests/test_vs_ngspice.py); the plot must show the same gain at 1 kHz.
    an = analyses[name]
    freqs = np.array([10.0, 100.0, 1000.0, 10e3])
    d = plots.frequency_data(an, freqs)
    for k in range(1, an.circuit.n_inputs + 1):
        assert d["gain_1k_db"][k - 1] == pytest.approx(an.nominal[f"gain_db:{k}"], abs=0.01)
        assert d["gain_db"][k - 1, 2] == pytest.approx(an.nominal[f"gain_db:{k}"], abs=0.01)
    # The corner band holds the nominal curve (nominal lies inside the corners' range here).
    assert np.all(d["corner_min"][0] <= d["gain_db"][0] + 1e-6)
    assert np.all(d["corner_max"][0] >= d["gain_db"][0] - 1e-6)
    assert len(d["labels"]) == an.circuit.n_inputs


def test_frequency_data_default_grid(analyses):
    an = analyses["two"]
    d = plots.frequency_data(an)
    f = d["freqs"]
    assert f[0] == pytest.approx(5.0) and f[-1] == pytest.approx(200e3) and f.size == 200
    assert d["gain_db"].shape == (2, 200)
    # The curve at 1 kHz (log interpolation) is the analysis' gain, within the grid's
    # resolution on a flat mid-band.
    g = np.interp(math.log10(1000.0), np.log10(f), d["gain_db"][0])
    assert g == pytest.approx(an.nominal["gain_db:1"], abs=0.01)
    # −3 dB points: the analysis' low cutoff is where the curve is 3 dB down.
    lo = an.nominal["low_cutoff:1"]
    g_lo = np.interp(math.log10(lo), np.log10(f), d["gain_db"][0])
    assert g_lo == pytest.approx(an.nominal["gain_db:1"] - 3.01, abs=0.05)


@pytest.mark.parametrize("name", MAIN + ["no_emitter"])
def test_load_line_operating_point_matches_analysis(analyses, name):
    an = analyses[name]
    d = plots.load_line_data(an)
    assert d["vce"] == pytest.approx(an.nominal["vce"], rel=1e-9, abs=1e-12)
    assert d["ic"] == pytest.approx(an.nominal["ic"], rel=1e-9, abs=1e-15)
    vce, ic = d["corners"]
    assert vce.size == ic.size == len(an.conditions.globals())
    # Clip points lie on the AC load line, cutoff at the larger VCE.
    for side in ("cutoff", "saturation"):
        v, i = d[side]
        assert i == pytest.approx(d["ic"] - (v - d["vce"]) / d["r_ac"], rel=1e-9, abs=1e-12)
    assert d["cutoff"][0] > d["vce"] > d["saturation"][0]


def test_load_line_corners_match_analysis(analyses):
    # The full corner analysis also moves every part by its tolerance, so its range of
    # VCE holds the range over the beta/supply/ambient corners alone.
    an = analyses["two"]
    vce, ic = plots.load_line_data(an)["corners"]
    assert an.low["vce"] <= vce.min() + 1e-9 and vce.max() <= an.high["vce"] + 1e-9
    assert an.low["ic"] <= ic.min() + 1e-15 and ic.max() <= an.high["ic"] + 1e-15


def test_load_line_resistances(analyses):
    d = plots.load_line_data(analyses["two"])
    assert d["r_dc"] == pytest.approx(2200 + 100 + 1000)
    assert d["r_ac"] == pytest.approx(2200 * 10e3 / (2200 + 10e3) + 100)  # R5 bypassed by C3
    d = plots.load_line_data(analyses["one"])
    assert d["r_ac"] == pytest.approx(4700 * 10e3 / (4700 + 10e3) + 1000)  # no bypass
    d = plots.load_line_data(analyses["no_emitter"])
    assert d["r_dc"] == pytest.approx(10e3)
    assert d["r_ac"] == pytest.approx(5e3)


@pytest.mark.parametrize("name", ["two", "pnp"])
def test_headroom_data_matches_analysis(analyses, name):
    an = analyses[name]
    d = plots.headroom_data(an)
    s = d["supplies"]
    assert s[0] == pytest.approx(an.design.supply.min) and s[-1] == pytest.approx(an.design.supply.max)
    j = int(np.argmin(np.abs(s - an.design.supply.nominal)))
    assert s[j] == pytest.approx(an.design.supply.nominal)
    # Row 0 is nominal beta: at the nominal supply it is the analysis' own swing.
    assert d["swing"][0, j] == pytest.approx(an.large["swing"], rel=5e-3)
    assert d["swing"].shape == (len(d["betas"]), s.size)
    # More supply, more swing (nominal beta).
    sw = d["swing"][0]
    assert np.all(np.diff(sw[np.isfinite(sw)]) > 0)


# --------------------------------------------------------------------------------------
# Schematic


def _codes(an):
    out = []
    for e in an.circuit.parts:
        if e.kind not in ("R", "C", "POT"):
            continue
        kind = "capacitance" if e.kind == "C" else "resistance"
        out.append((e.ref, format_code(e.value, kind)))
    return out


@pytest.mark.parametrize("name", MAIN + ["no_emitter", "sixteen"])
def test_schematic_labels_every_part(analyses, name):
    an = analyses[name]
    svg = schematic.schematic_svg(an)
    assert svg.lstrip().startswith("<?xml")
    texts = re.findall(r"<text[^>]*>([^<]*)</text>", svg)
    joined = "\n".join(texts)
    for ref, code in _codes(an):
        assert f"{ref} {code}" in joined, (ref, code)
    assert "load 10 kΩ" in joined
    q = an.circuit.transistors[0]
    assert f"{q.ref} {an.design.transistor}" in joined
    assert f"supply {an.design.supply.nominal:g} V" in joined
    for k in range(1, an.circuit.n_inputs + 1):
        assert plots.input_label(an.design, k) in texts


def test_schematic_input_names(analyses):
    texts = re.findall(r"<text[^>]*>([^<]*)</text>", schematic.schematic_svg(analyses["one"]))
    assert "in 1: phone" in texts
    texts = re.findall(r"<text[^>]*>([^<]*)</text>", schematic.schematic_svg(analyses["four"]))
    assert {"in 1: guitar", "in 2: mic", "in 3", "in 4"} <= set(texts)


def test_schematic_transistor_symbol(analyses):
    import schemdraw.elements as elm

    for name, want, other, word in (("pnp", elm.BjtPnp, elm.BjtNpn, "PNP"), ("two", elm.BjtNpn, elm.BjtPnp, "NPN")):
        d, facts = schematic.schematic_layout(analyses[name])
        assert isinstance(facts["transistor"], want)
        assert any(isinstance(e, want) for e in d.elements)
        assert not any(isinstance(e, other) for e in d.elements)
        assert f"({word})" in schematic.schematic_svg(analyses[name])


@pytest.mark.parametrize("name,expected", [("two", 4), ("pnp", 3), ("four", 5), ("one", 2)])
def test_schematic_plus_marks(analyses, name, expected):
    an = analyses[name]
    svg = schematic.schematic_svg(an)
    # Expected count by hand: every capacitor of 1 µF and up is an electrolytic; the
    # 100 nF and 220 nF parts are film.
    assert len(schematic.polarised_caps(an.circuit)) == expected
    assert len(re.findall(r"<text[^>]*>\+</text>", svg)) == expected


@pytest.mark.parametrize("name", ["two", "pnp", "four"])
def test_schematic_plus_on_higher_node(analyses, name):
    an = analyses[name]
    _, facts = schematic.schematic_layout(an)
    assert set(facts["plus"]) == set(schematic.polarised_caps(an.circuit))
    for ref, plus in facts["plus"].items():
        el = an.circuit.element(ref)
        v = an.nominal[f"capv:{ref}"]  # v(node 0) − v(node 1) from the analysis
        assert plus == (el.nodes[0] if v > 0 else el.nodes[1])


def test_schematic_polarity_by_hand(analyses):
    # NPN: input caps + toward the base, output cap + toward the collector, bypass cap +
    # toward the emitter. PNP: the bypass cap sits between supply and emitter, + to the supply.
    plus = schematic.schematic_layout(analyses["two"])[1]["plus"]
    assert plus == {"C1": "a1", "C2": "a2", "C3": "e2", "C4": "c"}
    plus = schematic.schematic_layout(analyses["pnp"])[1]["plus"]
    assert plus == {"C1": "a1", "C3": "vcc", "C4": "c"}


@pytest.mark.parametrize("name", ["four", "sixteen"])
def test_schematic_labels_do_not_overlap(analyses, name):
    import matplotlib

    d = schematic.schematic_drawing(analyses[name])
    with matplotlib.rc_context(schematic._RC):
        fig = schematic.render_figure(d)
        r = fig.canvas.get_renderer()
        boxes = [(t.get_text(), t.get_window_extent(r)) for t in fig.axes[0].texts]
    bad = [(a[0], b[0]) for a, b in itertools.combinations(boxes, 2) if a[1].overlaps(b[1])]
    assert not bad
    # Every label is inside the sheet.
    w, h = fig.get_size_inches() * fig.dpi
    for text, bb in boxes:
        assert bb.x0 >= 0 and bb.y0 >= 0 and bb.x1 <= w and bb.y1 <= h, text


def test_schematic_png(analyses):
    from matplotlib import image

    data = schematic.schematic_png(analyses["pnp"])
    assert data.startswith(b"\x89PNG")
    arr = image.imread(io.BytesIO(data), format="png")
    assert arr.shape[0] > 200 and arr.shape[1] > 400


def test_importing_stays_light():
    # matplotlib and schemdraw load only when a plot or schematic is drawn.
    import subprocess
    import sys

    code = ("import sys, optimizer.outputs.plots, optimizer.outputs.schematic; "
            "print(any(m.split('.')[0] in ('matplotlib', 'schemdraw') for m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_schematic_from_circuit_and_design(analyses):
    an = analyses["two"]
    assert schematic.schematic_svg(an.circuit, an.design) == schematic.schematic_svg(an)
    with pytest.raises(ValueError):
        schematic.schematic_svg(an.circuit)
