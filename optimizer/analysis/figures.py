"""Small-signal figures of a batch: gain, impedances, crosstalk, −3 dB corners, noise.

All from the netlist through :class:`~optimizer.analysis.network.Network`; arrays keep the
batch axis last. Gains are complex ratios from a source's EMF to the load voltage.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..physics import BOLTZMANN, CHARGE
from . import linalg, work
from .network import Network, OperatingPoint, _stamp

__all__ = ["Midband", "Response", "cutoffs", "midband", "noise"]

F_MID = 1000.0
_INV_SQRT2 = 1 / np.sqrt(2.0)
# Coarse grids bracket each corner (3 points a decade); false position in log frequency refines it.
LOW_GRID = np.logspace(-2, 3, 16)  # 0.01 Hz .. 1 kHz
HIGH_GRID = np.logspace(3, 9, 19)  # 1 kHz .. 1 GHz
NOISE_BAND = (20.0, 20e3)


@dataclass
class Midband:
    """Figures at 1 kHz, arrays over the batch (last axis).

    ``gain``: (n_in, B) complex, EMF k → load. ``zin``: (n_in, B) complex impedance at
    input k's jack. ``crosstalk``: (n_in, n_in, B), |voltage at jack j| per volt of EMF k.
    ``zout``: (B,) complex impedance looking back into the output (load removed).
    """

    gain: np.ndarray
    zin: np.ndarray
    crosstalk: np.ndarray
    zout: np.ndarray


def midband(net: Network, op: OperatingPoint, small=None, f: float = F_MID) -> Midband:
    """Gain, input impedance, crosstalk and output impedance at one frequency."""
    n = net.circuit.n_inputs
    ac = net.ac(op, [f], output_impedance=True, small=small)
    out = ac.node(net.circuit.output_node)[:, :, 0]  # (n_exc, B)
    gain = out[:n]
    zin = np.empty((n, op.batch.size), dtype=complex)
    xt = np.zeros((n, n, op.batch.size))
    for k in range(n):
        vs = ac.node(f"src{k + 1}")[:, :, 0]  # (n_exc, B)
        rs = net.value(op.batch, f"RS{k + 1}")
        i = (1.0 - vs[k]) / rs
        zin[k] = vs[k] / i
        xt[:, k] = np.abs(vs[:n])
    for k in range(n):
        xt[k, k] = 0.0
    return Midband(gain, zin, xt, out[n])


class Response:
    """The transfer from every input's EMF to the load, ready to evaluate at any frequency.

    The free-node admittance is Y(s) = G + s·U K Uᵀ, where U K Uᵀ holds every capacitance
    (see :meth:`Network.capacitor_factors`; m columns, one per capacitor branch and two per
    transistor). By the Woodbury identity the gain of input k is

        H_k(s) = h0_k − s · aᵀ (I + s M)⁻¹ c_k,   M = K Uᵀ G⁻¹ U,

    with a = Uᵀ G⁻ᵀ e_out, c_k = K Uᵀ G⁻¹ b_k and h0_k = e_outᵀ G⁻¹ b_k (b_k: the input's
    column of the conductance matrix, negated). G is factored once per design; each
    frequency then costs one m×m solve instead of one of the whole network, and the
    admittance matrix is never built. The identity is exact; tests compare it with the
    direct solve of Y(s).
    """

    def __init__(self, net: Network, op: OperatingPoint, small):
        n, nf, B = net.circuit.n_inputs, net.nf, op.batch.size
        Gd, _ = small
        G = _stamp(net.conductances(op.batch), net.rpairs, net.N) + Gd
        U, K = net.capacitor_factors(op)
        m = U.shape[1]
        cols = [net.index[f"in{k + 1}"] for k in range(n)]
        rhs = np.concatenate([np.broadcast_to(U[:, :, None], (nf, m, B)), -G[:nf, cols]], axis=1)
        X = linalg.solve(G[:nf, :nf], rhs)  # (nf, m + n, B): G⁻¹U, G⁻¹b
        out = net.index[net.circuit.output_node]
        Z = np.einsum("im,ijb->mjb", U, X)  # Uᵀ G⁻¹ [U, b]
        KZ = np.einsum("ijb,jkb->ikb", K, Z)
        self.m, self.n, self.B = m, n, B
        self.M = np.moveaxis(KZ[:, :m], 2, 0)  # (B, m, m)
        self.c = np.moveaxis(KZ[:, m:], 2, 0)  # (B, m, n)
        self.a = X[out, :m].T  # (B, m): e_outᵀ G⁻¹ U
        self.h0 = X[out, m:]  # (n, B)

    def take(self, idx) -> "Response":
        """The same for designs ``idx`` only."""
        r = object.__new__(Response)
        r.m, r.n, r.B = self.m, self.n, len(idx)
        r.M, r.c, r.a, r.h0 = self.M[idx], self.c[idx], self.a[idx], self.h0[:, idx]
        return r

    def poles(self):
        """The response as a sum over poles: H_k(s) = h0_k − s Σ_i r_ik / (1 + s λ_i), with
        M = V Λ V⁻¹ (λ: the time constants, −1/pole) and r_ik = (aᵀV)_i (V⁻¹c_k)_i.

        Returns the evaluator, or None when the decomposition fails for the batch (then only
        the exact solve, :meth:`exact`, is used).
        """
        try:
            lam, V = np.linalg.eig(self.M)  # (B, m), (B, m, m)
            ct = np.linalg.solve(V, self.c.astype(complex))  # (B, m, n)
        except np.linalg.LinAlgError:
            return None
        res = np.einsum("bi,bij->bj", self.a, V)[:, :, None] * ct  # (B, m, n)
        if not (np.all(np.isfinite(res)) and np.all(np.isfinite(lam))):
            return None
        return _PoleForm(self.h0, lam, res)

    def exact(self, freqs) -> np.ndarray:
        """|H_k| (n, B, F) at frequencies (F,) shared by the batch or (B, F) per design."""
        f = np.asarray(freqs, dtype=float)
        f = np.broadcast_to(f, (self.B, f.shape[-1]))
        s = 2j * np.pi * f  # (B, F)
        F = s.shape[1]
        A = np.eye(self.m)[None, None] + s[:, :, None, None] * self.M[:, None]  # (B, F, m, m)
        # The adjoint system (I + sM)ᵀ z = a serves every input with one right-hand side.
        z = work.solve(np.swapaxes(A, 2, 3), np.broadcast_to(self.a[:, None, :, None], (self.B, F, self.m, 1)))
        if not np.all(np.isfinite(z)):
            raise np.linalg.LinAlgError("singular matrix")
        zc = np.einsum("bfm,bmk->kbf", z[..., 0], self.c)
        return np.abs(self.h0[:, :, None] - s[None] * zc)

    def own(self, f: np.ndarray) -> np.ndarray:
        """|gain| (n, B) of input k at its own frequency f[k] (n, B)."""
        return _own(self.exact, f)

    grid = exact


def _own(grid, f: np.ndarray) -> np.ndarray:
    """Input k at its own frequency f[k] (n, B), from a ``grid`` evaluator taking (B, F)
    frequencies: every input at every input's frequency, then the diagonal."""
    g = grid(f.T)  # (n, B, n)
    return np.stack([g[k, :, k] for k in range(f.shape[0])])


class _PoleForm:
    """|H_k| from poles and residues (see :meth:`Response.poles`): a sum, no solve.

    Arrays are kept with the batch axis last (``lam`` (m, B), ``res`` (m, n, B)), so each
    pole's term is one vector operation over the batch and the frequencies.
    """

    def __init__(self, h0, lam, res):
        self.h0 = h0  # (n, B)
        self.lam = np.ascontiguousarray(lam.T)  # (m, B)
        self.res = np.ascontiguousarray(np.moveaxis(res, 0, 2))  # (m, n, B)

    def _sum(self, s: np.ndarray) -> np.ndarray:
        """Σ_i r_ik / (1 + s λ_i) for s broadcastable against (n, B, F)."""
        acc = 0.0
        for lam, res in zip(self.lam, self.res):
            acc = acc + res[..., None] / (1.0 + s * lam[None, :, None])
        return acc

    def grid(self, freqs) -> np.ndarray:
        """(n, B, F) at frequencies (F,) shared by the batch."""
        s = 2j * np.pi * np.asarray(freqs, dtype=float)[None, None, :]
        return np.abs(self.h0[:, :, None] - s * self._sum(s))

    def own(self, f: np.ndarray) -> np.ndarray:
        """(n, B): input k at its own frequency f[k] (n, B)."""
        s = 2j * np.pi * f[:, :, None]
        return np.abs(self.h0 - (s * self._sum(s))[:, :, 0])


class _Direct:
    """|gain| by the direct solve of Y(s), with the evaluator interface of :func:`_corners`."""

    def __init__(self, net, op, small):
        self.net, self.op, self.small = net, op, small

    def grid(self, freqs):
        return _gains(self.net, self.op, self.small, freqs)

    def own(self, f):
        return _own(self.grid, f)


def _gains(net: Network, op: OperatingPoint, small, freqs) -> np.ndarray:
    """|gain| (n_in, B, F) at frequencies (F,) or (B, F), by the direct solve of Y(s).

    By the adjoint: one solve of Yᵀz = e_out per (design, frequency) gives the transfer
    from every node's injected current to the output, so the gain of every input costs
    one right-hand side instead of one each. :class:`Response` gives the same figures
    faster; this is the reference it is tested against.
    """
    Y = net.admittance(op, freqs, small, rows=net.nf)  # (nf, N, B, F)
    nf = net.nf
    e = np.zeros((nf,) + Y.shape[2:], dtype=complex)
    e[net.index[net.circuit.output_node]] = 1.0
    z = linalg.solve(np.swapaxes(Y[:, :nf], 0, 1), e)  # (nf, B, F)
    g = np.empty((net.circuit.n_inputs,) + Y.shape[2:])
    for k in range(net.circuit.n_inputs):
        j = net.index[f"in{k + 1}"]
        g[k] = np.abs(np.einsum("i...,i...->...", z, Y[:, j]))  # the source EMF drives -Y[:, j]
    return g


def cutoffs(net: Network, op: OperatingPoint, small=None, ref=None, steps: int = 10):
    """The −3 dB corners of the whole response of each input (every capacitor at once).

    The reference is the gain at 1 kHz. The low corner is the highest frequency below 1 kHz
    where the gain has fallen 3 dB, the high corner the lowest above; 0 and inf mean the
    response holds within 3 dB from 0.01 Hz and up to 1 GHz.

    A coarse grid brackets each corner and rounds of the Illinois variant of the false-
    position method on log|gain| against log f refine it (the bracket never widens). The
    response comes from the poles and residues of :class:`Response` (one eigen-
    decomposition per design, after which any frequency is a sum over the poles), refined to
    full precision. The pole form of each design is then checked against the exact solve
    at 1 kHz and at both band edges, and a design whose check fails (a nearly defective
    pole set) is done again with the exact solve at every step, ``steps`` rounds (10 reach
    about 1e-9 relative).

    Returns
    -------
    low, high
        (n_in, B) arrays, Hz.
    """
    if ref is None:
        ref = np.abs(midband(net, op, small).gain)
    small = small if small is not None else net.small_signal(op)
    jacks = {net.index[f"in{k + 1}"] for k in range(net.circuit.n_inputs)}
    if any(a in jacks or b in jacks for a, b in net.cpairs):
        # A capacitor on a source's EMF node: the Woodbury form leaves its drive out.
        return _corners(_Direct(net, op, small), ref, steps)
    resp = Response(net, op, small)
    poles = resp.poles()
    if poles is None:
        return _corners(resp, ref, steps)
    lo, hi = _corners(poles, ref, POLE_STEPS)
    # The check: at 1 kHz and at each band edge (input 1's corner, or the grid's end where
    # it has none) the pole form must give every input's gain as the exact solve does.
    f_lo = np.where(lo[0] > 0, lo[0], LOW_GRID[0])
    f_hi = np.where(np.isfinite(hi[0]), hi[0], HIGH_GRID[-1])
    bad = np.any(np.abs(poles.grid([F_MID])[:, :, 0] / ref - 1.0) > CHECK_TOL, axis=0)
    for f in (f_lo, f_hi):
        exact = resp.exact(f[:, None])[:, :, 0]
        each = poles.own(np.broadcast_to(f, ref.shape))  # every input at the one frequency
        bad |= np.any(np.abs(each / np.maximum(exact, 1e-300) - 1.0) > CHECK_TOL, axis=0)
    if bad.any():
        idx = np.nonzero(bad)[0]
        lo_b, hi_b = _corners(resp.take(idx), ref[:, idx], steps)
        lo[:, idx], hi[:, idx] = lo_b, hi_b
    return lo, hi


#: Rounds of false position on the pole form (each costs a sum over the poles, not a solve).
POLE_STEPS = 16
#: The pole form of a design is trusted when it gives every input's gain within this
#: (relative) of the exact solve at 1 kHz and at both band edges; 1e-6 is 9e-6 dB.
CHECK_TOL = 1e-6


def _corners(response, ref: np.ndarray, steps: int):
    """Grid bracket and Illinois refinement of both corners.

    ``response.grid(freqs)`` gives |gain| (n, B, F) at shared frequencies (F,),
    ``response.own(f)`` (n, B) with input k at its own frequency f[k].
    """
    n, B = ref.shape
    target = np.log(_INV_SQRT2)
    out = []
    rows = np.arange(n)[:, None]
    cols = np.arange(B)[None, :]
    for grid, below in ((LOW_GRID, True), (HIGH_GRID, False)):
        g = response.grid(grid) / ref[:, :, None]  # (n, B, F)
        weak = g < _INV_SQRT2
        F = grid.size
        order = np.arange(F - 1, -1, -1) if below else np.arange(F)
        w_ord = weak[:, :, order]
        has = w_ord.any(axis=2)
        idx_weak = order[np.argmax(w_ord, axis=2)]
        idx_strong = np.clip(idx_weak + (1 if below else -1), 0, F - 1)
        # a: the weak end, b: the strong end; h = log(gain) − log(1/√2) (a < 0 ≤ b).
        xa, xb = np.log(grid[idx_weak]), np.log(grid[idx_strong])
        with np.errstate(divide="ignore"):
            ha = np.log(np.maximum(g[rows, cols, idx_weak], 1e-300)) - target
            hb = np.log(np.maximum(g[rows, cols, idx_strong], 1e-300)) - target
        side = np.zeros((n, B), dtype=int)  # which end was kept last time (Illinois)
        for _ in range(steps):
            den = hb - ha
            ok = (den > 0) & (xa != xb)
            with np.errstate(divide="ignore", invalid="ignore"):
                xm = np.where(ok, xa - ha * (xb - xa) / np.where(ok, den, 1.0), 0.5 * (xa + xb))
            # Keep the trial strictly inside the bracket.
            lo_, hi_ = np.minimum(xa, xb), np.maximum(xa, xb)
            span = hi_ - lo_
            xm = np.clip(xm, lo_ + 1e-3 * span, hi_ - 1e-3 * span)
            hm = np.log(np.maximum(response.own(np.exp(xm)) / ref, 1e-300)) - target
            weak_m = hm < 0
            # Replace the end with the same sign; halve the other end's h when it is kept twice.
            xa = np.where(weak_m, xm, xa)
            ha_new = np.where(weak_m, hm, ha)
            xb = np.where(weak_m, xb, xm)
            hb_new = np.where(weak_m, hb, hm)
            kept_b = weak_m  # b survived this round
            hb_new = np.where(kept_b & (side == 1), 0.5 * hb_new, hb_new)
            ha_new = np.where(~kept_b & (side == -1), 0.5 * ha_new, ha_new)
            side = np.where(kept_b, 1, -1)
            ha, hb = ha_new, hb_new
        den = hb - ha
        with np.errstate(divide="ignore", invalid="ignore"):
            xf = np.where(den > 0, xa - ha * (xb - xa) / np.where(den > 0, den, 1.0), 0.5 * (xa + xb))
        xf = np.clip(xf, np.minimum(xa, xb), np.maximum(xa, xb))
        f = np.exp(xf)
        out.append(np.where(has, f, 0.0 if below else np.inf))
    return out[0], out[1]


def noise(net: Network, op: OperatingPoint, small=None, band=NOISE_BAND, points: int = 48):
    """Output noise (V rms) over a band from every resistor's thermal noise and each
    transistor's base and collector shot noise. The load's own resistance is left out (it
    belongs to the next stage); source resistances are in. Returns (B,) arrays:
    (output rms, per-source dict of output rms contributions).
    """
    batch = op.batch
    B = batch.size
    f = np.logspace(np.log10(band[0]), np.log10(band[1]), points)
    small = small if small is not None else net.small_signal(op)
    nf = net.nf
    Y = net.admittance(op, f, small, rows=nf)[:, :nf]  # (nf, nf, B, F)
    out = net.index[net.circuit.output_node]
    e = np.zeros((nf, B, f.size), dtype=complex)
    e[out] = 1.0
    z = linalg.solve(np.swapaxes(Y, 0, 1), e)  # transimpedance from each node to the output

    def zn(i):
        return z[i] if i < nf else np.zeros((B, f.size), dtype=complex)

    kT4 = 4 * BOLTZMANN * batch.temperature[:, None]
    psd = {}
    g = net.conductances(batch)
    for k, (ref, part, a, b) in enumerate(net.rbranch):
        if net.elements[ref].role == "load":
            continue
        name = ref if part == "R" else f"{ref}{'A' if part == 'top' else 'B'}"
        psd[name] = np.abs(zn(a) - zn(b)) ** 2 * kT4 * g[k][:, None]
    for ref, c, b, e_, _ in net.bjts:
        psd[f"{ref} base"] = np.abs(zn(b) - zn(e_)) ** 2 * 2 * CHARGE * np.abs(op.ib[ref])[:, None]
        psd[f"{ref} collector"] = np.abs(zn(c) - zn(e_)) ** 2 * 2 * CHARGE * np.abs(op.ic[ref])[:, None]
    contrib = {k: np.sqrt(np.trapezoid(v, f, axis=1)) for k, v in psd.items()}
    total = np.sqrt(sum(c**2 for c in contrib.values()))
    return total, contrib
