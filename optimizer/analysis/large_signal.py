"""Large signal: periodic steady state at 1 kHz by harmonic balance, THD, swing and clip limits.

The stage is driven by a sine on one input (the others at rest, their source resistances in
place) and solved for its **periodic steady state**: the linear part of the circuit (every
resistor and capacitor, the load, the sources) is exact at each harmonic, and the
transistors' exact nonlinear equations are met at 2H+1 instants of the period (time-domain
collocation, H harmonics). The DC component is part of the solution, so the bias shift a
large signal causes through the coupling and bypass capacitors is included, as a long
transient in a circuit simulator would find it after settling.

To keep the system small, every node that touches no transistor is eliminated per harmonic
(the same Schur complement as the DC solution), so the unknowns are the transistor terminal
voltages at the collocation instants. The transistors' stored charges (depletion charge of
both junctions and the diffusion charge, as in :func:`~optimizer.analysis.bjt.charges`) are
included, differentiated in time by the collocation's spectral derivative: at 1 kHz their
currents are small, but not where a base is fed from a few hundred kilohms, and the
collector junction's charge, multiplied by the stage's gain, is nonlinear in the collector
swing (left out, the THD of such a stage came out up to half of ngspice's).

THD is the rms of harmonics 2–9 over the fundamental, at the load (the convention of a
nine-harmonic Fourier analysis). The *swing* is the fundamental's peak at the load when THD
reaches the limit. The *clip limits* come from the quasi-static transfer curve (capacitors
holding their operating-point voltage): the output excursion on each side at which the
incremental gain has fallen to half its small-signal value.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import ConvergenceError
from . import bjt as dev
from . import work
from .network import Batch, Network, OperatingPoint, _stamp

__all__ = ["ClipLimits", "SignalResult", "clip_limits", "swing_at_thd", "thd_at_level", "harmonic_balance"]

F_TEST = 1000.0
THD_HARMONICS = 9
_H_DEFAULT = 20
#: Newton on the harmonic-balance equations has converged when no port sample moves by more
#: than this (V) in a full step. 0.1 µV is far below the smallest harmonic the THD counts
#: (1 % of a 10 mV output is 100 µV); a tighter limit is not reachable in floating point when
#: a large capacitor and a large resistor share a node (their admittances differ by 10⁷ at 1 kHz).
HB_STEP_TOL = 1e-7


@dataclass
class SignalResult:
    """Periodic steady state of a batch at drive amplitudes ``drive`` (V peak at the EMF)."""

    drive: np.ndarray  # (B,)
    out: np.ndarray  # (B, H+1) complex one-sided phasors of the load voltage (peak)
    fundamental: np.ndarray  # (B,) V peak at the load
    thd: np.ndarray  # (B,) fraction
    dc_shift: np.ndarray  # (B,) DC at the load (≈0 with an output capacitor)
    ports: np.ndarray  # (B, p, M) port voltage samples (for continuation)
    converged: np.ndarray


class _Params:
    """Device parameters broadcast for (B, M) sample arrays."""

    def __init__(self, p: dev.DeviceParams):
        for k in dev.DeviceParams.__slots__:
            v = getattr(p, k)
            setattr(self, k, v[:, None] if isinstance(v, np.ndarray) and v.ndim == 1 else v)

    def take(self, idx: np.ndarray, size: int) -> "_Params":
        """The parameters of variants ``idx`` of a batch of ``size``."""
        out = object.__new__(_Params)
        for k, v in self.__dict__.items():
            setattr(out, k, v[idx] if isinstance(v, np.ndarray) and v.ndim >= 1 and v.shape[0] == size else v)
        return out


def _newton_step(J, F):
    """−J⁻¹F per variant; a singular system falls back to least squares for that variant."""
    try:
        return -work.solve(J, F)
    except np.linalg.LinAlgError:
        out = np.zeros_like(F)
        for b in range(J.shape[0]):
            try:
                out[b] = -np.linalg.solve(J[b], F[b])
            except np.linalg.LinAlgError:
                out[b] = -np.linalg.lstsq(J[b], F[b], rcond=None)[0]
        return out


class _HB:
    """The harmonic-balance system of one batch and one driven input."""

    def __init__(self, net: Network, op: OperatingPoint, drive_input: int, H: int = _H_DEFAULT, f0: float = F_TEST):
        self.net, self.op, self.H, self.f0 = net, op, H, f0
        self.M = 2 * H + 1
        batch = op.batch
        B, N, nf, nx = batch.size, net.N, net.nf, net.nx
        P, I = net.ports, net.internal
        self.p = len(P)
        self.B = B
        G = _stamp(net.conductances(batch), net.rpairs, N)
        C = _stamp(net.capacitance_values(batch), net.cpairs, N)
        k = np.arange(H + 1)
        w = 2 * np.pi * f0 * k
        # (N, N, B, H+1), moved to batch-first (B, H+1, N, N) for LAPACK.
        Y = np.moveaxis(G[..., None] + 1j * C[..., None] * w, (2, 3), (0, 1))
        fx = list(range(nf, nf + nx))
        out = net.index[net.circuit.output_node]
        Yff = Y[:, :, :nf, :nf]
        YPP = Yff[:, :, P][:, :, :, P]
        YPx = Y[:, :, P][:, :, :, fx]
        if I:
            YII = Yff[:, :, I][:, :, :, I]
            YIP = Yff[:, :, I][:, :, :, P]
            YPI = Yff[:, :, P][:, :, :, I]
            YIx = Y[:, :, I][:, :, :, fx]
            Xp = work.solve(YII, YIP)  # (B, H+1, ni, p)
            Xx = work.solve(YII, YIx)
            self.Yr = YPP - YPI @ Xp
            self.Kx = YPx - YPI @ Xx
        else:
            self.Yr, self.Kx = YPP, YPx
        # Output node: a port or an internal node.
        if out in P:
            j = P.index(out)
            self.TP = np.zeros((B, H + 1, self.p), complex)
            self.TP[:, :, j] = 1.0
            self.Tx = np.zeros((B, H + 1, nx), complex)
        else:
            j = I.index(out)
            self.TP = -Xp[:, :, j, :]
            self.Tx = -Xx[:, :, j, :]
        # Fixed-node phasors (two-sided): DC supply, and the drive on harmonic 1.
        self.vx_dc = net.fixed_dc(batch).T  # (B, nx)
        self.drive_col = net.fixed.index(f"in{drive_input}")
        # Linear operator in the time domain: circulant blocks c_ij[d].
        d = np.arange(self.M)
        ph = np.exp(2j * np.pi * np.outer(k, d) / self.M)  # (H+1, M)
        wk = np.where(k == 0, 1.0, 2.0)
        c = np.real(np.einsum("bkij,kd->bijd", self.Yr * wk[None, :, None, None], ph)) / self.M  # (B,p,p,M)
        idx = (d[:, None] - d[None, :]) % self.M  # [m, n] -> (m - n) mod M
        L = c[:, :, :, idx]  # (B, p, p, M, M)
        self.L = np.transpose(L, (0, 1, 3, 2, 4)).reshape(B, self.p * self.M, self.p * self.M)
        self.phase = ph  # e^{j 2π k m / M}
        self.params = [_Params(q) for q in net.device_params(batch)]
        self.t = d / self.M
        # Spectral time derivative at the instants: (D q)[m] = Σ_n D[m, n] q[n].
        theta = 2 * np.pi * np.subtract.outer(d, d) / self.M
        kk = np.arange(1, H + 1)
        self.D = -(2 * (2 * np.pi * f0) / self.M) * np.sin(theta[:, :, None] * kk).dot(kk)
        self.stores = any(np.any(np.asarray(getattr(q, k)) != 0) for q in self.params for k in ("cje", "cjc", "tf"))
        self.rows = np.arange(B)  # which variants of the operating point these are

    #: Arrays of the system with the batch first (what :meth:`sub` cuts).
    _BATCHED = ("L", "Kx", "Yr", "vx_dc", "TP", "Tx")

    def sub(self, idx: np.ndarray) -> "_HB":
        """The same system for variants ``idx`` only (the solver drops converged ones)."""
        h = object.__new__(_HB)
        h.__dict__.update(self.__dict__)
        for k in self._BATCHED:
            setattr(h, k, getattr(self, k)[idx])
        h.params = [p.take(idx, self.B) for p in self.params]
        h.B = len(idx)
        h.rows = self.rows[idx]
        return h

    # -- pieces ---------------------------------------------------------------------------
    def source(self, amp):
        """(B, p, M) linear source term for drive amplitudes amp (B,)."""
        Vx = np.zeros((self.B, self.H + 1, self.net.nx), complex)
        Vx[:, 0, :] = self.vx_dc
        Vx[:, 1, self.drive_col] = amp / 2.0
        J = -np.einsum("bkij,bkj->bki", self.Kx, Vx)  # (B, H+1, p)
        wk = np.where(np.arange(self.H + 1) == 0, 1.0, 2.0)
        s = np.real(np.einsum("bki,km->bim", J * wk[None, :, None], self.phase))
        return s, Vx

    def fixed_samples(self, amp):
        """(B, nx, M) fixed-node voltages at the instants."""
        vx = np.repeat(self.vx_dc[:, :, None], self.M, axis=2)
        vx[:, self.drive_col, :] += amp[:, None] * np.cos(2 * np.pi * self.t)[None, :]
        return vx

    def devices(self, u, vxs):
        """Device currents (B, p, M) into the port nodes and their Jacobian blocks."""
        net = self.net
        B, M, p = self.B, self.M, self.p
        cur = np.zeros((B, p, M))
        jac = np.zeros((B, p, p, M))

        def volt(node):
            s = net._slot(node)
            if s[0] == "p":
                return u[:, s[1], :]
            if s[0] == "x":
                return vxs[:, s[1], :]
            return np.zeros((B, M))

        for (_, c, b, e, _), prm in zip(net.bjts, self.params):
            vb, ve, vc = volt(b), volt(e), volt(c)
            vbe = prm.sign * (vb - ve)
            vbc = prm.sign * (vb - vc)
            ic, ib, gcbe, gcbc, gbbe, gbbc = dev.currents(prm, vbe, vbc)
            s = prm.sign
            sb, se, sc = net._slot(b), net._slot(e), net._slot(c)
            for row, i_, g_be, g_bc in ((c, ic, gcbe, gcbc), (b, ib, gbbe, gbbc)):
                for r_, sg in ((net._slot(row), 1.0), (se, -1.0)):
                    if r_[0] != "p":
                        continue
                    cur[:, r_[1]] += sg * s * i_
                    for col, g in ((sb, g_be + g_bc), (se, -g_be), (sc, -g_bc)):
                        if col[0] == "p":
                            jac[:, r_[1], col[1]] += sg * g
        return cur, jac

    def stored(self, u, vxs):
        """The transistors' charges at the port nodes (B, p, M) and their derivatives with the
        port voltages (B, p, p, M), assembled as :meth:`devices` assembles the currents."""
        net = self.net
        B, M, p = self.B, self.M, self.p
        q = np.zeros((B, p, M))
        cj = np.zeros((B, p, p, M))

        def volt(node):
            s = net._slot(node)
            if s[0] == "p":
                return u[:, s[1], :]
            if s[0] == "x":
                return vxs[:, s[1], :]
            return np.zeros((B, M))

        for (_, c, b, e, _), prm in zip(net.bjts, self.params):
            vbe = prm.sign * (volt(b) - volt(e))
            vbc = prm.sign * (volt(b) - volt(c))
            qbe, qbc = dev.charges(prm, vbe, vbc)
            cbe, cbe_vbc, cbc = dev.capacitances(prm, vbe, vbc)
            s = prm.sign
            sb, se, sc = net._slot(b), net._slot(e), net._slot(c)
            # Charge held at the collector (−q_bc) and at the base (q_be + q_bc); the emitter
            # holds minus their sum, as a current's emitter share in devices().
            for row, q_, c_be, c_bc in ((c, -qbc, 0.0, -cbc), (b, qbe + qbc, cbe, cbe_vbc + cbc)):
                for r_, sg in ((net._slot(row), 1.0), (se, -1.0)):
                    if r_[0] != "p":
                        continue
                    q[:, r_[1]] += sg * s * q_
                    for col, g in ((sb, c_be + c_bc), (se, -c_be), (sc, -c_bc)):
                        if col[0] == "p":
                            cj[:, r_[1], col[1]] += sg * g
        return q, cj

    def junctions(self, u, vxs):
        net = self.net
        out = []

        def volt(node):
            s = net._slot(node)
            if s[0] == "p":
                return u[:, s[1], :]
            if s[0] == "x":
                return vxs[:, s[1], :]
            return np.zeros_like(u[:, 0, :])

        for (_, c, b, e, _), prm in zip(net.bjts, self.params):
            out.append(prm.sign * (volt(b) - volt(e)))
            out.append(prm.sign * (volt(b) - volt(c)))
        return np.stack(out, axis=1)

    def solve(self, amp, u0, max_iter: int = 60):
        """Newton on the collocation equations from the start u0 (B, p, M).

        Converged variants are frozen, and dropped from the batch once they are a quarter
        of it, so a few slow ones do not keep the rest iterating.
        """
        B, p, M = self.B, self.p, self.M
        s, _ = self.source(amp)
        vxs = self.fixed_samples(amp)
        u = u0.copy()
        converged = np.zeros(B, dtype=bool)
        # Flat positions of (port i, instant m) × (port j, instant m) in the (p·M)² Jacobian.
        ii, jj, mm = np.meshgrid(np.arange(p), np.arange(p), np.arange(M), indexing="ij")
        diag_rows, diag_cols = ii * M + mm, jj * M + mm
        h, rows, done = self, np.arange(B), np.zeros(B, dtype=bool)  # the batch being iterated
        for _ in range(max_iter):
            if done.all():
                break
            if (~done).sum() <= 0.75 * h.B:
                rows = rows[~done]
                h, done = self.sub(rows), np.zeros(rows.size, dtype=bool)
            n = h.B
            ua, sa, va = u[rows], s[rows], vxs[rows]
            cur, jac = h.devices(ua, va)
            lin = (h.L @ ua.reshape(n, p * M, 1)).reshape(n, p, M)
            F = lin - sa + cur
            J = h.L.copy()
            if h.stores:
                # The charges' currents D·q, and their Jacobian D[m, n]·∂q(t_n)/∂u(t_n).
                q, cj = h.stored(ua, va)
                F += q @ h.D.T
                J.reshape(n, p, M, p, M)[...] += cj[:, :, None, :, :] * h.D[None, None, :, None, :]
            J[:, diag_rows, diag_cols] += jac  # the currents' Jacobian: one block per instant
            du = _newton_step(J, F.reshape(n, p * M, 1)).reshape(n, p, M)
            # Damping: no junction moves by more than 0.1 V in one step.
            vj0 = h.junctions(ua, va)
            vj1 = h.junctions(ua + du, va)
            step = np.max(np.abs(vj1 - vj0), axis=(1, 2))
            alpha = np.minimum(1.0, 0.1 / np.maximum(step, 1e-30))
            alpha[done] = 0.0
            u[rows] = ua + alpha[:, None, None] * du
            small = np.max(np.abs(du), axis=(1, 2)) < HB_STEP_TOL
            res = np.max(np.abs(F), axis=(1, 2)) < 1e-12 + 1e-9 * np.max(np.abs(cur), axis=(1, 2))
            done |= (alpha == 1.0) & small | res & small
            converged[rows[done]] = True
        return u, converged

    def result(self, amp, u, converged) -> SignalResult:
        B, M = self.B, self.M
        # Two-sided port phasors V_k = (1/M) Σ v(t_m) e^{-j k ω t_m}.
        Vp = np.einsum("bim,km->bki", u, np.conj(self.phase)) / M  # (B, H+1, p)
        _, Vx = self.source(amp)
        Vout = np.einsum("bki,bki->bk", self.TP, Vp) + np.einsum("bkj,bkj->bk", self.Tx, Vx)
        one = Vout.copy()
        one[:, 1:] *= 2.0  # one-sided peak phasors
        fund = np.abs(one[:, 1])
        hk = np.abs(one[:, 2 : THD_HARMONICS + 1])
        thd = np.sqrt(np.sum(hk**2, axis=1)) / np.maximum(fund, 1e-300)
        return SignalResult(amp, one, fund, thd, np.real(one[:, 0]), u, converged)

    def dc_start(self):
        """Port voltages of the operating point at every instant."""
        u = np.stack([self.op.v[self.net.free[i]][self.rows] for i in self.net.ports], axis=1)  # (B, p)
        return np.repeat(u[:, :, None], self.M, axis=2)


def harmonic_balance(net: Network, op: OperatingPoint, drive_input: int, amplitude, H: int = _H_DEFAULT) -> SignalResult:
    """Periodic steady state at one drive amplitude per variant (V peak at the EMF)."""
    hb = _HB(net, op, drive_input, H)
    amp = np.broadcast_to(np.asarray(amplitude, float), (op.batch.size,)).astype(float)
    u = hb.dc_start()
    # Ramp the drive up so Newton always starts near the answer.
    for frac in (0.25, 0.5, 0.75, 1.0):
        u, conv = hb.solve(amp * frac, u)
    if not conv.all():
        raise ConvergenceError("the large-signal steady state did not converge")
    return hb.result(amp, u, conv)


#: The largest factor the signal part of a starting waveform is scaled by (see :func:`_search`).
PREDICT_MAX = 4.0
#: The most a drive amplitude grows in one step near the target while it is not yet
#: bracketed (see :func:`_search`).
GROW_MAX = 2.0


def _search(hb: _HB, target_fn, amp0, max_steps=40, rel=2e-3):
    """Find drive amplitudes where target_fn(result) = 1 (monotone in amplitude), per variant.

    Works on log amplitude with bracketing and secant steps; continuation from the last
    solution of each variant.
    """
    B = hb.B
    amp = amp0.copy()
    u = hb.dc_start()
    lo = np.zeros(B)
    lo_val = np.full(B, -np.inf)
    lo_raw = np.full(B, -np.inf)  # lo_val before any Illinois halving
    lo2, lo2_val = np.zeros(B), np.full(B, -np.inf)  # the point below before lo
    side = np.zeros(B, dtype=int)  # which end the last step replaced: 1 lo, −1 hi
    hi = np.full(B, np.inf)
    hi_val = np.full(B, np.inf)
    done = np.zeros(B, dtype=bool)
    last = None
    u_lo = u.copy()
    u_dc = u.copy()
    for _ in range(max_steps):
        # Start from the last solution below the target with its signal part scaled to the
        # new amplitude (the waveform grows about in proportion; Newton corrects the rest).
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(lo > 0, np.minimum(amp / np.where(lo > 0, lo, 1.0), PREDICT_MAX), 1.0)
        u_start = u_dc + (u_lo - u_dc) * ratio[:, None, None]
        if done.any():  # only the variants still searching are solved again
            act = np.nonzero(~done)[0]
            u_try, conv = u_lo.copy(), np.zeros(B, dtype=bool)
            u_try[act], conv[act] = hb.sub(act).solve(amp[act], u_start[act])
        else:
            u_try, conv = hb.solve(amp, u_start)
        res = hb.result(amp, u_try, conv)
        was_done = done.copy()
        val = np.log(np.maximum(target_fn(res), 1e-300))  # 0 at the target
        ok = conv & np.isfinite(val)
        below = ok & (val < 0)
        above = (~ok) | (val >= 0)
        new_lo = below & ~done
        lo2 = np.where(new_lo, lo, lo2)
        lo2_val = np.where(new_lo, lo_raw, lo2_val)
        lo = np.where(new_lo, amp, lo)
        lo_val = np.where(new_lo, val, lo_val)
        lo_raw = np.where(new_lo, val, lo_raw)
        u_lo = np.where(new_lo[:, None, None], u_try, u_lo)
        hi = np.where(above & ~done, amp, hi)
        hi_val = np.where(above & ~done & ok, val, np.where(above & ~done, np.inf, hi_val))
        done |= ok & (np.abs(val) < rel)
        last = res if last is None else _merge(last, res, ~was_done)
        if done.all():
            break
        # Illinois: an end kept for the second time in a row has its value halved, so the
        # secant does not creep up on the target from one side.
        kept_hi = below & ~was_done & (side == 1)
        kept_lo = above & ~was_done & (side == -1)
        hi_val = np.where(kept_hi & np.isfinite(hi_val), 0.5 * hi_val, hi_val)
        lo_val = np.where(kept_lo & np.isfinite(lo_val), 0.5 * lo_val, lo_val)
        side = np.where(was_done, side, np.where(below, 1, -1))
        # Next amplitude: grow (or shrink) until bracketed, then secant in log-log (bisection
        # fallback). Growth extrapolates the last two points below the target in log-log
        # (slope at least 1), by at most GROW_MAX once within a factor of 10 of the target
        # (twice that further away): a stage driven far past its clip point needs many
        # Newton steps, so overshooting costs more than one more step.
        grow = np.isinf(hi)
        shrink = ~grow & (lo <= 0)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            slope = np.where((lo2 > 0) & (lo > lo2) & np.isfinite(lo2_val),
                             (lo_raw - lo2_val) / np.log(np.maximum(lo, 1e-300) / np.where(lo2 > 0, lo2, 1.0)), 1.0)
            slope = np.maximum(np.nan_to_num(slope, nan=1.0, posinf=1.0, neginf=1.0), 1.0)
            step_up = amp * np.clip(np.exp(-val / slope), 1.2, np.where(val < -np.log(10.0), 2 * GROW_MAX, GROW_MAX))
            step_down = amp / np.clip(np.where(ok, np.exp(val), 4.0), 1.2, 4.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            la, lb = np.log(np.maximum(lo, 1e-300)), np.log(np.where(np.isinf(hi), 1.0, hi))
        with np.errstate(invalid="ignore", divide="ignore"):
            sec = np.where(
                np.isfinite(hi_val) & np.isfinite(lo_val) & (lo > 0),
                la - lo_val * (lb - la) / np.where(hi_val - lo_val == 0, 1.0, hi_val - lo_val),
                0.5 * (la + lb),
            )
        sec = np.clip(sec, la + 0.05 * (lb - la), lb - 0.05 * (lb - la))
        nxt = np.where(grow, step_up, np.where(shrink, step_down, np.exp(sec)))
        amp = np.where(done, amp, nxt)
    return last, done


def _merge(a: SignalResult, b: SignalResult, take_b) -> SignalResult:
    t = take_b
    return SignalResult(
        np.where(t, b.drive, a.drive),
        np.where(t[:, None], b.out, a.out),
        np.where(t, b.fundamental, a.fundamental),
        np.where(t, b.thd, a.thd),
        np.where(t, b.dc_shift, a.dc_shift),
        np.where(t[:, None, None], b.ports, a.ports),
        np.where(t, b.converged, a.converged),
    )


def swing_at_thd(net: Network, op: OperatingPoint, thd_limit, drive_input: int = 1, gain=None, H: int = _H_DEFAULT):
    """The output peak (V) at the load when THD reaches ``thd_limit`` (fraction), per variant.

    ``gain`` (linear, source EMF to load) sets the first guess; it is computed if absent.
    Returns (swing (B,), result at that drive).
    """
    hb = _HB(net, op, drive_input, H)
    B = op.batch.size
    limit = np.broadcast_to(np.asarray(thd_limit, float), (B,))
    if gain is None:
        probe = hb.result(np.full(B, 1e-3), *hb.solve(np.full(B, 1e-3), hb.dc_start()))
        gain = probe.fundamental / 1e-3
    amp0 = 0.05 / np.maximum(np.asarray(gain, float), 1e-6)  # start near 50 mV at the output
    res, done = _search(hb, lambda r: r.thd / limit, amp0)
    return np.where(done, res.fundamental, np.nan), res


def thd_at_level(net: Network, op: OperatingPoint, level, drive_input: int = 1, gain=None, H: int = _H_DEFAULT):
    """THD (fraction) when the fundamental at the load is ``level`` volts peak, per variant."""
    hb = _HB(net, op, drive_input, H)
    B = op.batch.size
    level = np.broadcast_to(np.asarray(level, float), (B,))
    if gain is None:
        probe = hb.result(np.full(B, 1e-3), *hb.solve(np.full(B, 1e-3), hb.dc_start()))
        gain = probe.fundamental / 1e-3
    amp0 = 0.5 * level / np.maximum(np.asarray(gain, float), 1e-6)
    res, done = _search(hb, lambda r: r.fundamental / level, amp0, rel=1e-4)
    return np.where(done, res.thd, np.nan), res


@dataclass
class ClipLimits:
    """Output excursions from the quiescent output (V, positive numbers) at which the stage
    clips: ``up`` (output rising) and ``down`` (output falling); ``up_cause``/``down_cause``
    say which limit it is: ``cutoff`` or ``saturation`` for a one-transistor stage, the
    transistor named for a stage of several (``Q2 cutoff``, ``Q1 saturation``)."""

    up: np.ndarray
    down: np.ndarray
    up_cause: list[str]
    down_cause: list[str]


def clip_limits(net: Network, op: OperatingPoint, drive_input: int = 1, gain=None, points: int = 61,
                strict: bool = True) -> ClipLimits:
    """Clip limits from the quasi-static transfer curve (capacitors frozen at their DC voltage).

    With ``strict`` False a variant whose quiescent point the sweep cannot find gets NaN
    limits (no swing) instead of the whole batch raising :class:`ConvergenceError`."""
    batch = op.batch
    B = batch.size
    # Coupling and bypass capacitors hold their charge over a cycle; the load's own
    # capacitance does not (it is small and follows the signal), so it stays open.
    frozen = np.stack([op.cap_voltage[ref] if net.elements[ref].part else np.full(B, np.nan)
                       for ref, _, _ in net.cbranch]) if net.cbranch else None
    if gain is None:
        gain = np.ones(B)
    gain = np.maximum(np.abs(np.asarray(gain, float)), 1e-3)
    vsup = batch.supply
    # Sweep the EMF so the ideal output would reach ±1.5 × the supply.
    span = 1.5 * vsup / gain
    x = np.linspace(-1.0, 1.0, points)
    emf = span[:, None] * x[None, :]  # (B, points)
    big = batch.take(np.repeat(np.arange(B), points))
    fixed = net.fixed_dc(big)
    fixed[net.fixed.index(f"in{drive_input}")] = emf.reshape(-1)
    fz = None if frozen is None else np.repeat(frozen, points, axis=1)
    start = {ref: (np.repeat(op.junction[ref][0], points), np.repeat(op.junction[ref][1], points)) for ref in op.junction}
    sw = net.operating_point(big, frozen=fz, fixed=fixed, start=start, strict=False)
    # A far sweep point that does not converge lies beyond the clip point: it counts as weak,
    # and the clip point is taken at the last converged sample before it.
    conv = np.ones((B, points), bool) if sw.converged is None else sw.converged.reshape(B, points)
    mid = points // 2
    lost = ~conv[:, mid]
    if lost.any() and strict:
        raise ConvergenceError("the quiescent point of the clip sweep could not be found")
    vout = np.where(conv, sw.v[net.circuit.output_node].reshape(B, points), np.nan)
    v0 = vout[:, mid : mid + 1]
    with np.errstate(invalid="ignore"):
        dv = np.gradient(vout, axis=1) / np.gradient(emf, axis=1)
    g0 = np.abs(dv[:, mid : mid + 1])
    weak = ~(np.abs(dv) >= 0.5 * g0)  # NaN (next to a sample that did not converge) is weak
    sign = np.sign(dv[:, mid])  # output moves with (+) or against (−) the input
    up, down = np.full(B, np.nan), np.full(B, np.nan)
    up_c, down_c = [], []
    refs = [q.ref for q in net.circuit.transistors]
    pnp = net.bjts[0][4].polarity == "pnp"
    for i in range(B):
        if lost[i]:
            up_c.append("")
            down_c.append("")
            continue
        right = np.nonzero(weak[i, mid:])[0]
        left = np.nonzero(weak[i, : mid + 1][::-1])[0]
        j_r = mid + right[0] if right.size else points - 1
        j_l = mid - left[0] if left.size else 0
        while not conv[i, j_r]:
            j_r -= 1
        while not conv[i, j_l]:
            j_l += 1
        r_exc = vout[i, j_r] - v0[i, 0]
        l_exc = vout[i, j_l] - v0[i, 0]
        pos, neg = (r_exc, l_exc) if sign[i] >= 0 else (l_exc, r_exc)
        j_pos, j_neg = (j_r, j_l) if sign[i] >= 0 else (j_l, j_r)
        up[i], down[i] = abs(pos), abs(neg)
        # One transistor, its collector driving the output: output rising means the collector
        # rises, so the transistor turns off (NPN) or saturates (PNP).
        up_rule, down_rule = ("saturation", "cutoff") if pnp else ("cutoff", "saturation")
        if len(refs) == 1:
            up_c.append(up_rule)
            down_c.append(down_rule)
        else:
            # Several transistors: the one that reached a limit at the clip point, named.
            up_c.append(_limit_at(sw, refs, i * points + mid, i * points + j_pos, f"{refs[0]} {up_rule}"))
            down_c.append(_limit_at(sw, refs, i * points + mid, i * points + j_neg, f"{refs[0]} {down_rule}"))
    return ClipLimits(up, down, up_c, down_c)


#: A transistor whose base–collector junction is forward biased by this much (V) at a clip
#: point is saturated; one whose collector current has fallen below this fraction of its
#: quiescent value is cutting off.
SAT_VBC = 0.4
CUT_FRACTION = 0.2


def _limit_at(sw: OperatingPoint, refs: list[str], k0: int, k: int, fallback: str) -> str:
    """Which transistor limits the swing at sweep sample ``k`` (``k0``: the quiescent sample),
    as ``"Q2 cutoff"`` or ``"Q1 saturation"``.

    Saturation first (the most forward-biased base–collector junction beyond
    :data:`SAT_VBC`), then cutoff (the lowest collector current relative to quiescent, below
    :data:`CUT_FRACTION` of it); when neither is that clear, the transistor that moved
    furthest toward either limit (collector current or collector–emitter voltage as a
    fraction of quiescent); ``fallback`` when no transistor moved toward a limit.
    """
    sat, cut, moved = [], [], []
    for ref in refs:
        vbe, vbc = sw.junction[ref][0], sw.junction[ref][1]
        vce0, vce = float(vbe[k0] - vbc[k0]), float(vbe[k] - vbc[k])
        ic0, ic = float(sw.ic[ref][k0]), float(sw.ic[ref][k])
        if float(vbc[k]) > SAT_VBC:
            sat.append((-float(vbc[k]), ref))
        r_ic = ic / ic0 if ic0 > 0 else np.inf
        if r_ic < CUT_FRACTION:
            cut.append((r_ic, ref))
        r_vce = vce / vce0 if vce0 > 0 else np.inf
        moved += [(r_ic, ref, "cutoff"), (r_vce, ref, "saturation")]
    if sat:
        return f"{min(sat)[1]} saturation"
    if cut:
        return f"{min(cut)[1]} cutoff"
    r, ref, kind = min(moved)
    return f"{ref} {kind}" if r < 1.0 else fallback


def make_batch_like(batch: Batch, idx) -> Batch:
    return batch.take(idx)
