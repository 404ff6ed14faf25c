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
# Coarse grids bracket each corner (3 points a decade); bisection in log frequency refines it.
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
    """|gain| (n_in, B, F) at frequencies (F,) or (B, F)."""
    ac = net.ac(op, freqs, small=small)
    out = ac.node(net.circuit.output_node)  # (n_exc, B, F)
    return np.abs(out[: net.circuit.n_inputs])


def cutoffs(net: Network, op: OperatingPoint, small=None, ref=None, steps: int = 26):
    """The −3 dB corners of the whole response of each input (every capacitor at once).

    The reference is the gain at 1 kHz. The low corner is the highest frequency below 1 kHz
    where the gain has fallen 3 dB, the high corner the lowest above; 0 and inf mean the
    response holds within 3 dB from 0.01 Hz and up to 1 GHz.

    Returns
    -------
    low, high
        (n_in, B) arrays, Hz.
    """
    n, B = net.circuit.n_inputs, op.batch.size
    if ref is None:
        ref = np.abs(midband(net, op, small).gain)
    small = small if small is not None else net.small_signal(op)
    out = []
    for grid, below in ((LOW_GRID, True), (HIGH_GRID, False)):
        g = _gains(net, op, small, grid) / ref[:, :, None]  # (n, B, F)
        weak = g < _INV_SQRT2
        F = grid.size
        if below:
            # Scan down from 1 kHz: the first weak point going down.
            order = np.arange(F - 1, -1, -1)
        else:
            order = np.arange(F)
        w_ord = weak[:, :, order]
        has = w_ord.any(axis=2)
        first = np.argmax(w_ord, axis=2)  # position in scan order
        idx_weak = order[first]
        idx_strong = np.where(below, idx_weak + 1, idx_weak - 1) if True else None
        idx_strong = np.clip(idx_strong, 0, F - 1)
        lo = np.log(grid[np.minimum(idx_weak, idx_strong)])
        hi = np.log(grid[np.maximum(idx_weak, idx_strong)])
        # Bisection in log frequency, all (input, variant) pairs at once: column k of the
        # frequency array refines input k.
        for _ in range(steps):
            mid = 0.5 * (lo + hi)
            fm = np.exp(mid).T  # (B, n)
            gm = _gains(net, op, small, fm)  # (n_in, B, n)
            gk = np.stack([gm[k, :, k] for k in range(n)]) / ref
            weak_mid = gk < _INV_SQRT2
            if below:
                lo = np.where(weak_mid, mid, lo)
                hi = np.where(weak_mid, hi, mid)
            else:
                hi = np.where(weak_mid, mid, hi)
                lo = np.where(weak_mid, lo, mid)
        f = np.exp(0.5 * (lo + hi))
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
