"""The topologies beyond divider-ce against ngspice, on the netlists we export.

Every expected value in this file comes from one source: **ngspice 39 batch simulation of
the netlist ``to_spice`` exports for the design** (the Debian ngspice package). Each design
below is written to a design file, loaded with ``load_design``, built with its topology's
``build()``, exported and simulated; our figures for the same design are compared with
ngspice's. The two share only the netlist (element values and the ``.model`` cards).
The helpers and tolerances are those of tests/test_vs_ngspice.py.

Compared, per design:

* DC: the voltage of every node that is neither a rail, a source, a jack nor the load,
  every transistor's collector current and the supply current (1 %), and the operating
  point ``stagefit check --json`` reports for every transistor (``transistors``) (1 %);
* 1 kHz gain of every input, EMF to load, only that input driven (0.1 dB); the impedance at
  every jack (2 %); the output impedance, load removed (2 %);
* the half-power corners of input 1 below and above 1 kHz (3 %);
* with several inputs, the leak of each input into every other jack (0.1 dB).

And what each stage is for, judged by ngspice's numbers:

* ``follower-ce``: input impedance at least 1 MΩ with the transistor at its lowest β;
* ``ce-follower``: output impedance below 1 kΩ (nominal β and lowest β), 10 kΩ ∥ 1 nF load;
* ``feedback-ce`` and ``cb-sum``: better isolation between two inputs than the same sources
  and summing resistors into the divider-ce design of tests/test_vs_ngspice.py.

Runs only where ngspice is installed; elsewhere every test skips with the reason.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import replace
from functools import cached_property

import pytest

import spice_runner
from optimizer.analysis.evaluate import analyse
from optimizer.analysis.targets import judge
from optimizer.circuit.build import build_circuit
from optimizer.cli import main
from optimizer.spec.specfile import load_spec
from test_vs_ngspice import DESIGNS as DIVIDER_CE_DESIGNS
from test_vs_ngspice import TOL_CORNER, TOL_DC, TOL_GAIN_DB, TOL_ZIN, Stage, drive_only, rel

pytestmark = [
    pytest.mark.ngspice,
    pytest.mark.skipif(
        spice_runner.find_ngspice() is None,
        reason="ngspice not found: install it (Debian/Ubuntu: apt-get install ngspice) to compare against it",
    ),
]

#: A follower-ce input buffer is for guitar and piezo pickups: about 1 MΩ or more.
ZIN_BUFFER_MIN = 1e6
#: A ce-follower output buffer drives 10 kΩ ∥ 1 nF with under 1 kΩ.
ZOUT_BUFFER_MAX = 1e3
#: "Better isolation" means at least this much less leakage than divider-ce (dB): half the leak.
ISOLATION_GAIN_MIN_DB = 6.0
#: The divider-ce design the summing topologies are compared with (same sources 1k and 10k,
#: same 4u7 input capacitors and 22k summing resistors, same 2N3904 at 9 V, 10k load).
DIVIDER_REFERENCE = "9V-2N3904-full-bypass-2in"


def _design(topology, supply, load, transistor, inputs, parts: str, ambient: float = 25.0) -> str:
    return (f"topology: {topology}\nsupply: {supply}\nambient: {ambient:g} °C\nload: {load}\n"
            f"transistor: {transistor}\ninputs: {inputs}\nparts:\n" + parts)


# --- designs ------------------------------------------------------------------------------
# Each: (design file text, simulation temperature °C). Ordinary audio-stage values; every
# transistor sits well inside its active region (checked below against ngspice).

DESIGNS: dict[str, tuple[str, float]] = {
    # Shunt feedback, fully bypassed emitter: the base is a virtual earth. Same sources and
    # summing resistors as the divider-ce reference design.
    "feedback-ce-9V-2N3904-2in": (_design(
        "feedback-ce", "9 V", "{resistance: 10k}", "2N3904", "[{source_resistance: 1k}, {source_resistance: 10k}]", """\
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
"""), 25.0),
    # PNP, split feedback with its capacitor (no AC feedback), partial bypass, three inputs, 35 °C.
    "feedback-ce-12V-BC557B-PNP-split-3in-35C": (_design(
        "feedback-ce", "12 V", "{resistance: 22k}", "BC557B",
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
""", 35.0), 35.0),
    # A guitar buffer: high-β follower, bootstrapped bias, into a partly bypassed gain stage.
    "follower-ce-9V-2N5088-guitar": (_design(
        "follower-ce", "9 V", "{resistance: 10k}", "2N5088", "[{source_resistance: 10k}]", """\
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
"""), 25.0),
    # PNP mirror image at 12 V, a piezo-like 47k source, unbypassed gain stage, 47k load.
    "follower-ce-12V-BC560C-PNP-piezo": (_design(
        "follower-ce", "12 V", "{resistance: 47k}", "BC560C", "[{source_resistance: 47k}]", """\
  R1: {role: bias_top, value: 100k}
  R2: {role: bias_bottom, value: 100k}
  R3: {role: bootstrap, value: 220k}
  R4: {role: follower_emitter, value: 22k}
  R5: {role: gain_bias_top, value: 33k}
  R6: {role: gain_bias_bottom, value: 150k}
  R7: {role: gain_collector, value: 10k}
  R8: {role: gain_emitter, value: 2k2}
  R9: {role: input_series, input: 1, value: 2k2}
  C1: {role: input_cap, input: 1, value: 47n}
  C2: {role: bootstrap_cap, value: 4u7}
  C3: {role: coupling_cap, value: 1u}
  C4: {role: output_cap, value: 2u2}
"""), 25.0),
    # A line driver into 10 kΩ ∥ 1 nF (a few metres of cable), two inputs.
    "ce-follower-9V-2N3904-2in-cable": (_design(
        "ce-follower", "9 V", "{resistance: 10k, capacitance: 1n}", "2N3904",
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
"""), 25.0),
    # PNP mirror image at 5 V (USB), fully bypassed, one input, same cable load.
    "ce-follower-5V-BC557B-PNP-1in-cable": (_design(
        "ce-follower", "5 V", "{resistance: 10k, capacitance: 1n}", "BC557B", "[{source_resistance: 600}]", """\
  R1: {role: bias_top, value: 8k2}
  R2: {role: bias_bottom, value: 33k}
  R3: {role: collector, value: 2k2}
  R4: {role: emitter_bypassed, value: 470}
  C1: {role: bypass_cap, value: 470u}
  R5: {role: buffer_emitter, value: 2k2}
  C2: {role: input_cap, input: 1, value: 4u7}
  R6: {role: input_series, input: 1, value: 4k7}
  C3: {role: output_cap, value: 22u}
"""), 25.0),
    # Common-base summing with the divider-ce reference's sources and summing resistors.
    "cb-sum-9V-2N3904-2in": (_design(
        "cb-sum", "9 V", "{resistance: 10k}", "2N3904", "[{source_resistance: 1k}, {source_resistance: 10k}]", """\
  R1: {role: bias_top, value: 56k}
  R2: {role: bias_bottom, value: 10k}
  C3: {role: base_cap, value: 47u}
  R3: {role: collector, value: 4k7}
  R4: {role: emitter, value: 1k}
  C1: {role: input_cap, input: 1, value: 4u7}
  R5: {role: input_series, input: 1, value: 22k}
  C2: {role: input_cap, input: 2, value: 4u7}
  R6: {role: input_series, input: 2, value: 22k}
  C4: {role: output_cap, value: 10u}
"""), 25.0),
    # PNP mirror image at 12 V, four inputs.
    "cb-sum-12V-2N3906-PNP-4in": (_design(
        "cb-sum", "12 V", "{resistance: 10k}", "2N3906",
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
"""), 25.0),
    # 5 V, 5 °C, level pots on two of three inputs (their bottom ends load the emitter at DC).
    "cb-sum-5V-BC547B-3in-level-pots-5C": (_design(
        "cb-sum", "5 V", "{resistance: 22k}", "BC547B",
        "[{source_resistance: 1k}, {source_resistance: 10k}, {source_resistance: 600}]", """\
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
""", 5.0), 5.0),
}

MULTI_INPUT = [n for n, (t, _) in DESIGNS.items() if t.count("source_resistance") > 1]
#: One design per topology for the command-line check (the full analysis is the slow part).
CLI_DESIGNS = [next(n for n in DESIGNS if n.startswith(t)) for t in ("feedback-ce", "follower-ce", "ce-follower", "cb-sum")]


def dc_nodes(circuit) -> list[str]:
    """The nodes whose DC voltage is compared: all but ground, the supply, the EMFs, the
    jacks and the load (those sit at 0 V or the supply by construction)."""
    skip = re.compile(r"^(0|vcc|out|in\d+|src\d+)$")
    return [n for n in circuit.nodes if not skip.match(n)]


def zout_netlist(netlist: str) -> str:
    """The netlist for the output impedance: no signal drive, 1 A AC into out. The load stays
    (without it ``out`` would have no DC path); it is taken off the result afterwards."""
    out = []
    for line in netlist.splitlines():
        if re.match(r"^VIN\d+ \S+ \S+ DC 0 AC 1$", line):
            line = line.replace(" AC 1", "")
        elif line == ".end":
            out.append("IOUT 0 out DC 0 AC 1")
        out.append(line)
    text = "\n".join(out) + "\n"
    assert text.count(" AC 1") == 1, text
    return text


class TopologyStage(Stage):
    """A Stage of tests/test_vs_ngspice.py for any topology: every node, every transistor.

    ``lowest_beta`` puts every transistor at the lowest β of its type (the model's
    ``beta_min``), in our analysis and in the netlist alike.
    """

    def __init__(self, name, text, temperature_c, path, lowest_beta: bool = False):
        super().__init__(name, text, temperature_c, path)
        self.lowest_beta = lowest_beta

    @cached_property
    def circuit(self):
        c = build_circuit(self.design)
        if self.lowest_beta:
            m = self.design.model
            c = c.with_model(replace(m, beta=m.beta_min))
        return c

    @cached_property
    def transistors(self) -> list[str]:
        return [q.ref for q in self.circuit.transistors]

    @cached_property
    def spice_small_signal(self) -> list[dict[str, float]]:
        """Per input k: 1 kHz gain (dB), jack impedance and the leak into every other jack;
        for input 1 also every DC node voltage, each transistor's collector current, the
        supply current and the half-power corners. Expected values: ngspice 39 batch
        simulation of the exported netlist."""
        n = self.design.n_inputs
        nodes = dc_nodes(self.circuit)
        results = []
        for k in range(1, n + 1):
            control = [".options reltol=1e-6", ".control"]
            names = ["gain_db", "zin"]
            if k == 1:
                control += ["op"]
                for q in self.transistors:
                    control.append(f"let ic_{q.lower()} = @{q.lower()}[ic]")
                control += ["let i_supply = -i(vcc)",
                            "print " + " ".join(f"v({x})" for x in nodes),
                            "print " + " ".join(f"ic_{q.lower()}" for q in self.transistors) + " i_supply"]
                names += [f"v({x})" for x in nodes] + [f"ic_{q.lower()}" for q in self.transistors] + ["i_supply"]
            control += [
                "ac lin 1 1k 1k",
                "let gain_db = db(v(out))",
                f"let zin = mag(v(src{k}) / ((v(in{k}) - v(src{k})) / {self.rs(k):.9g}))",
                "print gain_db zin",
            ]
            for j in range(1, n + 1):
                if j != k:
                    control += [f"let leak_db{j} = db(v(src{j}))", f"print leak_db{j}"]
                    names.append(f"leak_db{j}")
            if k == 1:
                control += [
                    "let level = db(v(out) / sqrt(2))",
                    'set level = "$&level"',
                    "ac dec 400 0.01 1e9",
                    "meas ac f_low when vdb(out)=$level cross=last from=0.01 to=1000",
                    "meas ac f_high when vdb(out)=$level cross=1 from=1000 to=1e9",
                ]
                names += ["f_low", "f_high"]
            control += ["quit", ".endc"]
            out = spice_runner.run(drive_only(self.netlist(control), k))
            results.append(spice_runner.values(out, *names))
        return results

    @cached_property
    def spice_zout(self) -> float:
        """|Z| looking back into the output at 1 kHz, load removed. Expected value: ngspice 39
        batch simulation of the exported netlist."""
        f = 1e3
        control = [".options reltol=1e-6", ".control", f"ac lin 1 {f:g} {f:g}", "let z_re = real(v(out))",
                   "let z_im = imag(v(out))", "print z_re z_im", "quit", ".endc"]
        out = spice_runner.run(zout_netlist(self.netlist(control)))
        v = spice_runner.values(out, "z_re", "z_im")
        # ngspice sees the stage in parallel with the load; take the load's admittance off.
        y_load = 1 / self.design.load.resistance + 2j * math.pi * f * self.design.load.capacitance
        return abs(1 / (1 / complex(v["z_re"], v["z_im"]) - y_load))

    def spice_vce(self, q: str) -> float:
        """VCE of a transistor in its own sense (positive in the active region), from ngspice's
        node voltages (the rails at 0 and the supply)."""
        sp = self.spice_small_signal[0]
        volts = {"0": 0.0, "vcc": self.design.supply.nominal}
        c, _, e = self.circuit.element(q).nodes
        vc = volts[c] if c in volts else sp[f"v({c})"]
        ve = volts[e] if e in volts else sp[f"v({e})"]
        return self.sign * (vc - ve)


@pytest.fixture(scope="module")
def stages(tmp_path_factory):
    root = tmp_path_factory.mktemp("topologies")
    out = {name: TopologyStage(name, text, temp, root / f"{name}.yaml") for name, (text, temp) in DESIGNS.items()}
    text, temp, _ = DIVIDER_CE_DESIGNS[DIVIDER_REFERENCE]
    out[DIVIDER_REFERENCE] = TopologyStage(DIVIDER_REFERENCE, text, temp, root / f"{DIVIDER_REFERENCE}.yaml")
    return out


@pytest.fixture(scope="module")
def lowest_beta(tmp_path_factory):
    root = tmp_path_factory.mktemp("lowest-beta")
    return {name: TopologyStage(name, text, temp, root / f"{name}.yaml", lowest_beta=True)
            for name, (text, temp) in DESIGNS.items()}


# --- design sanity (keeps the comparisons in the intended region) ------------------------
def test_every_topology_has_designs():
    # Source: the task's list of topologies (optimizer/circuit/topologies/__init__.py registers them).
    from optimizer.circuit.topologies import TOPOLOGIES

    for t in TOPOLOGIES:
        if t == "divider-ce":
            continue  # compared in tests/test_vs_ngspice.py
        names = [n for n in DESIGNS if n.startswith(t + "-")]
        assert len(names) >= 2, f"{t}: {names}"


@pytest.mark.parametrize("name", DESIGNS)
def test_every_transistor_is_in_its_active_region(stages, name):
    st = stages[name]
    # Expected: ngspice 39 batch simulation of the exported netlist (VCE from its node voltages).
    vce = {q: st.spice_vce(q) for q in st.transistors}
    assert all(v > 1.5 for v in vce.values()), f"{name}: VCE {vce}; the design should keep every transistor active"


# --- DC ------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", DESIGNS)
def test_operating_point(stages, name):
    st = stages[name]
    op = st.op
    sp = st.spice_small_signal[0]  # expected values: ngspice 39 batch simulation of the exported netlist
    pairs = {f"v({n})": (op.v[n][0], sp[f"v({n})"]) for n in dc_nodes(st.circuit)}
    for q in st.transistors:
        # Ours is in the device's own sense; ngspice's @q[ic] flows into the collector.
        pairs[f"IC {q}"] = (op.ic[q][0], st.sign * sp[f"ic_{q.lower()}"])
    pairs["supply current"] = (op.supply_current[0], sp["i_supply"])
    bad = [k for k, (a, b) in pairs.items() if rel(a, b) > TOL_DC]
    report = "; ".join(f"{k}: ours {a:.6g}, ngspice {b:.6g} ({100 * rel(a, b):.3f} %)" for k, (a, b) in pairs.items())
    assert not bad, f"{name} at {st.temperature_c:g} °C, {', '.join(bad)} disagree: {report}"


@pytest.mark.parametrize("name", DESIGNS)
def test_analysis_reports_every_transistor(stages, name):
    st = stages[name]
    an = analyse(st.design, st.circuit, large_signal=False, worst_case=False)
    sp = st.spice_small_signal[0]  # expected values: ngspice 39 batch simulation of the exported netlist
    volts = {"0": 0.0, "vcc": st.design.supply.nominal}
    lines, bad = [], []
    for q in st.transistors:
        c, b, e = st.circuit.element(q).nodes
        ref = {f"v{t}": volts[n] if n in volts else sp[f"v({n})"] for t, n in (("c", c), ("b", b), ("e", e))}
        ref["ic"] = st.sign * sp[f"ic_{q.lower()}"]
        ref["vce"] = st.spice_vce(q)
        for key, want in ref.items():
            got = an.nominal[f"{key}:{q}"]
            lines.append(f"{key}:{q} ours {got:.6g}, ngspice {want:.6g}")
            if (abs(got - want) > 1e-9) if want == 0 else rel(got, want) > TOL_DC:
                bad.append(f"{key}:{q}")
    # The first transistor keeps its keys without a designator.
    for key in ("vb", "ve", "vc", "ic", "ib", "vce"):
        assert an.nominal[key] == an.nominal[f"{key}:Q1"], key
    assert not bad, f"{name}: {bad}\n" + "\n".join(lines)


# --- 1 kHz gain, impedances, leaks ----------------------------------------------------------
@pytest.mark.parametrize("name", DESIGNS)
def test_midband_gain_and_impedances(stages, name):
    st = stages[name]
    mb = st.ours_midband
    lines, bad = [], []
    for k in range(1, st.design.n_inputs + 1):
        sp = st.spice_small_signal[k - 1]  # expected values: ngspice 39 batch simulation of the exported netlist
        g_db = 20 * math.log10(abs(mb.gain[k - 1, 0]))
        zin = abs(mb.zin[k - 1, 0])
        d_db, e_z = abs(g_db - sp["gain_db"]), rel(zin, sp["zin"])
        lines.append(f"input {k}: gain ours {g_db:.4f} dB, ngspice {sp['gain_db']:.4f} dB (Δ {d_db:.4f} dB); "
                     f"|Zin| ours {zin:.6g} Ω, ngspice {sp['zin']:.6g} Ω ({100 * e_z:.3f} %)")
        if d_db > TOL_GAIN_DB or e_z > TOL_ZIN:
            bad.append(f"input {k}")
    zout, sp_zout = abs(mb.zout[0]), st.spice_zout  # expected: ngspice 39 batch simulation of the exported netlist
    lines.append(f"|Zout| ours {zout:.6g} Ω, ngspice {sp_zout:.6g} Ω ({100 * rel(zout, sp_zout):.3f} %)")
    if rel(zout, sp_zout) > TOL_ZIN:
        bad.append("output impedance")
    assert not bad, f"{name}: {', '.join(bad)} disagree\n" + "\n".join(lines)


@pytest.mark.parametrize("name", MULTI_INPUT)
def test_leak_between_inputs(stages, name):
    st = stages[name]
    mb = st.ours_midband
    n = st.design.n_inputs
    lines, bad = [], []
    for k in range(1, n + 1):
        sp = st.spice_small_signal[k - 1]  # expected values: ngspice 39 batch simulation of the exported netlist
        for j in range(1, n + 1):
            if j == k:
                continue
            ours = 20 * math.log10(mb.crosstalk[k - 1, j - 1, 0])
            d = abs(ours - sp[f"leak_db{j}"])
            lines.append(f"input {k} into jack {j}: ours {ours:.3f} dB, ngspice {sp[f'leak_db{j}']:.3f} dB (Δ {d:.4f})")
            if d > TOL_GAIN_DB:
                bad.append((k, j))
    assert not bad, f"{name}: {bad}\n" + "\n".join(lines)


# --- −3 dB corners -------------------------------------------------------------------------
@pytest.mark.parametrize("name", DESIGNS)
def test_corners(stages, name):
    st = stages[name]
    low, high = st.ours_cutoffs
    ours = {"low": float(low[0, 0]), "high": float(high[0, 0])}
    sp = st.spice_small_signal[0]  # expected values: ngspice 39 batch simulation of the exported netlist
    ref = {"low": sp["f_low"], "high": sp["f_high"]}
    report = "; ".join(f"{k} corner: ours {ours[k]:.6g} Hz, ngspice {ref[k]:.6g} Hz ({100 * rel(ours[k], ref[k]):.3f} %)"
                       for k in ours)
    assert all(rel(ours[k], ref[k]) <= TOL_CORNER for k in ours), f"{name}, input 1: {report}"


# --- what each stage is for ----------------------------------------------------------------
@pytest.mark.parametrize("name", [n for n in DESIGNS if n.startswith("follower-ce-")])
def test_follower_ce_input_impedance_at_lowest_beta(lowest_beta, name):
    st = lowest_beta[name]
    sp = st.spice_small_signal[0]  # expected values: ngspice 39 batch simulation of the exported netlist
    ours = abs(st.ours_midband.zin[0, 0])
    msg = (f"{name} at β {st.circuit.transistors[0].model.beta:g}: |Zin| ngspice {sp['zin']:.6g} Ω, "
           f"ours {ours:.6g} Ω ({100 * rel(ours, sp['zin']):.3f} %)")
    assert sp["zin"] >= ZIN_BUFFER_MIN, msg
    assert rel(ours, sp["zin"]) <= TOL_ZIN, msg


@pytest.mark.parametrize("name", [n for n in DESIGNS if n.startswith("ce-follower-")])
def test_ce_follower_output_impedance(stages, lowest_beta, name):
    lines = []
    for st in (stages[name], lowest_beta[name]):
        sp = st.spice_zout  # expected value: ngspice 39 batch simulation of the exported netlist
        ours = abs(st.ours_midband.zout[0])
        lines.append(f"β {st.circuit.transistors[0].model.beta:g}: |Zout| ngspice {sp:.5g} Ω, ours {ours:.5g} Ω")
        assert sp < ZOUT_BUFFER_MAX, f"{name}: " + "; ".join(lines)
        assert rel(ours, sp) <= TOL_ZIN, f"{name}: " + "; ".join(lines)


@pytest.mark.parametrize("name", ["feedback-ce-9V-2N3904-2in", "cb-sum-9V-2N3904-2in"])
def test_summing_isolation_beats_divider_ce(stages, name):
    st, ref = stages[name], stages[DIVIDER_REFERENCE]
    # Same sources and summing network as the reference (so only the summing node differs).
    assert st.design.sources == ref.design.sources
    for role in ("input_cap", "input_series"):
        assert ([p.value for p in st.design.parts if p.role == role]
                == [p.value for p in ref.design.parts if p.role == role]), role
    lines = []
    for k, j in ((1, 2), (2, 1)):
        # Expected values: ngspice 39 batch simulation of both exported netlists.
        ours_iso = -st.spice_small_signal[k - 1][f"leak_db{j}"]
        ref_iso = -ref.spice_small_signal[k - 1][f"leak_db{j}"]
        lines.append(f"input {k} into jack {j}: isolation {ours_iso:.2f} dB, divider-ce {ref_iso:.2f} dB")
        assert ours_iso >= ref_iso + ISOLATION_GAIN_MIN_DB, f"{name}: " + "; ".join(lines)


# --- the command line ----------------------------------------------------------------------
@pytest.mark.parametrize("name", CLI_DESIGNS)
def test_check_json_reports_every_transistor(stages, capsys, name):
    st = stages[name]
    st.design  # writes the design file
    capsys.readouterr()
    code = main(["check", "--json", str(st.path)])
    out, err = capsys.readouterr()
    assert code == 0, err
    js = json.loads(out)
    assert js["topology"] == st.design.topology
    sp = st.spice_small_signal[0]  # expected values: ngspice 39 batch simulation of the exported netlist
    assert sorted(js["transistors"]) == sorted(st.transistors)
    for q in st.transistors:
        got = js["transistors"][q]
        assert rel(got["vce"], st.spice_vce(q)) <= TOL_DC, (q, got, st.spice_vce(q))
        assert rel(got["ic"], st.sign * sp[f"ic_{q.lower()}"]) <= TOL_DC, (q, got)
        w = js["worst"]["transistors"][q]["vce"]
        assert w["min"] <= got["vce"] <= w["max"], (q, w)
        assert f"vce:{q}" in js["range"] and f"ic:{q}" in js["range"]
    assert [t["ref"] for t in js["ratings"]["transistors"]] == st.transistors
    assert js["ratings"]["transistor"]["ref"] == "Q1"
    assert rel(js["operating_point"]["vce"], st.spice_vce("Q1")) <= TOL_DC


def test_active_region_target_names_the_saturated_transistor(stages, tmp_path):
    """A follower-ce whose gain stage saturates: ngspice shows Q2 below 0.5 V VCE with Q1
    well inside its active region, and the implicit target must fail on Q2."""
    text, temp = DESIGNS["follower-ce-9V-2N5088-guitar"]
    bad = text.replace("{role: gain_collector, value: 4k7}", "{role: gain_collector, value: 47k}")
    st = TopologyStage("follower-ce-saturated", bad, temp, tmp_path / "saturated.yaml")
    # Expected: ngspice 39 batch simulation of the exported netlist.
    assert st.spice_vce("Q2") < 0.5 and st.spice_vce("Q1") > 2.0, (st.spice_vce("Q1"), st.spice_vce("Q2"))
    spec = tmp_path / "spec.yaml"
    spec.write_text("name: s\nsupply: 9 V\nambient: {min: 20 °C, max: 30 °C}\nload: {resistance: 10k}\n"
                    "inputs: [{name: guitar, source_resistance: 10k}]\ntargets: {}\n"
                    "parts: {transistors: [2N5088]}\n", encoding="utf-8")
    an = analyse(st.design, large_signal=False, worst_case=False)
    active = next(t for t in judge(an, load_spec(spec)) if t.name == "active region")
    assert not active.passed and active.corner.startswith("Q2: "), active
    # And its worst VCE is Q2's, which ngspice puts below the limit too.
    assert rel(active.worst, st.spice_vce("Q2")) <= 0.05, (active.worst, st.spice_vce("Q2"))
