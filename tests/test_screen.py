"""The neighbourhood search's screen, the clip sweep and the worst-corner vertices when a
variant does not converge or a figure does not move.

The reference for each check is the analysis itself: the same designs screened one by one,
the same batch swept without the failing variant. What is checked is that one variant
whose operating point is not found costs only that variant (no batch is raised, split and
run again: before, one such design in a chunk of 256 re-ran the chunk in halves, and how
often that happened differed between processors), and that a change of a figure too small
to have a sign (IEEE 754 double precision rounds at 1.1e-16 of a value) picks no vertex.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from optimizer.analysis import evaluate
from optimizer.analysis.evaluate import analyse
from optimizer.analysis.large_signal import clip_limits
from optimizer.analysis.network import Network
from optimizer.analysis.targets import judge
from optimizer.errors import ConvergenceError
from optimizer.search import local
from optimizer.search.candidates import build_candidates
from optimizer.spec.designfile import load_design
from optimizer.spec.specfile import load_spec

ROOT = Path(__file__).resolve().parent.parent
CABLE = ROOT / "specs" / "long-cable-driver.yaml"


def _lost(monkeypatch, size: int, rows):
    """Make Network.operating_point report ``rows`` of a batch of ``size`` as not converged
    (the solution is left as it is, as ``strict=False`` leaves a variant that failed)."""
    real = Network.operating_point

    def patched(self, batch, *args, **kw):
        if batch.size == size and not kw.get("strict", True):
            op = real(self, batch, *args, **kw)
            conv = np.ones(size, bool) if op.converged is None else op.converged.copy()
            conv[list(rows)] = False
            op.converged = conv
            return op
        return real(self, batch, *args, **kw)

    monkeypatch.setattr(Network, "operating_point", patched)


@pytest.fixture(scope="module")
def screen():
    spec = dataclasses.replace(load_spec(CABLE), topologies=("ce-follower",))
    cands = build_candidates(spec, "ce-follower")
    sc = local._Screen(spec, cands, local.structures(cands)[0], 0)
    rng = np.random.default_rng(3)
    X = np.exp(local._log_uniform(sc, rng, 6))
    return sc, X


@pytest.mark.parametrize("swing", [False, True])
def test_a_design_that_does_not_converge_costs_only_itself(screen, monkeypatch, swing):
    sc, X = screen
    alone = np.array([sc._eval(X[i:i + 1], swing)[0] for i in range(len(X))])
    P = len(sc.points)
    _lost(monkeypatch, len(X) * P, [2 * P + 1])  # one corner of design 3
    calls = []
    real_eval = local._Screen._eval
    monkeypatch.setattr(local._Screen, "_eval", lambda self, X_, s: calls.append(len(X_)) or real_eval(self, X_, s))
    got = sc._chunk(X, swing)
    assert calls == [len(X)], f"the batch was split and run again: {calls}"
    assert got[2] == -np.inf
    keep = [i for i in range(len(X)) if i != 2]
    np.testing.assert_allclose(got[keep], alone[keep], rtol=1e-9, atol=1e-12)


@pytest.fixture(scope="module")
def duo():
    return (load_design(ROOT / "benchmarks" / "designs" / "duo-mixer.yaml"),
            load_spec(ROOT / "specs" / "street-duo-mixer.yaml"))


def test_clip_sweep_without_strict_gives_no_limits_for_a_lost_variant(duo, monkeypatch):
    design, _ = duo
    an = analyse(design, large_signal=False)
    net = Network(an.circuit)
    from optimizer.analysis.network import Batch

    sup = an.conditions.supply
    b = Batch(3, np.array([sup[0], sup[1], sup[2]]), np.full(3, an.conditions.ambient[0]))
    for e in an.circuit.parts:
        if e.kind in ("R", "C", "POT"):
            b.values[e.ref] = np.full(3, e.value)
    for q, (nom, _lo, _hi) in an.conditions.beta.items():
        b.beta[q] = np.full(3, nom)
    op = net.operating_point(b)
    points = 21
    ref = clip_limits(net, op, points=points)
    _lost(monkeypatch, 3 * points, [1 * points + points // 2])  # the quiescent sample of variant 2
    with pytest.raises(ConvergenceError):
        clip_limits(net, op, points=points)
    got = clip_limits(net, op, points=points, strict=False)
    assert np.isnan(got.up[1]) and np.isnan(got.down[1])
    np.testing.assert_array_equal(got.up[[0, 2]], ref.up[[0, 2]])
    np.testing.assert_array_equal(got.down[[0, 2]], ref.down[[0, 2]])


def test_headroom_of_a_stage_with_no_swing_is_judged_not_raised(duo):
    design, spec = duo
    an = analyse(design)
    dead = dataclasses.replace(an, large={**an.large, "swing": 0.0}, large_worst={**an.large_worst, "swing": 0.0})
    res = {t.name: t for t in judge(dead, spec)}
    # No swing at all misses the headroom without end (the margin is ln(0 / 1.26 V)); the
    # nominal level is shown against the smallest swing the judge writes down, 1 pV.
    assert res["headroom"].margin == -np.inf
    assert res["headroom"].value == pytest.approx(20 * np.log10(1e-12 / spec.targets.headroom_nominal))


def test_a_change_too_small_to_have_a_sign_counts_as_none():
    d = np.array([1e-18, -3e-10, 2e-3, np.nan, np.inf, -5e-7])
    np.testing.assert_array_equal(evaluate._signed(d, 1.0), [0.0, 0.0, 2e-3, 0.0, 0.0, -5e-7])
    # A figure at 0 (a gain of 0 dB): rounding of ±1e-16 is no change, 1e-9 dB is one.
    np.testing.assert_array_equal(evaluate._signed(np.array([1e-16, -2e-16, 1e-9]), 0.0), [0.0, 0.0, 1e-9])
