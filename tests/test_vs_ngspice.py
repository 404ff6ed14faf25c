"""Our analysis against ngspice, an independent circuit simulator, on the netlists we export.

Every expected value in this file comes from one source: **ngspice 39 batch simulation of
the netlist ``to_spice`` exports for the design** (the Debian ngspice package). Nothing is
hard-coded: each design below is written to a design file, loaded with ``load_design``,
built, exported and simulated; our figures for the same design are then compared with
ngspice's. The two share only the netlist (element values and the ``.model`` card).

Compared, per design:

* DC operating point: base, collector and emitter voltages, collector current, supply
  current (1 % relative);
* 1 kHz gain of every input, EMF to load, with only that input driven (0.1 dB), and the
  impedance at its jack (2 %);
* the half-power (−3 dB, gain/√2 of the 1 kHz gain) corners of input 1 below and above
  1 kHz (3 %);
* for the large-signal designs: THD at two drive levels from a settled transient with a
  nine-harmonic Fourier analysis (10 % relative where THD > 0.1 %), and the output swing
  at 1 % THD (ngspice driven at the amplitude we find: its THD 1 % ± 10 %, its fundamental
  within 5 % of our swing).

Runs only where ngspice is installed; elsewhere every test skips with the reason.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pytest
import scipy.linalg

import spice_runner
from optimizer.analysis.figures import cutoffs, midband
from optimizer.analysis.large_signal import harmonic_balance, swing_at_thd
from optimizer.analysis.network import Batch, Network
from optimizer.circuit.build import build_circuit
from optimizer.circuit.spice import to_spice
from optimizer.spec.designfile import load_design

pytestmark = [
    pytest.mark.ngspice,
    pytest.mark.skipif(
        spice_runner.find_ngspice() is None,
        reason="ngspice not found: install it (Debian/Ubuntu: apt-get install ngspice) to compare against it",
    ),
]

# Tolerances (relative unless stated).
TOL_DC = 0.01
TOL_GAIN_DB = 0.1
TOL_ZIN = 0.02
TOL_CORNER = 0.03
TOL_THD = 0.10
TOL_SWING = 0.05
THD_FLOOR = 1e-3  # THD is compared only above 0.1 %
THD_LIMIT = 0.01  # the swing is stated at 1 % THD

# Transient for THD: time step, and how many of the slowest time constants to settle for.
TRAN_STEP = 5e-6
SETTLE_TAUS = 12.0
MIN_SETTLE = 0.2  # s

# --- designs ------------------------------------------------------------------------------
# Each: (design file text, simulation temperature °C, whether to run the large-signal checks).
# Values are ordinary audio-stage choices; every one biases the transistor well into its
# active region (VCE above 2.5 V). In the level-pot design the pots and summing resistors
# also load the base at DC (the pots' bottom ends go to ground), hence its stiffer divider.

_HEAD = "topology: divider-ce\nsupply: {supply}\nload: {load}\ntransistor: {transistor}\ninputs: {inputs}\nparts:\n"


def _design(supply, load, transistor, inputs, parts: str) -> str:
    return _HEAD.format(supply=supply, load=load, transistor=transistor, inputs=inputs) + parts


DESIGNS: dict[str, tuple[str, float, bool]] = {
    "9V-2N3904-full-bypass-2in": (_design(
        "9 V", "{resistance: 10k}", "2N3904", "[{source_resistance: 1k}, {source_resistance: 10k}]", """\
  R1: {role: bias_top, value: 56k}
  R2: {role: bias_bottom, value: 10k}
  R3: {role: collector, value: 4k7}
  R5: {role: emitter_bypassed, value: 680}
  C3: {role: bypass_cap, value: 220u}
  C1: {role: input_cap, input: 1, value: 4u7}
  R6: {role: input_series, input: 1, value: 22k}
  C2: {role: input_cap, input: 2, value: 4u7}
  R7: {role: input_series, input: 2, value: 22k}
  C4: {role: output_cap, value: 10u}
"""), 25.0, False),
    "9V-2N3904-partial-bypass-2in-35C": (_design(
        "{nominal: 9 V, min: 7 V, max: 9.6 V}", "{resistance: 10k}", "2N3904",
        "[{source_resistance: 1k}, {source_resistance: 1k}]", """\
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
"""), 35.0, True),
    "12V-BC547B-no-bypass-1in-600R": (_design(
        "12 V", "{resistance: 47k}", "BC547B", "[{source_resistance: 600}]", """\
  R1: {role: bias_top, value: 100k}
  R2: {role: bias_bottom, value: 18k}
  R3: {role: collector, value: 6k8}
  R4: {role: emitter, value: 1k5}
  C1: {role: input_cap, input: 1, value: 2u2}
  R6: {role: input_series, input: 1, value: 1k}
  C4: {role: output_cap, value: 4u7}
"""), 25.0, True),
    "5V-BC549C-partial-bypass-3in-5C": (_design(
        "5 V", "{resistance: 22k}", "BC549C",
        "[{source_resistance: 600}, {source_resistance: 10k}, {source_resistance: 47k}]", """\
  R1: {role: bias_top, value: 47k}
  R2: {role: bias_bottom, value: 12k}
  R3: {role: collector, value: 4k7}
  R4: {role: emitter, value: 100}
  R5: {role: emitter_bypassed, value: 820}
  C3: {role: bypass_cap, value: 220u}
  C1: {role: input_cap, input: 1, value: 1u}
  R6: {role: input_series, input: 1, value: 10k}
  C2: {role: input_cap, input: 2, value: 2u2}
  R7: {role: input_series, input: 2, value: 22k}
  C5: {role: input_cap, input: 3, value: 4u7}
  R8: {role: input_series, input: 3, value: 47k}
  C4: {role: output_cap, value: 10u}
"""), 5.0, False),
    "9V-2N3904-full-bypass-8in-mixer": (_design(
        "9 V", "{resistance: 10k}", "2N3904",
        "[" + ", ".join(f"{{source_resistance: {r}}}" for r in ("600", "1k", "10k", "47k", "600", "10k", "2k2", "47k")) + "]",
        """\
  R1: {role: bias_top, value: 47k}
  R2: {role: bias_bottom, value: 10k}
  R3: {role: collector, value: 3k9}
  R5: {role: emitter_bypassed, value: 1k}
  C3: {role: bypass_cap, value: 100u}
  C4: {role: output_cap, value: 10u}
""" + "".join(
            f"  C{10 + k}: {{role: input_cap, input: {k}, value: 1u}}\n"
            f"  R{10 + k}: {{role: input_series, input: {k}, value: 47k}}\n" for k in range(1, 9))), 25.0, False),
    "12V-BC547B-partial-bypass-3in-level-pots": (_design(
        "12 V", "{resistance: 10k}", "BC547B",
        "[{source_resistance: 10k}, {source_resistance: 10k}, {source_resistance: 600}]", """\
  R1: {role: bias_top, value: 33k}
  R2: {role: bias_bottom, value: 15k}
  R3: {role: collector, value: 8k2}
  R4: {role: emitter, value: 220}
  R5: {role: emitter_bypassed, value: 1k5}
  C3: {role: bypass_cap, value: 100u}
  C1: {role: input_cap, input: 1, value: 1u}
  RV1: {role: level_pot, input: 1, value: 10k, taper: log, position: 1}
  R6: {role: input_series, input: 1, value: 22k}
  C2: {role: input_cap, input: 2, value: 1u}
  RV2: {role: level_pot, input: 2, value: 10k, taper: log, position: 0.5}
  R7: {role: input_series, input: 2, value: 22k}
  C5: {role: input_cap, input: 3, value: 1u}
  RV3: {role: level_pot, input: 3, value: 22k, taper: linear, position: 0.5}
  R8: {role: input_series, input: 3, value: 22k}
  C4: {role: output_cap, value: 10u}
"""), 25.0, False),
    "9V-BC557B-PNP-partial-bypass-2in": (_design(
        "9 V", "{resistance: 10k}", "BC557B", "[{source_resistance: 1k}, {source_resistance: 47k}]", """\
  R1: {role: bias_top, value: 10k}
  R2: {role: bias_bottom, value: 47k}
  R3: {role: collector, value: 3k9}
  R4: {role: emitter, value: 100}
  R5: {role: emitter_bypassed, value: 820}
  C3: {role: bypass_cap, value: 220u}
  C1: {role: input_cap, input: 1, value: 4u7}
  R6: {role: input_series, input: 1, value: 10k}
  C2: {role: input_cap, input: 2, value: 1u}
  R7: {role: input_series, input: 2, value: 47k}
  C4: {role: output_cap, value: 10u}
"""), 25.0, True),
    "9V-2N5088-partial-bypass-load-capacitance": (_design(
        "9 V", "{resistance: 10k, capacitance: 2n2}", "2N5088", "[{source_resistance: 10k}]", """\
  R1: {role: bias_top, value: 100k}
  R2: {role: bias_bottom, value: 15k}
  R3: {role: collector, value: 4k7}
  R4: {role: emitter, value: 47}
  R5: {role: emitter_bypassed, value: 680}
  C3: {role: bypass_cap, value: 100u}
  C1: {role: input_cap, input: 1, value: 2u2}
  R6: {role: input_series, input: 1, value: 10k}
  C4: {role: output_cap, value: 4u7}
"""), 25.0, False),
    "12V-inline-model-no-bypass-2in-35C": (_design(
        "12 V", "{resistance: 22k}",
        "{polarity: npn, is: 1e-14, beta: 200, va: 100, beta_reverse: 2, cjc: 4p, cje: 8p, tf: 0.4n}",
        "[{source_resistance: 600}, {source_resistance: 47k}]", """\
  R1: {role: bias_top, value: 68k}
  R2: {role: bias_bottom, value: 12k}
  R3: {role: collector, value: 10k}
  R4: {role: emitter, value: 2k2}
  C1: {role: input_cap, input: 1, value: 10u}
  R6: {role: input_series, input: 1, value: 4k7}
  C2: {role: input_cap, input: 2, value: 470n}
  R7: {role: input_series, input: 2, value: 100k}
  C4: {role: output_cap, value: 4u7}
"""), 35.0, False),
    "5V-BC547B-full-bypass-1in": (_design(
        "5 V", "{resistance: 10k}", "BC547B", "[{source_resistance: 600}]", """\
  R1: {role: bias_top, value: 33k}
  R2: {role: bias_bottom, value: 8k2}
  R3: {role: collector, value: 2k2}
  R5: {role: emitter_bypassed, value: 470}
  C3: {role: bypass_cap, value: 470u}
  C1: {role: input_cap, input: 1, value: 4u7}
  R6: {role: input_series, input: 1, value: 4k7}
  C4: {role: output_cap, value: 22u}
"""), 25.0, True),
    "12V-BC557B-PNP-full-bypass-1in-5C": (_design(
        "12 V", "{resistance: 22k}", "BC557B", "[{source_resistance: 10k}]", """\
  R1: {role: bias_top, value: 22k}
  R2: {role: bias_bottom, value: 100k}
  R3: {role: collector, value: 4k7}
  R5: {role: emitter_bypassed, value: 1k5}
  C3: {role: bypass_cap, value: 220u}
  C1: {role: input_cap, input: 1, value: 2u2}
  R6: {role: input_series, input: 1, value: 10k}
  C4: {role: output_cap, value: 4u7}
"""), 5.0, True),
    "12V-BC549C-no-bypass-4in-high-impedance": (_design(
        "12 V", "{resistance: 47k}", "BC549C",
        "[{source_resistance: 47k}, {source_resistance: 47k}, {source_resistance: 600}, {source_resistance: 10k}]",
        """\
  R1: {role: bias_top, value: 220k}
  R2: {role: bias_bottom, value: 39k}
  R3: {role: collector, value: 12k}
  R4: {role: emitter, value: 2k7}
  C4: {role: output_cap, value: 2u2}
""" + "".join(
            f"  C{10 + k}: {{role: input_cap, input: {k}, value: 470n}}\n"
            f"  R{10 + k}: {{role: input_series, input: {k}, value: 100k}}\n" for k in range(1, 5))), 25.0, False),
}

LARGE_SIGNAL = [name for name, (_, _, ls) in DESIGNS.items() if ls]


# --- helpers ------------------------------------------------------------------------------
def rel(ours: float, ref: float) -> float:
    return abs(ours - ref) / abs(ref)


def drive_only(netlist: str, k: int, sine_amplitude: float | None = None) -> str:
    """The netlist with only source k driven: AC 1 on VINk (and a 1 kHz sine if asked), the
    other sources at rest (DC 0, no AC)."""
    out = []
    for line in netlist.splitlines():
        m = re.match(r"^(VIN(\d+)) (\S+) (\S+) DC 0 AC 1$", line)
        if m:
            name, j, a, b = m.group(1), int(m.group(2)), m.group(3), m.group(4)
            if j == k:
                line = f"{name} {a} {b} DC 0 AC 1"
                if sine_amplitude is not None:
                    line += f" SIN(0 {sine_amplitude:.9g} 1k)"
            else:
                line = f"{name} {a} {b} DC 0"
        out.append(line)
    text = "\n".join(out) + "\n"
    assert text.count(" AC 1") == 1, f"expected one driven source VIN{k} in:\n{text}"
    return text


@dataclass
class Stage:
    """One design: our analysis of it and ngspice's simulation of its exported netlist."""

    name: str
    text: str
    temperature_c: float
    path: object

    @cached_property
    def design(self):
        self.path.write_text(self.text, encoding="utf-8")
        return load_design(self.path)

    @cached_property
    def circuit(self):
        return build_circuit(self.design)

    @cached_property
    def net(self):
        return Network(self.circuit)

    @cached_property
    def op(self):
        batch = Batch.single(self.circuit, self.design.supply.nominal, 273.15 + self.temperature_c)
        return self.net.operating_point(batch)

    @cached_property
    def sign(self) -> float:
        return self.design.model.sign

    def netlist(self, analyses: list[str]) -> str:
        return to_spice(self.circuit, self.design.supply.nominal, self.temperature_c, title=self.name, analyses=analyses)

    def rs(self, k: int) -> float:
        return self.circuit.element(f"RS{k}").value

    # -- ngspice runs (each once per design) -----------------------------------------------
    @cached_property
    def spice_small_signal(self) -> list[dict[str, float]]:
        """Per input k: 1 kHz gain (dB) and jack impedance; for input 1 also the operating
        point and the half-power corners. Expected values: ngspice 39 batch simulation of
        the exported netlist."""
        results = []
        for k in range(1, self.design.n_inputs + 1):
            # A tight convergence tolerance: with the default (1e-3) the device currents
            # ngspice reports are those of its last Newton iterate, up to 0.2 % off.
            control = [".options reltol=1e-6", ".control"]
            if k == 1:
                control += [
                    "op",
                    "let ic_q1 = @q1[ic]",
                    "let i_supply = -i(vcc)",
                    "print v(b) v(c) v(e) ic_q1 i_supply",
                ]
            control += [
                "ac lin 1 1k 1k",
                "let gain_db = db(v(out))",
                f"let zin = mag(v(src{k}) / ((v(in{k}) - v(src{k})) / {self.rs(k):.9g}))",
                "print gain_db zin",
            ]
            if k == 1:
                # Half-power level: the 1 kHz gain divided by sqrt(2).
                control += [
                    "let level = db(v(out) / sqrt(2))",
                    'set level = "$&level"',
                    "ac dec 400 0.01 1e9",
                    "meas ac f_low when vdb(out)=$level cross=last from=0.01 to=1000",
                    "meas ac f_high when vdb(out)=$level cross=1 from=1000 to=1e9",
                ]
            control += ["quit", ".endc"]
            out = spice_runner.run(drive_only(self.netlist(control), k))
            names = ["gain_db", "zin"]
            if k == 1:
                names += ["v(b)", "v(c)", "v(e)", "ic_q1", "i_supply", "f_low", "f_high"]
            results.append(spice_runner.values(out, *names))
        return results

    def spice_tran(self, amplitude: float) -> spice_runner.Fourier:
        """THD and harmonics at the load for a sine of ``amplitude`` (V peak) on source 1,
        from the last period of a transient long enough for every capacitor to settle.
        Expected values: ngspice 39 batch simulation of the exported netlist."""
        t_stop = self.settle_time
        control = [
            ".options reltol=1e-5",
            ".control",
            f"tran {TRAN_STEP:g} {t_stop:.6g} {t_stop - 0.01:.6g} {TRAN_STEP:g}",
            "fourier 1k v(out)",
            "quit",
            ".endc",
        ]
        out = spice_runner.run(drive_only(self.netlist(control), 1, amplitude))
        (f,) = spice_runner.fourier(out)
        return f

    @cached_property
    def slowest_time_constant(self) -> float:
        """The slowest natural time constant of the linearised circuit (s). It only sets how
        long the transient runs; it is no check value."""
        Y0 = self.net.admittance(self.op, [0.0], rows=self.net.nf)[:, : self.net.nf, 0, 0]
        Y1 = self.net.admittance(self.op, [1 / (2 * math.pi)], rows=self.net.nf)[:, : self.net.nf, 0, 0]
        G, C = Y0.real, Y1.imag
        s = scipy.linalg.eigvals(G, -C)
        s = s[np.isfinite(s)]
        return float(1.0 / np.min(np.abs(s.real)))

    @cached_property
    def settle_time(self) -> float:
        t = max(MIN_SETTLE, SETTLE_TAUS * self.slowest_time_constant)
        assert t < 4.0, f"{self.name}: settling takes {t:.2f} s of simulation; pick smaller coupling capacitors"
        return math.ceil(t / 0.01) * 0.01

    # -- ours -------------------------------------------------------------------------------
    @cached_property
    def ours_midband(self):
        return midband(self.net, self.op)

    @cached_property
    def ours_cutoffs(self):
        return cutoffs(self.net, self.op)

    @cached_property
    def ours_swing(self):
        swing, res = swing_at_thd(self.net, self.op, THD_LIMIT)
        return float(swing[0]), float(res.drive[0])


@pytest.fixture(scope="module")
def stages(tmp_path_factory):
    root = tmp_path_factory.mktemp("designs")
    return {name: Stage(name, text, temp, root / f"{name}.yaml") for name, (text, temp, _) in DESIGNS.items()}


# --- design sanity (keeps the comparisons in the intended region) ------------------------
@pytest.mark.parametrize("name", DESIGNS)
def test_design_is_in_active_region(stages, name):
    st = stages[name]
    op = st.op
    vce = st.sign * (op.v["c"][0] - op.v.get("e", op.v["0"])[0])
    assert vce > 2.5, f"{name}: VCE {vce:.2f} V; the design should bias the transistor in its active region"


# --- DC ------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", DESIGNS)
def test_operating_point(stages, name):
    st = stages[name]
    op = st.op
    sp = st.spice_small_signal[0]  # expected values: ngspice 39 batch simulation of the exported netlist
    pairs = {
        "v(b)": (op.v["b"][0], sp["v(b)"]),
        "v(c)": (op.v["c"][0], sp["v(c)"]),
        "v(e)": (op.v["e"][0], sp["v(e)"]),
        # Our collector current is in the device's own sense (positive when conducting);
        # ngspice's @q1[ic] flows into the collector, negative for a PNP.
        "collector current": (op.ic["Q1"][0], st.sign * sp["ic_q1"]),
        "supply current": (op.supply_current[0], sp["i_supply"]),
    }
    bad = [k for k, (a, b) in pairs.items() if rel(a, b) > TOL_DC]
    report = "; ".join(f"{k}: ours {a:.6g}, ngspice {b:.6g} ({100 * rel(a, b):.3f} %)" for k, (a, b) in pairs.items())
    assert not bad, f"{name} at {st.temperature_c:g} °C, {', '.join(bad)} disagree: {report}"


# --- 1 kHz gain and input impedance --------------------------------------------------------
@pytest.mark.parametrize("name", DESIGNS)
def test_midband_gain_and_input_impedance(stages, name):
    st = stages[name]
    mb = st.ours_midband
    lines, bad = [], []
    for k in range(1, st.design.n_inputs + 1):
        sp = st.spice_small_signal[k - 1]  # expected values: ngspice 39 batch simulation of the exported netlist
        g_db = 20 * math.log10(abs(mb.gain[k - 1, 0]))
        zin = abs(mb.zin[k - 1, 0])
        d_db = abs(g_db - sp["gain_db"])
        e_z = rel(zin, sp["zin"])
        lines.append(f"input {k}: gain ours {g_db:.4f} dB, ngspice {sp['gain_db']:.4f} dB (Δ {d_db:.4f} dB); "
                     f"|Zin| ours {zin:.6g} Ω, ngspice {sp['zin']:.6g} Ω ({100 * e_z:.3f} %)")
        if d_db > TOL_GAIN_DB or e_z > TOL_ZIN:
            bad.append(k)
    assert not bad, f"{name}: inputs {bad} disagree\n" + "\n".join(lines)


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


# --- THD and swing -------------------------------------------------------------------------
@pytest.mark.slow
@pytest.mark.parametrize("name", LARGE_SIGNAL)
def test_thd(stages, name):
    st = stages[name]
    _, drive_1pct = st.ours_swing
    # Two drive levels below the 1 % point (chosen from our swing search; only the levels,
    # not the expected values, come from our side).
    compared, lines, bad = 0, [], []
    for frac in (0.35, 0.7):
        amp = frac * drive_1pct
        ours = harmonic_balance(st.net, st.op, 1, amp)
        sp = st.spice_tran(amp)  # expected values: ngspice 39 batch simulation of the exported netlist
        e = rel(float(ours.thd[0]), sp.thd)
        lines.append(f"drive {amp * 1e3:.4g} mV: THD ours {100 * ours.thd[0]:.4f} %, ngspice {100 * sp.thd:.4f} % "
                     f"({100 * e:.2f} %); fundamental ours {ours.fundamental[0]:.5g} V, ngspice {sp.fundamental:.5g} V")
        if sp.thd > THD_FLOOR:
            compared += 1
            if e > TOL_THD:
                bad.append(amp)
    msg = f"{name} (settled {st.settle_time:.2f} s):\n" + "\n".join(lines)
    assert compared >= 1, f"no drive level reached THD above {100 * THD_FLOOR:g} %: {msg}"
    assert not bad, msg


@pytest.mark.slow
@pytest.mark.parametrize("name", LARGE_SIGNAL)
def test_swing_at_1pct_thd(stages, name):
    st = stages[name]
    swing, drive = st.ours_swing
    sp = st.spice_tran(drive)  # expected values: ngspice 39 batch simulation of the exported netlist
    msg = (f"{name}: at our 1 % drive {drive * 1e3:.5g} mV ngspice gives THD {100 * sp.thd:.4f} % "
           f"and fundamental {sp.fundamental:.5g} V peak; our swing {swing:.5g} V peak "
           f"({100 * rel(swing, sp.fundamental):.2f} %)")
    assert rel(sp.thd, THD_LIMIT) <= TOL_THD, msg
    assert rel(swing, sp.fundamental) <= TOL_SWING, msg
