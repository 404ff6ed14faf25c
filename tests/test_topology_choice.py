"""Two specs the single common-emitter stage cannot meet: proved, and met by another stage.

The specs are bundled examples (invented scenarios):

* ``specs/piezo-pickup-preamp.yaml``: at least 1 MΩ input impedance at 9 V, resistors up to
  470 kΩ. A divider-ce stage shows a source its summing resistor in series with the bias
  divider, itself in parallel with the base (plus the input capacitor's reactance): at most
  470 kΩ + 470 kΩ ∥ 470 kΩ = 705 kΩ before tolerances, so never 1 MΩ (common practice, no
  source). A bootstrapped follower multiplies its bias resistor by 1/(1 − its gain).
* ``specs/long-cable-driver.yaml``: under 1 kΩ output impedance into 10 kΩ ∥ 1 nF on
  1.5 mA. A divider-ce stage's output impedance is about its collector resistor, and the
  upward swing is at most the collector current times that resistor in parallel with the
  load (common practice, no source): under 1 kΩ and 1.5 mA, less than the 1.26 V peak that
  −10 dBV with 9 dB of headroom needs.

For each: with the topology pinned to divider-ce the search proves the spec infeasible (twice,
presolve off and on) and names the conflicting targets; pinned to the stage made for the job
(follower-ce, ce-follower) it reports a verified design, whose exported netlist ngspice
(Debian's package, outside our analysis) simulates with every transistor at the lowest β of its
type, at the lowest supply and the coldest ambient of the spec: the input impedance is at
least 1 MΩ, the output impedance (load removed) under 1 kΩ.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

import spice_runner
from optimizer.outputs.designfile_out import design_yaml
from optimizer.search.solve import search
from optimizer.spec.specfile import load_spec
from test_topologies_vs_ngspice import TopologyStage

ROOT = Path(__file__).resolve().parent.parent
PIEZO = ROOT / "specs" / "piezo-pickup-preamp.yaml"
CABLE = ROOT / "specs" / "long-cable-driver.yaml"
#: Seconds of the search's clock for a pinned search to find its first verified design. The
#: clock counts work and the tests lift the wall bound, but the count is not quite the same
#: on every processor (README, "Known limits": the analysis' loops iterate until their last
#: point converges, which turns on the last bits of the figures), so each limit has room on
#: both machines measured. On the development machine follower-ce verified its first
#: passing design after about 62 s with a 150 s limit and passed with 90 (65 was not
#: enough); on a second machine (AMD EPYC, AVX-512) 90 found nothing, 150 passed (118.7 s of
#: work in all). ce-follower found one given 25 and 45 on the first; on the second 25 found
#: nothing, 45 and 60 passed (37.3 s of work).
TIME_LIMIT = {"follower-ce": 150.0, "ce-follower": 45.0}


def _pinned(path: Path, topology: str):
    return dataclasses.replace(load_spec(path), topologies=(topology,))


@pytest.mark.parametrize("path, targets", [(PIEZO, {"input impedance"}), (CABLE, {"headroom", "output impedance"})],
                         ids=["piezo-1M", "cable-1k"])
def test_divider_ce_is_proved_unable(path, targets):
    r = search(_pinned(path, "divider-ce"), time_limit=60.0, wall_limit=None)
    assert r.status == "infeasible", f"{path.name}: divider-ce {r.status}; notes: {r.notes}"
    assert any("proved infeasible twice" in n for n in r.notes), r.notes
    named = {c.target for c in r.conflicts}
    assert targets <= named, f"{path.name}: conflict names {named}, expected {targets}: {[c.text for c in r.conflicts]}"


def _designed_stage(tmp_path, path: Path, topology: str) -> tuple[object, TopologyStage]:
    """The spec pinned to ``topology``, and its reported design written as a design file at
    the spec's lowest supply and coldest ambient with every transistor at its type's lowest β."""
    spec = _pinned(path, topology)
    r = search(spec, top=1, time_limit=TIME_LIMIT[topology], wall_limit=None)
    assert r.designs and r.designs[0].margin >= 0, f"{topology}: {r.status}; notes: {r.notes}"
    v = r.designs[0]
    design = dataclasses.replace(v.design, supply=dataclasses.replace(v.design.supply, nominal=spec.supply.min))
    name = f"{path.stem}-{topology}"
    st = TopologyStage(name, design_yaml(design), spec.ambient.min - 273.15, tmp_path / f"{name}.yaml",
                       lowest_beta=True)
    return spec, st


needs_ngspice = pytest.mark.skipif(
    spice_runner.find_ngspice() is None,
    reason="ngspice not found: install it (Debian/Ubuntu: apt-get install ngspice) to simulate the designs",
)


@pytest.mark.slow
@pytest.mark.ngspice
@needs_ngspice
def test_follower_ce_meets_1_megohm_in_ngspice(tmp_path):
    spec, st = _designed_stage(tmp_path, PIEZO, "follower-ce")
    zin = st.spice_small_signal[0]["zin"]  # expected: ngspice 39 batch simulation of the exported netlist
    assert zin >= spec.targets.input_impedance_min, f"ngspice: input impedance {zin:.4g} Ω at the lowest β"


@pytest.mark.slow
@pytest.mark.ngspice
@needs_ngspice
def test_ce_follower_drives_the_cable_under_1_kilohm_in_ngspice(tmp_path):
    spec, st = _designed_stage(tmp_path, CABLE, "ce-follower")
    zout = st.spice_zout  # expected: ngspice 39 batch simulation of the exported netlist
    assert zout < spec.targets.output_impedance_max, f"ngspice: output impedance {zout:.4g} Ω at the lowest β"
