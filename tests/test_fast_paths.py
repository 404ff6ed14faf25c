"""The analysis' fast paths against its direct ones, on every topology.

The direct paths are what tests/test_vs_ngspice.py and tests/test_topologies_vs_ngspice.py
check against ngspice: the AC response by solving the whole network at each frequency, the
output impedance by solving with the load removed, the corners by searching that response.
The fast paths restate them with exact algebra, so they must agree to rounding:

* the response through the capacitor subspace (the Woodbury identity) and its poles and
  residues (an eigen-decomposition), :class:`optimizer.analysis.figures.Response`;
* the output impedance by the Sherman–Morrison formula (the load is a rank-one change);
* Cramer's rule for systems of one to three unknowns;
* the Monte Carlo on several threads, and its large signal with 10 harmonics.

The identities are those of any linear-algebra text (Golub & Van Loan, *Matrix
Computations*, 4th ed., §2.1.4 for Sherman–Morrison–Woodbury; from memory). The designs
are those of the two ngspice test files, each spread over a wide random batch: every
resistor and capacitor scaled by up to e (2.7×) either way, β anywhere in its range, the
supply and temperature at their ends.
"""

from __future__ import annotations

import numpy as np
import pytest

from optimizer.analysis import figures as fig
from optimizer.analysis import linalg
from optimizer.analysis.evaluate import analyse
from optimizer.analysis.large_signal import swing_at_thd
from optimizer.analysis.montecarlo import monte_carlo
from optimizer.analysis.network import Batch, Network
from optimizer.spec.designfile import load_design
from test_topologies_vs_ngspice import DESIGNS as TOPOLOGY_DESIGNS
from test_vs_ngspice import DESIGNS as DIVIDER_DESIGNS

TEXTS = {name: text for name, (text, *_rest) in {**DIVIDER_DESIGNS, **TOPOLOGY_DESIGNS}.items()}
#: Agreement of two exact forms of the same quantity (relative): rounding only.
TOL_EXACT = 1e-6
#: Corners: the pole form is trusted to 1e-6 in gain (figures.CHECK_TOL), which moves a
#: corner by that over the response's slope there (about 0.5 in log-log at −3 dB).
TOL_CORNER = 1e-5


@pytest.fixture(scope="module")
def designs(tmp_path_factory):
    root = tmp_path_factory.mktemp("fast-paths")
    out = {}
    for name, text in TEXTS.items():
        path = root / f"{name}.yaml"
        path.write_text(text, encoding="utf-8")
        out[name] = analyse(load_design(path), large_signal=False)
    return out


def _spread(an, n: int = 300, seed: int = 5) -> tuple[Network, Batch]:
    """A wide random batch around a design (see the module docstring)."""
    rng = np.random.default_rng(seed)
    circuit, cond = an.circuit, an.conditions
    b = Batch(n, rng.choice([cond.supply[1], cond.supply[2]], n), rng.choice([cond.ambient[1], cond.ambient[2]], n))
    for e in circuit.parts:
        if e.kind in ("R", "C", "POT"):
            b.values[e.ref] = e.value * np.exp(rng.uniform(-1.0, 1.0, n))
        if e.kind == "POT":
            b.positions[e.ref] = rng.uniform(0.05, 1.0, n)
    for q, (_nom, lo, hi) in cond.beta.items():
        b.beta[q] = rng.uniform(lo, hi, n)
    return Network(circuit), b


def _solved(net: Network, b: Batch):
    op = net.operating_point(b, strict=False)
    keep = np.ones(b.size, bool) if op.converged is None else op.converged
    op = net.operating_point(b.take(keep))
    return op, net.small_signal(op)


@pytest.mark.parametrize("name", TEXTS)
def test_capacitor_factors_rebuild_the_capacitance_matrix(designs, name):
    net, b = _spread(designs[name], 50)
    op, small = _solved(net, b)
    U, K = net.capacitor_factors(op)
    ours = np.einsum("im,mkb,jk->ijb", U, K, U)
    # The capacitance matrix is the admittance's imaginary part at ω = 1 rad/s.
    direct = net.admittance(op, [1.0 / (2 * np.pi)], small, rows=net.nf)[:, : net.nf, :, 0].imag
    assert np.allclose(ours, direct, rtol=1e-12, atol=1e-12 * np.max(np.abs(direct)))


@pytest.mark.parametrize("name", TEXTS)
def test_response_through_the_capacitors_equals_the_direct_solve(designs, name):
    net, b = _spread(designs[name])
    op, small = _solved(net, b)
    freqs = np.concatenate([fig.LOW_GRID, fig.HIGH_GRID])
    direct = fig._gains(net, op, small, freqs)
    resp = fig.Response(net, op, small)
    err = np.abs(resp.exact(freqs) / direct - 1.0)
    assert err.max() < TOL_EXACT, f"{name}: Woodbury form off by {err.max():.2e} at worst"
    poles = resp.poles()
    assert poles is not None, f"{name}: the eigen-decomposition failed for the whole batch"
    err_p = np.abs(poles.grid(freqs) / direct - 1.0)
    # A nearly defective pole set may be off; cutoffs() checks each design and redoes those.
    assert np.median(err_p) < TOL_EXACT, f"{name}: pole form off by {np.median(err_p):.2e} (median)"


def _same_corners(a, b, tol=TOL_CORNER):
    both_inf = np.isinf(a) & np.isinf(b)
    both_zero = (a == 0) & (b == 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        close = np.abs(a / b - 1.0) < tol
    return both_inf | both_zero | close


@pytest.mark.parametrize("name", TEXTS)
def test_corners_from_the_poles_equal_the_direct_search(designs, name):
    net, b = _spread(designs[name])
    op, small = _solved(net, b)
    ref = np.abs(fig.midband(net, op, small).gain)
    lo, hi = fig.cutoffs(net, op, small, ref=ref)
    # The direct search: the whole network solved at every grid point and every step.
    lo0, hi0 = fig._corners(fig._Direct(net, op, small), ref, 30)
    assert _same_corners(lo, lo0).all(), f"{name}: low corners differ, worst {np.nanmax(np.abs(lo / lo0 - 1)):.2e}"
    assert _same_corners(hi, hi0).all(), f"{name}: high corners differ, worst {np.nanmax(np.abs(hi / hi0 - 1)):.2e}"


def test_a_wrong_pole_form_is_caught_and_redone(designs, monkeypatch):
    """Residues spoiled for every other design: the check must find them and the exact
    search must give their corners."""
    an = designs["9V-2N3904-full-bypass-2in"]
    net, b = _spread(an, 40)
    op, small = _solved(net, b)
    ref = np.abs(fig.midband(net, op, small).gain)
    good = fig.Response.poles

    def spoiled(self):
        pf = good(self)
        pf.res = pf.res.copy()
        pf.res[:, :, ::2] *= 1.01
        return pf

    exact = fig._corners(fig.Response(net, op, small), ref, 30)
    monkeypatch.setattr(fig.Response, "poles", spoiled)
    lo, hi = fig.cutoffs(net, op, small, ref=ref)
    assert _same_corners(lo, exact[0]).all() and _same_corners(hi, exact[1]).all()


@pytest.mark.parametrize("name", TEXTS)
def test_output_impedance_by_sherman_morrison_equals_removing_the_load(designs, name):
    net, b = _spread(designs[name], 100)
    op, small = _solved(net, b)
    ours = fig.midband(net, op, small).zout
    Y = net.admittance(op, [fig.F_MID], small, rows=net.nf)[:, : net.nf, :, 0]
    out = net.index[net.circuit.output_node]
    w = 2 * np.pi * fig.F_MID
    for e in net.circuit.elements:
        if e.role == "load":
            Y[out, out] -= 1.0 / net.value(op.batch, e.ref)
        elif e.role == "load_cap":
            Y[out, out] -= 1j * w * net.value(op.batch, e.ref)
    e_out = np.zeros((net.nf, op.batch.size), complex)
    e_out[out] = 1.0
    direct = np.linalg.solve(np.moveaxis(Y, 2, 0), np.moveaxis(e_out, 1, 0)[..., None])[:, out, 0]
    assert np.max(np.abs(ours / direct - 1.0)) < TOL_EXACT


@pytest.mark.parametrize("n", [1, 2, 3])
@pytest.mark.parametrize("dtype", [float, complex])
def test_cramer_small_systems_equal_lapack(n, dtype):
    rng = np.random.default_rng(n)
    A = rng.normal(size=(n, n, 200)) + 3 * np.eye(n)[:, :, None]
    if dtype is complex:
        A = A + 1j * rng.normal(size=A.shape)
    b = rng.normal(size=(n, 2, 200))
    ours = linalg.solve(A, b)
    ref = np.moveaxis(np.linalg.solve(np.moveaxis(A, 2, 0), np.moveaxis(b, 2, 0)), 0, 2)
    assert np.max(np.abs(ours - ref)) < 1e-12 * np.max(np.abs(ref))
    assert np.allclose(linalg.solve(A, b[:, 0]), ref[:, 0], rtol=1e-12, atol=1e-12)


def test_cramer_reports_a_singular_system():
    A = np.zeros((3, 3, 4))
    A[:, :, :] = np.eye(3)[:, :, None]
    A[2, :, 1] = A[1, :, 1]  # two equal rows in one of the four
    with pytest.raises(np.linalg.LinAlgError):
        linalg.solve(A, np.ones((3, 4)))


def test_monte_carlo_does_not_depend_on_the_thread_count(designs):
    an = designs["9V-2N3904-full-bypass-2in"]
    one = monte_carlo(an.design, an.circuit, an.conditions, 400, seed=3, large_samples=60, workers=1)
    two = monte_carlo(an.design, an.circuit, an.conditions, 400, seed=3, large_samples=60, workers=2)
    assert one == two


def test_monte_carlo_swing_with_ten_harmonics_is_within_1pct_of_twenty(designs):
    an = designs["9V-2N3904-full-bypass-2in"]
    net, b = _spread(an, 24, seed=11)
    op = net.operating_point(b)
    s10, _ = swing_at_thd(net, op, 0.01, H=10)
    s20, _ = swing_at_thd(net, op, 0.01, H=20)
    ok = np.isfinite(s10) & np.isfinite(s20)
    assert ok.sum() >= 20
    assert np.max(np.abs(s10[ok] / s20[ok] - 1.0)) < 0.01
