"""The mixing figures of a four-input stage against ngspice.

Every expected value in this file comes from one source: **ngspice 39 batch simulation (the
Debian ngspice package) of the netlist ``to_spice`` exports** for the design with its level
controls at the rotation in question. Our figures come from
:func:`optimizer.analysis.mixing.mixing` on the same design; the two share only the netlist.

The design: a divider-ce mixer with four inputs whose sources are 600 Ω, 4.7 kΩ, 22 kΩ and
47 kΩ (the spread issue 6 names), each with a log level pot and a summing resistor into the
base. Compared, at 1 kHz and nominal conditions, with every other source connected:

* each input's gain (EMF to load) at its control's minimum, middle and maximum rotation,
  the others at maximum (0.1 dB; at the minimum, where the pot passes only what its end
  resistance lets through, 0.5 dB);
* the impedance each source sees at each of those rotations (2 %);
* the isolation: input k's EMF at input j's jack, dB below it, every pair (0.1 dB);
* the interaction: how far input j's gain moves when input k's control goes from maximum to
  minimum, every pair (0.02 dB absolute: these are fractions of a dB).

Tolerances: 0.1 dB and 2 % as tests/test_vs_ngspice.py (common practice, no source); 0.5 dB
at a control's minimum and 0.02 dB on the interaction are ours (common practice, no source).
"""

from __future__ import annotations

import pytest

import spice_runner
from optimizer.analysis.mixing import mixing
from optimizer.circuit.build import build_circuit
from optimizer.circuit.spice import to_spice
from optimizer.spec.designfile import load_design
from test_vs_ngspice import TOL_GAIN_DB, TOL_ZIN, drive_only, rel

pytestmark = [
    pytest.mark.ngspice,
    pytest.mark.skipif(
        spice_runner.find_ngspice() is None,
        reason="ngspice not found: install it (Debian/Ubuntu: apt-get install ngspice) to compare against it",
    ),
]

TOL_MIN_DB = 0.5
TOL_INTERACTION_DB = 0.02
SOURCES = (600.0, 4.7e3, 22e3, 47e3)
TEMPERATURE_C = 25.0

DESIGN = """\
topology: divider-ce
supply: {nominal: 9 V, min: 8 V, max: 9.6 V}
ambient: 25 °C
load: {resistance: 10k}
transistor: 2N3904
inputs: [{source_resistance: 600, name: mic}, {source_resistance: 4k7, name: synth},
         {source_resistance: 22k, name: guitar}, {source_resistance: 47k, name: piezo}]
parts:
  R1: {role: bias_top, value: 47k}
  R2: {role: bias_bottom, value: 10k}
  R3: {role: collector, value: 2k2}
  R4: {role: emitter, value: 220}
  R5: {role: emitter_bypassed, value: 820}
  C5: {role: bypass_cap, value: 100u}
  C6: {role: output_cap, value: 10u}
"""
for _k in range(1, 5):
    DESIGN += (f"  C{_k}: {{role: input_cap, input: {_k}, value: 10u}}\n"
               f"  RV{_k}: {{role: level_pot, input: {_k}, value: 10k, taper: log, position: {{pos{_k}}}}}\n"
               f"  R{5 + _k}: {{role: input_series, input: {_k}, value: 10k}}\n")


def _design(tmp_path, positions: dict[int, float]):
    text = DESIGN
    for k in range(1, 5):
        text = text.replace(f"{{pos{k}}}", f"{positions.get(k, 1.0):g}")
    path = tmp_path / ("mix-" + "-".join(f"{positions.get(k, 1.0):g}" for k in range(1, 5)) + ".yaml")
    path.write_text(text, encoding="utf-8")
    return load_design(path)


def _spice(design) -> dict[int, dict[str, float]]:
    """Per driven input k: gain (dB), the impedance at jack k, and |v(src j)| in dB for every
    other jack j. Expected values: ngspice 39 batch simulation of the exported netlist."""
    circuit = build_circuit(design)
    out = {}
    for k in range(1, 5):
        names = ["gain_db", "zin"] + [f"leak_db{j}" for j in range(1, 5) if j != k]
        control = [".control", "ac lin 1 1k 1k", "let gain_db = db(v(out))",
                   f"let zin = mag(v(src{k}) / ((v(in{k}) - v(src{k})) / {SOURCES[k - 1]:.9g}))"]
        control += [f"let leak_db{j} = db(v(src{j}))" for j in range(1, 5) if j != k]
        control += ["print " + " ".join(names), "quit", ".endc"]
        text = to_spice(circuit, design.supply.nominal, TEMPERATURE_C, title="mix", analyses=control)
        out[k] = spice_runner.values(spice_runner.run(drive_only(text, k)), *names)
    return out


@pytest.fixture(scope="module")
def figures(tmp_path_factory):
    """Ours (mixing() on the all-at-maximum design) and ngspice's, per rotation variant."""
    tmp = tmp_path_factory.mktemp("mixing")
    d = _design(tmp, {})
    ours = mixing(build_circuit(d), d.supply.nominal, 273.15 + TEMPERATURE_C, d.input_names)
    spice = {(None, "max"): _spice(d)}
    for k in range(1, 5):
        for label, pos in (("min", 0.0), ("mid", 0.5)):
            spice[(k, label)] = _spice(_design(tmp, {k: pos}))
    return {r["input"]: r for r in ours["inputs"]}, spice


def test_the_sources_span_600_ohm_to_47_kohm():
    d = load_design_text()
    assert tuple(d.sources) == SOURCES


def load_design_text():
    import tempfile
    from pathlib import Path

    with tempfile.TemporaryDirectory() as t:
        return _design(Path(t), {})


def test_gain_at_every_rotation(figures):
    ours, spice = figures
    lines, bad = [], []
    for k in range(1, 5):
        for label in ("min", "mid", "max"):
            sp = spice[(None, "max") if label == "max" else (k, label)][k]["gain_db"]
            mine = ours[k]["gain_db"][label]
            assert mine is not None, f"input {k} at {label}: reported off, ngspice {sp:.2f} dB"
            tol = TOL_MIN_DB if label == "min" else TOL_GAIN_DB
            lines.append(f"input {k} {label}: ours {mine:.3f} dB, ngspice {sp:.3f} dB")
            if abs(mine - sp) > tol:
                bad.append(lines[-1])
    assert not bad, "\n".join(bad)
    # The control does what it says: min < mid < max for every input.
    for k in range(1, 5):
        g = ours[k]["gain_db"]
        assert g["min"] < g["mid"] < g["max"]


def test_input_impedance_at_every_rotation(figures):
    ours, spice = figures
    bad = []
    for k in range(1, 5):
        for label in ("min", "mid", "max"):
            sp = spice[(None, "max") if label == "max" else (k, label)][k]["zin"]
            mine = ours[k]["input_impedance"][label]
            if rel(mine, sp) > TOL_ZIN:
                bad.append(f"input {k} {label}: ours {mine:.1f} Ω, ngspice {sp:.1f} Ω")
    assert not bad, "\n".join(bad)


def test_isolation_between_every_pair(figures):
    ours, spice = figures
    bad = []
    for k in range(1, 5):
        for j in range(1, 5):
            if j == k:
                continue
            sp = -spice[(None, "max")][k][f"leak_db{j}"]
            mine = ours[k]["isolation_db"][str(j)]
            if abs(mine - sp) > TOL_GAIN_DB:
                bad.append(f"input {k} at jack {j}: ours {mine:.3f} dB down, ngspice {sp:.3f} dB down")
    assert not bad, "\n".join(bad)
    # Resistors summed into one base do not isolate much: a low-impedance source's jack
    # barely moves, a high-impedance one's follows the summing node (ngspice's own figures).
    assert spice[(None, "max")][4]["leak_db1"] < spice[(None, "max")][1]["leak_db4"]


def test_interaction_between_every_pair(figures):
    ours, spice = figures
    bad = []
    for j in range(1, 5):
        for k in range(1, 5):
            if j == k:
                continue
            sp = spice[(k, "min")][j]["gain_db"] - spice[(None, "max")][j]["gain_db"]
            mine = ours[j]["interaction_db"][str(k)]
            if abs(mine - sp) > TOL_INTERACTION_DB:
                bad.append(f"input {j} when {k} goes to minimum: ours {mine:+.4f} dB, ngspice {sp:+.4f} dB")
    assert not bad, "\n".join(bad)
