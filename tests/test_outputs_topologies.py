"""The documents of every topology, NPN and PNP: schematic, BOM, bring-up sheet, load line
and report agree with the analysis of the design they are written for.

Each design below is written to a design file, loaded, analysed in full (corners and large
signal) and written out by ``write_outputs`` as ``stagefit design`` does (the Monte Carlo is
cut to a few samples: it is not what these tests check). Sources of the expected values:

* **the analysis** (``optimizer.analysis.evaluate.analyse``) of the same design — the DC
  voltage across every capacitor, every transistor's operating point over the corners, the
  ratings; the analysis is compared with ngspice in tests/test_vs_ngspice.py and
  tests/test_topologies_vs_ngspice.py;
* **the design files written here** (designators, values, roles) and **the topologies'
  netlists** (optimizer/circuit/topologies/*.py: which part sits on which node, which
  transistor is the gain stage);
* **hand formulas** stated at each check (resistors in series and in parallel; the input of
  an emitter follower, β + 1 times what its emitter drives; the most an emitter follower
  can pull an AC-coupled load below rest, its emitter current times its emitter resistor
  in parallel with the load — common textbook results, no particular source);
* the capacitor catalog's default type (``optimizer.catalog.parts``): 1 µF and up is an
  electrolytic, as tests/test_plots_schematic.py counts them.
"""

from __future__ import annotations

import html
import itertools
import math
import re
from pathlib import Path

import pytest

from optimizer.analysis.evaluate import analyse, ratings
from optimizer.analysis.targets import design_margin, judge
from optimizer.catalog.parts import default_capacitor_type
from optimizer.outputs import documents, plots, schematic
from optimizer.outputs.bom import BOM_COLUMNS
from optimizer.outputs.bringup import bringup_rows
from optimizer.outputs.files import OutputDir
from optimizer.outputs.results import ranked_table, result_json
from optimizer.outputs.writer import write_outputs
from optimizer.search.candidates import Item
from optimizer.search.solve import SearchResult
from optimizer.search.verify import Verified
from optimizer.spec.designfile import load_design
from optimizer.spec.quantities import format_code, format_si
from optimizer.spec.specfile import load_spec
from test_documents import _check_report, _read_csv


def _design(topology, supply, ambient, load, transistor, inputs, parts):
    return (f"topology: {topology}\nsupply: {supply}\nambient: {ambient}\nload: {load}\n"
            f"transistor: {transistor}\ninputs: {inputs}\nparts:\n" + parts)


# --- designs ------------------------------------------------------------------------------
# Ordinary audio-stage values, every transistor in its active region at every corner. Per
# topology one NPN and one PNP design, plus a split-feedback NPN feedback-ce (its capacitor
# to ground, no bias_bottom); level pots, named inputs, grounded and split emitters appear
# among them.

DESIGNS = {
"divider-ce-npn": _design("divider-ce", "{nominal: 9 V, min: 8 V, max: 9.6 V}", "25 °C", "{resistance: 10k}", "2N3904",
  "[{source_resistance: 1k, name: phone}, {source_resistance: 10k}]", """\
  R1: {role: bias_top, value: 47k}
  R2: {role: bias_bottom, value: 10k}
  R3: {role: collector, value: 2k2}
  R4: {role: emitter, value: 100}
  R5: {role: emitter_bypassed, value: 1k}
  C3: {role: bypass_cap, value: 100u}
  C1: {role: input_cap, input: 1, value: 10u}
  RV1: {role: level_pot, input: 1, value: 10k, position: 0.7}
  R6: {role: input_series, input: 1, value: 10k}
  C2: {role: input_cap, input: 2, value: 100n}
  R7: {role: input_series, input: 2, value: 10k}
  C4: {role: output_cap, value: 10u}
"""),
"divider-ce-pnp": _design("divider-ce", "{nominal: 9 V, min: 8 V, max: 9.6 V}", "25 °C", "{resistance: 10k}", "BC557B",
  "[{source_resistance: 1k}]", """\
  R1: {role: bias_top, value: 10k}
  R2: {role: bias_bottom, value: 47k}
  R3: {role: collector, value: 2k2}
  R4: {role: emitter, value: 100}
  R5: {role: emitter_bypassed, value: 1k}
  C2: {role: bypass_cap, value: 100u}
  C1: {role: input_cap, input: 1, value: 10u}
  R6: {role: input_series, input: 1, value: 10k}
  C3: {role: output_cap, value: 10u}
"""),
"feedback-ce-npn": _design("feedback-ce", "{nominal: 9 V, min: 8 V, max: 9.6 V}", "{min: 10 °C, max: 35 °C}", "{resistance: 10k}", "2N3904",
  "[{source_resistance: 1k, name: keys}, {source_resistance: 10k}]", """\
  R1: {role: feedback, value: 68k}
  R2: {role: bias_bottom, value: 22k}
  R3: {role: collector, value: 4k7}
  R4: {role: emitter_bypassed, value: 680}
  C3: {role: bypass_cap, value: 220u}
  C1: {role: input_cap, input: 1, value: 4u7}
  R5: {role: input_series, input: 1, value: 22k}
  C2: {role: input_cap, input: 2, value: 4u7}
  R6: {role: input_series, input: 2, value: 22k}
  C4: {role: output_cap, value: 10u}
"""),
"feedback-ce-npn-split": _design("feedback-ce", "{nominal: 9 V, min: 8 V, max: 9.6 V}", "25 °C", "{resistance: 10k}", "BC547B",
  "[{source_resistance: 1k}, {source_resistance: 1k}]", """\
  R1: {role: feedback, value: 220k}
  R2: {role: feedback_split, value: 220k}
  R3: {role: collector, value: 3k3}
  R4: {role: emitter, value: 470}
  C1: {role: input_cap, input: 1, value: 4u7}
  R5: {role: input_series, input: 1, value: 10k}
  C2: {role: input_cap, input: 2, value: 4u7}
  R6: {role: input_series, input: 2, value: 10k}
  C3: {role: feedback_cap, value: 22u}
  C4: {role: output_cap, value: 10u}
"""),
"feedback-ce-pnp-split": _design("feedback-ce", "12 V", "35 °C", "{resistance: 22k}", "BC557B",
  "[{source_resistance: 600}, {source_resistance: 10k}, {source_resistance: 47k}]", """\
  R1: {role: feedback, value: 68k}
  R2: {role: feedback_split, value: 68k}
  R3: {role: bias_bottom, value: 47k}
  R4: {role: collector, value: 4k7}
  R5: {role: emitter, value: 100}
  R6: {role: emitter_bypassed, value: 1k}
  C1: {role: input_cap, input: 1, value: 2u2}
  R7: {role: input_series, input: 1, value: 10k}
  C2: {role: input_cap, input: 2, value: 2u2}
  R8: {role: input_series, input: 2, value: 22k}
  C3: {role: input_cap, input: 3, value: 1u}
  R9: {role: input_series, input: 3, value: 47k}
  C4: {role: feedback_cap, value: 10u}
  C5: {role: bypass_cap, value: 100u}
  C6: {role: output_cap, value: 4u7}
"""),
"follower-ce-npn": _design("follower-ce", "{nominal: 9 V, min: 8 V, max: 9.6 V}", "25 °C", "{resistance: 10k}", "2N5088",
  "[{source_resistance: 10k, name: guitar}]", """\
  R1: {role: bias_top, value: 47k}
  R2: {role: bias_bottom, value: 47k}
  R3: {role: bootstrap, value: 100k}
  R4: {role: follower_emitter, value: 10k}
  R5: {role: gain_bias_top, value: 100k}
  R6: {role: gain_bias_bottom, value: 22k}
  R7: {role: gain_collector, value: 4k7}
  R8: {role: gain_emitter, value: 220}
  R9: {role: gain_emitter_bypassed, value: 1k}
  R10: {role: input_series, input: 1, value: 1k}
  C1: {role: input_cap, input: 1, value: 100n}
  C2: {role: bootstrap_cap, value: 10u}
  C3: {role: coupling_cap, value: 4u7}
  C4: {role: gain_bypass_cap, value: 100u}
  C5: {role: output_cap, value: 10u}
"""),
"follower-ce-pnp": _design("follower-ce", "{nominal: 9 V, min: 7.5 V, max: 9.6 V}", "25 °C", "{resistance: 10k}", "BC557B",
  "[{source_resistance: 10k, name: piezo}]", """\
  R1: {role: bias_top, value: 47k}
  R2: {role: bias_bottom, value: 47k}
  R3: {role: bootstrap, value: 100k}
  R4: {role: follower_emitter, value: 10k}
  R5: {role: gain_bias_top, value: 22k}
  R6: {role: gain_bias_bottom, value: 100k}
  R7: {role: gain_collector, value: 4k7}
  R8: {role: gain_emitter, value: 220}
  R9: {role: gain_emitter_bypassed, value: 1k}
  R10: {role: input_series, input: 1, value: 1k}
  C1: {role: input_cap, input: 1, value: 100n}
  C2: {role: bootstrap_cap, value: 10u}
  C3: {role: coupling_cap, value: 4u7}
  C4: {role: gain_bypass_cap, value: 100u}
  C5: {role: output_cap, value: 10u}
"""),
"ce-follower-npn": _design("ce-follower", "{nominal: 9 V, min: 8 V, max: 9.6 V}", "25 °C", "{resistance: 10k, capacitance: 1n}", "2N3904",
  "[{source_resistance: 1k}, {source_resistance: 10k}]", """\
  R1: {role: bias_top, value: 56k}
  R2: {role: bias_bottom, value: 10k}
  R3: {role: collector, value: 4k7}
  R4: {role: emitter, value: 100}
  R5: {role: emitter_bypassed, value: 680}
  R6: {role: buffer_emitter, value: 4k7}
  C3: {role: bypass_cap, value: 220u}
  C1: {role: input_cap, input: 1, value: 4u7}
  R7: {role: input_series, input: 1, value: 10k}
  C2: {role: input_cap, input: 2, value: 4u7}
  R8: {role: input_series, input: 2, value: 10k}
  C4: {role: output_cap, value: 10u}
"""),
"ce-follower-pnp": _design("ce-follower", "{nominal: 5 V, min: 4.5 V, max: 5.25 V}", "25 °C", "{resistance: 10k, capacitance: 1n}", "BC557B",
  "[{source_resistance: 600}]", """\
  R1: {role: bias_top, value: 8k2}
  R2: {role: bias_bottom, value: 33k}
  R3: {role: collector, value: 2k2}
  R4: {role: emitter_bypassed, value: 470}
  C1: {role: bypass_cap, value: 470u}
  R5: {role: buffer_emitter, value: 2k2}
  C2: {role: input_cap, input: 1, value: 4u7}
  R6: {role: input_series, input: 1, value: 4k7}
  C3: {role: output_cap, value: 22u}
"""),
"cb-sum-npn": _design("cb-sum", "{nominal: 5 V, min: 4.5 V, max: 5.25 V}", "{min: 5 °C, max: 30 °C}", "{resistance: 22k}", "BC547B",
  "[{source_resistance: 1k, name: mic}, {source_resistance: 10k}, {source_resistance: 600}]", """\
  R1: {role: bias_top, value: 33k}
  R2: {role: bias_bottom, value: 10k}
  C1: {role: base_cap, value: 47u}
  R3: {role: collector, value: 3k3}
  R4: {role: emitter, value: 680}
  C2: {role: input_cap, input: 1, value: 2u2}
  RV1: {role: level_pot, input: 1, value: 10k, taper: log, position: 0.7}
  R5: {role: input_series, input: 1, value: 10k}
  C3: {role: input_cap, input: 2, value: 2u2}
  RV2: {role: level_pot, input: 2, value: 22k, taper: linear, position: 0.5}
  R6: {role: input_series, input: 2, value: 10k}
  C4: {role: input_cap, input: 3, value: 2u2}
  R7: {role: input_series, input: 3, value: 4k7}
  C5: {role: output_cap, value: 10u}
"""),
"cb-sum-pnp": _design("cb-sum", "12 V", "25 °C", "{resistance: 10k}", "2N3906",
  "[{source_resistance: 600}, {source_resistance: 1k}, {source_resistance: 10k}, {source_resistance: 47k}]", """\
  R1: {role: bias_top, value: 15k}
  R2: {role: bias_bottom, value: 68k}
  C1: {role: base_cap, value: 22u}
  R3: {role: collector, value: 4k7}
  R4: {role: emitter, value: 1k5}
  C2: {role: input_cap, input: 1, value: 2u2}
  R5: {role: input_series, input: 1, value: 4k7}
  C3: {role: input_cap, input: 2, value: 2u2}
  R6: {role: input_series, input: 2, value: 4k7}
  C4: {role: input_cap, input: 3, value: 1u}
  R7: {role: input_series, input: 3, value: 10k}
  C5: {role: input_cap, input: 4, value: 1u}
  R8: {role: input_series, input: 4, value: 10k}
  C6: {role: output_cap, value: 10u}
"""),
}


NAMES = list(DESIGNS)
PNP = {n for n in NAMES if n.endswith(("-pnp", "-pnp-split"))}
TOPOLOGY = {n: re.match(r"^(divider-ce|feedback-ce|follower-ce|ce-follower|cb-sum)", n).group(1) for n in NAMES}

#: The Monte Carlo of the written documents, cut down (what is checked here does not use it).
MC_SAMPLES, MC_LARGE = 24, 2


def _spec_text(name: str) -> str:
    """A spec matching a design: its supply, ambient, load, inputs, transistor and topology,
    with wide targets (what is judged is not what these tests check)."""
    fields = dict(re.findall(r"^(supply|ambient|load|transistor|inputs|topology): (.*)$", DESIGNS[name], re.M))
    return (f"name: {name}\nsupply: {fields['supply']}\nambient: {fields['ambient']}\nload: {fields['load']}\n"
            f"inputs: {fields['inputs']}\ntargets:\n  gain: {{value: 10 dB, tolerance: 20 dB}}\n"
            f"  supply_current: {{max: 20 mA}}\nparts:\n  resistors: {{series: E12, tolerance: 5 %}}\n"
            f"  capacitors: {{series: E6, tolerance: 20 %}}\n  transistors: [{fields['transistor']}]\n"
            f"topology: {fields['topology']}\n")


def _build(name: str, tmp: Path) -> dict:
    (tmp / "design.yaml").write_text(DESIGNS[name], encoding="utf-8")
    (tmp / "spec.yaml").write_text(_spec_text(name), encoding="utf-8")
    d = load_design(tmp / "design.yaml")
    spec = load_spec(tmp / "spec.yaml")
    an = analyse(d)
    res = judge(an, spec)
    items = {p.ref: Item(p.value, "series", p.tolerance, default_capacitor_type(p.value) if p.ref.startswith("C") else "")
             for p in d.parts}
    v = Verified(None, d, an, res, design_margin(res), items)
    result = SearchResult("feasible", [v], d.topology, notes=["a design file, not a search"])
    rated = {id(v): ratings(an)}
    out = tmp / "out"
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(documents, "MONTE_CARLO_SAMPLES", MC_SAMPLES)
        mp.setattr(documents, "MONTE_CARLO_LARGE", MC_LARGE)
        write_outputs(OutputDir(out), spec, result, result_json(result, lambda x: rated[id(x)]), rated)
    return {"v": v, "an": an, "spec": spec, "result": result, "rated": rated, "dir": out}


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """name → the analysed design and its written documents (each built once, on first use)."""
    cache: dict = {}

    def get(name: str) -> dict:
        if name not in cache:
            cache[name] = _build(name, tmp_path_factory.mktemp(name))
        return cache[name]

    return get


def _polarised(an) -> list[str]:
    # Catalog default: 1 µF and up is an electrolytic (no design here names a type).
    return sorted(e.ref for e in an.circuit.parts if e.kind == "C" and e.value >= 1e-6)


def _labels(an) -> list[str]:
    """Every label the schematic must carry: designator and value code of each part (pots
    with their taper), each transistor's designator, type and polarity, the load, the supply."""
    d = an.design
    out = []
    for e in an.circuit.parts:
        if e.kind == "Q":
            out.append(f"{e.ref} {d.transistor} ({e.model.polarity.upper()})")
        elif e.kind == "POT":
            out.append(f"{e.ref} {format_code(e.value, 'resistance')} {'log' if e.taper == 'log' else 'linear'}")
        else:
            out.append(f"{e.ref} {format_code(e.value, 'capacitance' if e.kind == 'C' else 'resistance')}")
    load = f"load {format_si(d.load.resistance, 'Ω')}"
    if d.load.capacitance:
        load += f" ∥ {format_si(d.load.capacitance, 'F')}"
    return out + [load, f"supply {d.supply.nominal:g} V"]


# --------------------------------------------------------------------------------------
# Schematic


@pytest.mark.parametrize("name", NAMES)
def test_schematic_has_every_designator_and_value(built, name):
    b = built(name)
    an = b["an"]
    svg = (b["dir"] / "schematic.svg").read_text(encoding="utf-8")
    assert svg == schematic.schematic_svg(an), "the written schematic is the drawing of this design"
    texts = re.findall(r"<text[^>]*>([^<]*)</text>", svg)
    for label in _labels(an):
        assert texts.count(label) == 1, label
    for k in range(1, an.circuit.n_inputs + 1):
        assert plots.input_label(an.design, k) in texts
    # One + mark per electrolytic, none on film capacitors.
    assert texts.count("+") == len(_polarised(an))
    assert sorted(schematic.polarised_caps(an.circuit)) == _polarised(an)


@pytest.mark.parametrize("name", NAMES)
def test_schematic_plus_marks_follow_the_dc_voltages(built, name):
    import matplotlib

    an = built(name)["an"]
    d, facts = schematic.schematic_layout(an)
    ends = {}
    for ref, node, p in facts["terminals"]:
        ends.setdefault(ref, {})[node] = p
    with matplotlib.rc_context(schematic._RC):
        fig = schematic.render_figure(d)
        pluses = [t.get_position() for t in fig.axes[0].texts if t.get_text() == "+"]
    used = []
    for ref in _polarised(an):
        n0, n1 = an.circuit.element(ref).nodes
        v = an.nominal[f"capv:{ref}"]  # v(node 0) − v(node 1), the analysis' nominal DC
        assert abs(v) > 0.05, f"{ref}: this design should have no capacitor near 0 V DC"
        plus, minus = (n0, n1) if v > 0 else (n1, n0)
        assert facts["plus"][ref] == plus
        # The drawn mark: the "+" nearest the capacitor sits at its lead on the higher node.
        (x0, y0), (x1, y1) = ends[ref][plus], ends[ref][minus]
        mid = ((x0 + x1) / 2, (y0 + y1) / 2)
        mark = min(pluses, key=lambda p: math.dist(p, mid))
        used.append(mark)
        assert math.dist(mark, (x0, y0)) < math.dist(mark, (x1, y1)), (ref, plus)
    assert len(set(used)) == len(used), "each capacitor has its own mark"


def _nets(facts):
    """Union-find of the drawing: wires join their ends and every lead end lying on them;
    symbols of one node (local grounds, the supply) are one net by what they mean."""
    parent: dict = {}

    def find(x):
        parent.setdefault(x, x)
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    def key(p):
        return (round(p[0], 6), round(p[1], 6))

    def on(p, a, b):
        (x, y), (xa, ya), (xb, yb) = p, a, b
        return (min(xa, xb) - 1e-6 <= x <= max(xa, xb) + 1e-6 and min(ya, yb) - 1e-6 <= y <= max(ya, yb) + 1e-6
                and abs((xb - xa) * (y - ya) - (yb - ya) * (x - xa)) < 1e-6)

    points = {key(p) for _, _, p in facts["terminals"]} | {key(p) for _, p in facts["symbols"]}
    wires = [(key(a), key(b)) for a, b in facts["wires"]]
    points |= {p for w in wires for p in w}
    for a, b in wires:
        parent[find(a)] = find(b)
        for p in points:
            if on(p, a, b):
                parent[find(p)] = find(a)
    first: dict = {}
    for node, p in facts["symbols"]:
        if node in first:
            parent[find(key(p))] = find(first[node])
        first.setdefault(node, key(p))
    return lambda p: find(key(p))


@pytest.mark.parametrize("name", NAMES)
def test_schematic_connects_what_the_netlist_connects(built, name):
    import schemdraw.elements as elm

    an = built(name)["an"]
    c = an.circuit
    _, facts = schematic.schematic_layout(an)
    net = _nets(facts)
    drawn: dict = {}
    for ref, node, p in facts["terminals"]:
        drawn.setdefault(ref, []).append((node, net(p)))
    # Every fitted part, the load and every jack are drawn with their netlist nodes.
    for e in c.elements:
        if e.part or e.role == "load":
            assert sorted(n for n, _ in drawn[e.ref]) == sorted(e.nodes), e.ref
    assert sorted(n for n, _ in drawn["jack"]) == sorted(f"src{k}" for k in range(1, c.n_inputs + 1))
    # One drawn net per netlist node, and no two nodes joined.
    by_node: dict = {}
    for leads in drawn.values():
        for node, r in leads:
            by_node.setdefault(node, set()).add(r)
    for node, p in facts["symbols"]:
        by_node.setdefault(node, set()).add(net(p))
    assert all(len(rs) == 1 for rs in by_node.values()), {n: len(r) for n, r in by_node.items() if len(r) != 1}
    roots = [next(iter(rs)) for rs in by_node.values()]
    assert len(set(roots)) == len(roots), "two nodes are drawn joined"
    # The supply and ground are drawn (a symbol each at least).
    assert {n for n, _ in facts["symbols"]} == {"vcc", "0"}
    # Wires run across and down only and never cross one another or a part.
    segs = [("w", a, b) for a, b in facts["wires"]] + [(r, a, b) for a, b, r in facts["bodies"]]
    for (ra, a0, a1), (rb, b0, b1) in itertools.combinations(segs, 2):
        for p in (a0, a1):
            inside = (min(b0[0], b1[0]) + 1e-6 < p[0] < max(b0[0], b1[0]) - 1e-6 or
                      min(b0[1], b1[1]) + 1e-6 < p[1] < max(b0[1], b1[1]) - 1e-6)
            if rb != "w" and inside and abs((b1[0] - b0[0]) * (p[1] - b0[1]) - (b1[1] - b0[1]) * (p[0] - b0[0])) < 1e-6:
                pytest.fail(f"a lead ends on the body of {rb}")
        ha, hb = abs(a0[1] - a1[1]) < 1e-9, abs(b0[1] - b1[1]) < 1e-9
        if ha != hb:  # one across, one down: they cross if each passes strictly through the other
            (h0, h1), (v0, v1) = ((a0, a1), (b0, b1)) if ha else ((b0, b1), (a0, a1))
            x, y = v0[0], h0[1]
            if (min(h0[0], h1[0]) + 1e-6 < x < max(h0[0], h1[0]) - 1e-6 and
                    min(v0[1], v1[1]) + 1e-6 < y < max(v0[1], v1[1]) - 1e-6):
                pytest.fail(f"{ra} crosses {rb} at {(x, y)}")
    # The symbols: PNP where the design's transistor is PNP.
    want = elm.BjtPnp if name in PNP else elm.BjtNpn
    assert sorted(facts["transistors"]) == [q.ref for q in c.transistors]
    assert all(isinstance(e, want) for e in facts["transistors"].values())


@pytest.mark.parametrize("name", NAMES)
def test_schematic_labels_do_not_overlap(built, name):
    import matplotlib

    d = schematic.schematic_drawing(built(name)["an"])
    with matplotlib.rc_context(schematic._RC):
        fig = schematic.render_figure(d)
        r = fig.canvas.get_renderer()
        boxes = [(t.get_text(), t.get_window_extent(r)) for t in fig.axes[0].texts]
    bad = [(a[0], b[0]) for a, b in itertools.combinations(boxes, 2) if a[1].overlaps(b[1])]
    assert not bad
    w, h = fig.get_size_inches() * fig.dpi
    for text, bb in boxes:
        assert bb.x0 >= 0 and bb.y0 >= 0 and bb.x1 <= w and bb.y1 <= h, text


@pytest.mark.parametrize("name", ["follower-ce-npn", "cb-sum-pnp"])
def test_schematic_is_the_same_bytes_every_time(built, name):
    b = built(name)
    assert schematic.schematic_png(b["an"]) == (b["dir"] / "schematic.png").read_bytes()
    assert schematic.schematic_svg(b["an"]) == schematic.schematic_svg(b["an"])


# --------------------------------------------------------------------------------------
# BOM


@pytest.mark.parametrize("name", NAMES)
def test_bom_has_every_part_once_and_a_row_per_transistor(built, name):
    b = built(name)
    d, an = b["v"].design, b["an"]
    bom = _read_csv((b["dir"] / "bom.csv").read_text(encoding="utf-8"))
    assert list(bom[0].keys()) == list(BOM_COLUMNS)
    qs = [q.ref for q in an.circuit.transistors]
    seen = [ref.strip() for r in bom for ref in r["designators"].split(",")]
    assert sorted(seen) == sorted([p.ref for p in d.parts] + qs), "every part exactly once"
    by_ref = {ref.strip(): r for r in bom for ref in r["designators"].split(",")}
    for p in d.parts:
        r = by_ref[p.ref]
        kind = "capacitance" if p.ref.startswith("C") else "resistance"
        assert r["code"] == format_code(p.value, kind) and float(r["value"]) == p.value, p.ref
        assert int(r["quantity"]) == len(r["designators"].split(","))
    rows_q = [r for r in bom if r["kind"] == "transistor"]
    assert [r["designators"] for r in rows_q] == qs, "one row per transistor, in designator order"
    diss = {q["ref"]: q["dissipation"] for q in ratings(an)["transistors"]}
    for r in rows_q:
        assert r["code"] == d.transistor and r["quantity"] == "1"
        assert r["type"].startswith("PNP" if name in PNP else "NPN")
        assert f"dissipates up to {format_si(diss[r['designators']], 'W')}" in r["note"]
    assert sum(int(r["quantity"]) for r in bom) == len(d.parts) + len(qs)
    # The buy list has both transistors on one line (same part).
    buy = _read_csv((b["dir"] / "buy.csv").read_text(encoding="utf-8"))
    line = [r for r in buy if r["kind"] == "transistor"]
    assert len(line) == 1 and line[0]["quantity"] == str(len(qs)) and line[0]["designators"] == ", ".join(qs)


def _words(node: str, topology: str) -> str:
    """What the BOM must call a node, by the topology's netlist (which terminal it is)."""
    fixed = {"0": "ground", "vcc": "the supply", "out": "the output", "f": "the feedback junction",
             "bs": "the bootstrap node", "b": "Q1 base", "c": "Q1 collector", "e": "Q1 emitter side",
             "e2": "Q1 emitter side", "b_q2": "Q2 base", "c_q2": "Q2 collector", "e_q2": "Q2 emitter side",
             "e2_q2": "Q2 emitter side"}
    if topology == "ce-follower" and node == "c":  # Q2's base sits on Q1's collector
        return "Q1 collector and Q2 base"
    m = re.fullmatch(r"(?:a|w|src)(\d+)", node)
    return f"the input {m.group(1)}" if m else fixed[node]


@pytest.mark.parametrize("name", NAMES)
def test_bom_orientation_names_the_nodes_of_every_topology(built, name):
    b = built(name)
    an = b["an"]
    bom = _read_csv((b["dir"] / "bom.csv").read_text(encoding="utf-8"))
    texts = {}
    for r in bom:
        for ref, text in re.findall(r"(C\d+): (.*?)(?=; C\d+: |$)", r["orientation"]):
            texts[ref] = text
    assert sorted(texts) == _polarised(an)
    for ref in _polarised(an):
        n0, n1 = an.circuit.element(ref).nodes
        lo, hi = an.low[f"capv:{ref}"], an.high[f"capv:{ref}"]
        assert lo > 0.05 or hi < -0.05, f"{ref}: this design should have no capacitor whose DC changes sign"
        plus, minus = (n0, n1) if lo > 0 else (n1, n0)
        m = re.match(r"\+ toward (.*?), − toward (.*?); \+(\d+\.\d+) V DC", texts[ref])
        assert m, texts[ref]
        assert m.group(1).startswith(_words(plus, TOPOLOGY[name])), (ref, m.group(1))
        assert m.group(2).startswith(_words(minus, TOPOLOGY[name])), (ref, m.group(2))
        assert float(m.group(3)) == pytest.approx(abs(an.nominal[f"capv:{ref}"]), abs=0.006)


# --------------------------------------------------------------------------------------
# Bring-up sheet


def _expected_readings(circuit) -> list[tuple[str, str]]:
    """(analysis key, what) of every reading: each transistor's base, emitter, collector in
    designator order, a node read once however many terminals it is, then the current."""
    several = len(circuit.transistors) > 1
    out, where = [], {}
    for q in circuit.transistors:
        for i, term, key in ((1, "base", "vb"), (2, "emitter", "ve"), (0, "collector", "vc")):
            node = q.nodes[i]
            if node in where:
                out[where[node]] = (out[where[node]][0], out[where[node]][1] + f" = {q.ref} {term}")
                continue
            where[node] = len(out)
            out.append((f"{key}:{q.ref}" if several else key, f"{q.ref} {term}"))
    return out + [("supply_current", "supply current")]


@pytest.mark.parametrize("name", NAMES)
def test_bringup_rows_are_the_analysis_ranges(built, name):
    b = built(name)
    v, an = b["v"], b["an"]
    rows = bringup_rows(v)
    assert [(r["figure"], r["what"]) for r in rows] == _expected_readings(an.circuit)
    for r in rows:
        k = r["figure"]
        assert (r["min"], r["typ"], r["max"]) == (an.low[k], an.nominal[k], an.high[k])
        assert r["min"] <= r["typ"] <= r["max"]
    # What the hints name comes from the netlist: a collector with a resistor names that
    # resistor; a terminal tied to a rail says so.
    roles = {p.role: p.ref for p in v.design.parts if p.input is None}
    for r in rows[:-1]:
        q = an.circuit.element(r["what"].split()[0])
        term = r["what"].split()[1]
        node = q.nodes[{"collector": 0, "base": 1, "emitter": 2}[term]]
        if node in ("vcc", "0"):
            assert "tied straight to" in r["hint"], r["what"]
        elif term == "collector":
            rc = roles["gain_collector" if TOPOLOGY[name] == "follower-ce" else "collector"]
            assert rc in r["hint"] and "saturated" in r["hint"], r["what"]
        assert q.ref in r["hint"] or any(x in r["hint"] for x in roles.values()), r["what"]
    # The sheet in the report is these rows.
    text = (b["dir"] / "report.html").read_text(encoding="utf-8")
    for r in rows:
        assert f"<tr><td>{html.escape(r['what'])}</td>" in text and html.escape(r["hint"]) in text


# --------------------------------------------------------------------------------------
# Load line and clip limits


def _hand_load_lines(an, name) -> tuple[str, float, float]:
    """(gain transistor, DC slope Ω, AC slope Ω) by hand from the design's parts."""
    v = {p.role: p.value for p in an.design.parts if p.input is None}
    rl = an.design.load.resistance

    def par(*rs):
        return 1.0 / sum(1.0 / r for r in rs)

    topo = TOPOLOGY[name]
    pre = "gain_" if topo == "follower-ce" else ""
    rc = v[pre + "collector"]
    re1, re2 = v.get(pre + "emitter", 0.0), v.get(pre + "emitter_bypassed", 0.0)
    re_ac = re1 + (0.0 if (pre + "bypass_cap") in v else re2)  # the bypass capacitor shorts re2
    r_dc = rc + re1 + re2
    if topo in ("divider-ce", "follower-ce"):  # the collector drives the load through its capacitor
        r_ac = par(rc, rl) + re_ac
    elif topo == "feedback-ce":
        # The feedback resistor goes to a point the feedback (or its capacitor) holds still.
        fb = v["feedback"] if ("feedback_cap" in v or "feedback_split" not in v) else v["feedback"] + v["feedback_split"]
        r_ac = par(rc, rl, fb) + re_ac
    elif topo == "ce-follower":  # a follower's input: β + 1 times what its emitter drives
        r_ac = par(rc, (an.design.model.beta + 1) * par(v["buffer_emitter"], rl)) + re_ac
    else:  # cb-sum: the emitter is the input, held by the sources
        r_ac = par(rc, rl)
    return ("Q2" if topo == "follower-ce" else "Q1"), r_dc, r_ac


@pytest.mark.parametrize("name", NAMES)
def test_load_line_is_the_gain_transistors(built, name):
    b = built(name)
    an = b["an"]
    d = plots.load_line_data(an)
    ref, r_dc, r_ac = _hand_load_lines(an, name)
    assert d["transistor"] == ref
    assert d["vce"] == pytest.approx(an.nominal[f"vce:{ref}"], rel=1e-9)
    assert d["ic"] == pytest.approx(an.nominal[f"ic:{ref}"], rel=1e-9)
    assert d["r_dc"] == pytest.approx(r_dc, rel=1e-12)
    assert d["r_ac"] == pytest.approx(r_ac, rel=1e-12)
    for kind in ("cutoff", "saturation"):
        if d[kind] is not None:  # on the AC load line, cutoff at the larger VCE
            vce, ic = d[kind]
            assert ic == pytest.approx(d["ic"] - (vce - d["vce"]) / d["r_ac"], rel=1e-9, abs=1e-12)
            assert (vce > d["vce"]) == (kind == "cutoff")
    # A clip of the other transistor is named, not put on this transistor's lines.
    assert all(not cause.startswith(ref) for _, cause, _ in d["other_limits"])
    assert (b["dir"] / "loadline.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("name", NAMES)
def test_clip_causes_name_the_transistor(built, name):
    an = built(name)["an"]
    up, down = an.large["clip_up_cause"], an.large["clip_down_cause"]
    pnp = name in PNP
    topo = TOPOLOGY[name]
    if len(an.circuit.transistors) == 1:
        # One stage, output on its collector: rising cuts an NPN off, saturates a PNP.
        assert (up, down) == (("saturation", "cutoff") if pnp else ("cutoff", "saturation"))
        return
    assert re.fullmatch(r"Q[12] (cutoff|saturation)", up) and re.fullmatch(r"Q[12] (cutoff|saturation)", down)
    if topo == "follower-ce":
        # The follower (Q1) carries only the input-sized signal: the gain stage Q2 clips,
        # at cutoff where its collector rises (NPN output up, PNP output down).
        assert (up, down) == (("Q2 saturation", "Q2 cutoff") if pnp else ("Q2 cutoff", "Q2 saturation"))
    else:  # ce-follower
        # The buffer Q2 can pull the AC-coupled load away from its rail by at most its
        # emitter current times (emitter resistor ∥ load); these designs reach that first.
        ve = an.nominal["ve:Q2"]
        r_e = next(p.value for p in an.design.parts if p.role == "buffer_emitter")
        i_e = (an.design.supply.nominal - ve if pnp else ve) / r_e
        limit = i_e * r_e * an.design.load.resistance / (r_e + an.design.load.resistance)
        side = "up" if pnp else "down"
        assert an.large[f"clip_{side}_cause"] == "Q2 cutoff"
        assert an.large[f"clip_{side}"] == pytest.approx(limit, rel=0.05)
        # The other way the gain stage's collector runs toward its rail until Q1 cuts off.
        assert an.large[f"clip_{'down' if pnp else 'up'}_cause"] == "Q1 cutoff"


# --------------------------------------------------------------------------------------
# Report and the other files


@pytest.mark.parametrize("name", NAMES)
def test_report_is_self_contained(built, name):
    import base64

    b = built(name)
    an = b["an"]
    text = (b["dir"] / "report.html").read_text(encoding="utf-8")
    p = _check_report(text)
    assert p.counts.get("svg", 0) == 1
    svg_texts = re.findall(r"<text[^>]*>([^<]*)</text>", text)
    for label in _labels(an):
        assert label in svg_texts, label
    pngs = re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', text)
    for fname in ("frequency.png", "loadline.png", "headroom.png", "montecarlo.png"):
        assert base64.b64encode((b["dir"] / fname).read_bytes()).decode() in pngs, fname
    n = len(b["v"].design.parts) + len(an.circuit.transistors)
    assert f"<tr><th>parts (with the transistors)</th><td class=\"num\">{n}</td></tr>" in text
    # The other files of `stagefit design`: the design file, the SPICE netlist with every
    # transistor, the JSON.
    cir = (b["dir"] / "design-1.cir").read_text(encoding="utf-8")
    for q in an.circuit.transistors:
        assert re.search(rf"^{q.ref} ", cir, re.M), q.ref
    assert (b["dir"] / "design-1.yaml").exists() and (b["dir"] / "result.json").exists()


def test_ranked_table_of_several_topologies(built):
    names = ["divider-ce-npn", "follower-ce-npn", "cb-sum-pnp"]
    vs = [built(n)["v"] for n in names]
    spec = built(names[0])["spec"]
    table = ranked_table(SearchResult("feasible", vs, "divider-ce"), spec)
    lines = table.splitlines()
    assert "topology" in lines[0].split() and "bias/load" in lines[0].split()
    # Each row shows its gain stage's bias and load resistors and emitter resistors, as the
    # design files give them (follower-ce: the gain stage is Q2, roles gain_…).
    want = [["divider-ce", "2N3904", "47K/10K/2K2", "100R+1K"], ["follower-ce", "2N5088", "100K/22K/4K7", "220R+1K"],
            ["cb-sum", "2N3906", "15K/68K/4K7", "1K5"]]
    assert [line.split()[3:7] for line in lines[2:]] == want
