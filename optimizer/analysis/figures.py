"""Small-signal figures of a batch: gain, impedances, crosstalk, −3 dB corners, noise.

All from the netlist through :class:`~optimizer.analysis.network.Network`; arrays keep the
batch axis last. Gains are complex ratios from a source's EMF to the load voltage.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..physics import BOLTZMANN, CHARGE
from . import linalg
from .network import Network, OperatingPoint

__all__ = ["Midband", "cutoffs", "midband", "noise"]

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


def _gains(net: Network, op: OperatingPoint, small, freqs) -> np.ndarray:
    """|gain| (n_in, B, F) at frequencies (F,) or (B, F).

    By the adjoint: one solve of Yᵀz = e_out per (design, frequency) gives the transfer
    from every node's injected current to the output, so the gain of every input costs
    one right-hand side instead of one each.
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

    A coarse grid brackets each corner; ``steps`` rounds of the Illinois variant of the
    false-position method on log|gain| against log f refine it (the bracket never widens,
    and 10 rounds reach about 1e-9 relative on these responses).

    Returns
    -------
    low, high
        (n_in, B) arrays, Hz.
    """
    n, B = net.circuit.n_inputs, op.batch.size
    if ref is None:
        ref = np.abs(midband(net, op, small).gain)
    small = small if small is not None else net.small_signal(op)
    target = np.log(_INV_SQRT2)
    out = []
    rows = np.arange(n)[:, None]
    cols = np.arange(B)[None, :]
    for grid, below in ((LOW_GRID, True), (HIGH_GRID, False)):
        g = _gains(net, op, small, grid) / ref[:, :, None]  # (n, B, F)
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
            gm = _gains(net, op, small, np.exp(xm).T)  # (n_in, B, n): column k refines input k
            gk = np.stack([gm[k, :, k] for k in range(n)]) / ref
            hm = np.log(np.maximum(gk, 1e-300)) - target
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
