"""A circuit compiled for batched nodal analysis.

:class:`Network` turns a :class:`~optimizer.circuit.netlist.Circuit` into index arrays once;
its methods then evaluate many variants at once. A *batch* is a set of B variants of the
same netlist (candidate designs, corners, Monte Carlo samples): every element value, pot
position, the supply voltage, the temperature and each transistor's beta may differ.

Array conventions: **the batch axis is last**. Node voltages are ``(n, B)``; admittance
matrices ``(n, n, B)``, or ``(n, n, B, F)`` over F frequencies. Results handed to callers
(:class:`OperatingPoint`, :class:`ACResult`) are keyed by node name.

Nodes are *fixed* (the supply ``vcc`` and each EMF ``in k``, whose voltages are given),
*ground* (``0``) or *free*. The DC solution eliminates every free node that touches no
transistor (a Schur complement), so Newton's method runs on the transistor terminals only.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..catalog.parts import LOG_TAPER_MIDPOINT
from ..circuit.netlist import GROUND, Circuit
from ..errors import CircuitError, ConvergenceError
from . import bjt as dev
from . import linalg

__all__ = ["ACResult", "Batch", "Network", "OperatingPoint", "POT_END_RESISTANCE"]

#: Resistance of each end of a potentiometer's track (a wiper at an end still sees this).
POT_END_RESISTANCE = 1.0
#: Conductance a "frozen" capacitor is replaced by in the quasi-static sweep (S).
FROZEN_G = 1e3


def taper(kind: str, position: np.ndarray) -> np.ndarray:
    """Fraction of a pot's track between wiper and bottom end, for arrays of rotations."""
    p = np.clip(np.asarray(position, dtype=float), 0.0, 1.0)
    if kind == "linear":
        return p
    m = LOG_TAPER_MIDPOINT
    return np.where(p <= 0.5, 2 * m * p, m + (1 - m) * (2 * p - 1))


@dataclass
class Batch:
    """Values for a batch of B variants. Missing entries take the circuit's own values.

    ``values`` maps designators to arrays of values (ohm, farad); ``positions`` maps pot
    designators to rotations; ``beta`` maps transistor designators to forward beta at the
    model's TNOM; ``supply`` is volts and ``temperature`` kelvin.
    """

    size: int
    supply: np.ndarray
    temperature: np.ndarray
    values: dict[str, np.ndarray] = field(default_factory=dict)
    positions: dict[str, np.ndarray] = field(default_factory=dict)
    beta: dict[str, np.ndarray] = field(default_factory=dict)

    @staticmethod
    def single(circuit: Circuit, supply: float, temperature: float) -> "Batch":
        """One variant: the circuit's own values and betas."""
        return Batch(1, np.array([float(supply)]), np.array([float(temperature)]))

    @staticmethod
    def repeat(supply, temperature, size: int) -> "Batch":
        return Batch(size, np.broadcast_to(np.asarray(supply, float), (size,)).copy(),
                     np.broadcast_to(np.asarray(temperature, float), (size,)).copy())

    def take(self, idx) -> "Batch":
        """The sub-batch at indices (or a boolean mask) ``idx``."""
        idx = np.asarray(idx)
        n = int(idx.sum()) if idx.dtype == bool else int(idx.size)
        return Batch(
            n,
            self.supply[idx],
            self.temperature[idx],
            {k: v[idx] for k, v in self.values.items()},
            {k: v[idx] for k, v in self.positions.items()},
            {k: v[idx] for k, v in self.beta.items()},
        )

    @staticmethod
    def concat(batches: list["Batch"], defaults=None) -> "Batch":
        """Join batches; an entry missing from some takes ``defaults(kind, key)``."""
        def keys(attr):
            return sorted(set().union(*(getattr(b, attr).keys() for b in batches)))

        def cat(attr, k):
            parts = []
            for b in batches:
                d = getattr(b, attr)
                if k in d:
                    parts.append(np.asarray(d[k], dtype=float))
                else:
                    parts.append(np.full(b.size, defaults(attr, k)))
            return np.concatenate(parts)

        return Batch(
            sum(b.size for b in batches),
            np.concatenate([b.supply for b in batches]),
            np.concatenate([b.temperature for b in batches]),
            {k: cat("values", k) for k in keys("values")},
            {k: cat("positions", k) for k in keys("positions")},
            {k: cat("beta", k) for k in keys("beta")},
        )


@dataclass
class OperatingPoint:
    """The DC solution of a batch.

    ``v`` holds the voltage of every node by name (ground included), arrays (B,).
    ``junction`` maps transistor designators to (vbe, vbc) in the device's own sense
    (positive vbe forward-biases the junction, NPN or PNP); ``ic``/``ib`` are the collector
    and base currents in that same sense (positive when the transistor conducts).
    """

    v: dict[str, np.ndarray]
    junction: dict[str, tuple[np.ndarray, np.ndarray]]
    ic: dict[str, np.ndarray]
    ib: dict[str, np.ndarray]
    supply_current: np.ndarray
    iterations: int
    batch: Batch
    cap_voltage: dict[str, np.ndarray]
    #: Which variants converged; None when all did (only ``strict=False`` leaves some out).
    converged: np.ndarray | None = None


@dataclass
class ACResult:
    """Node voltages for each excitation at each frequency.

    ``v`` has shape (n_free, n_exc, B, F). Excitation k < n_inputs sets EMF k+1 to 1 V (the
    others 0, supply AC-grounded); with ``output_impedance`` one more excitation injects 1 A
    into the output node with the load removed.
    """

    freqs: np.ndarray
    v: np.ndarray
    node_index: dict[str, int]
    n_inputs: int

    def node(self, name: str) -> np.ndarray:
        """(n_exc, B, F) response of one node (fixed nodes give their set values)."""
        if name in self.node_index:
            return self.v[self.node_index[name]]
        shape = self.v.shape[1:]
        out = np.zeros(shape, dtype=complex)
        if name.startswith("in") and name[2:].isdigit():
            k = int(name[2:]) - 1
            if k < self.n_inputs:
                out[k] = 1.0
        return out


def _stamp(vals: np.ndarray, pairs: list[tuple[int, int]], N: int, dtype=float) -> np.ndarray:
    """(N, N, *batch) matrix with each branch value stamped between its two nodes."""
    G = np.zeros((N, N) + vals.shape[1:], dtype=dtype)
    for k, (a, b) in enumerate(pairs):
        g = vals[k]
        G[a, a] += g
        G[b, b] += g
        G[a, b] -= g
        G[b, a] -= g
    return G


class Network:
    """A circuit compiled for batched DC, AC and large-signal analysis."""

    def __init__(self, circuit: Circuit):
        self.circuit = circuit
        self.supply_node = circuit.supply_node
        nodes = circuit.nodes
        fixed = [circuit.supply_node] + [f"in{k}" for k in range(1, circuit.n_inputs + 1)]
        self.fixed = [n for n in fixed if n in nodes]
        self.free = [n for n in nodes if n not in self.fixed and n != GROUND]
        self.nf, self.nx = len(self.free), len(self.fixed)
        self.N = self.nf + self.nx + 1
        self.index = {n: i for i, n in enumerate(self.free)}
        self.index.update({n: self.nf + j for j, n in enumerate(self.fixed)})
        self.index[GROUND] = self.N - 1
        self.names = self.free + self.fixed + [GROUND]
        self.rbranch: list[tuple[str, str, int, int]] = []  # (ref, 'R' | 'top' | 'bottom', a, b)
        self.cbranch: list[tuple[str, int, int]] = []
        self.bjts: list[tuple[str, int, int, int, object]] = []  # (ref, c, b, e, model)
        for e in circuit.elements:
            ix = [self.index[n] for n in e.nodes]
            if e.kind == "R":
                self.rbranch.append((e.ref, "R", ix[0], ix[1]))
            elif e.kind == "POT":
                self.rbranch.append((e.ref, "top", ix[0], ix[1]))
                self.rbranch.append((e.ref, "bottom", ix[1], ix[2]))
            elif e.kind == "C":
                self.cbranch.append((e.ref, ix[0], ix[1]))
            elif e.kind == "Q":
                self.bjts.append((e.ref, ix[0], ix[1], ix[2], e.model))
        self.elements = {e.ref: e for e in circuit.elements}
        self.rpairs = [(a, b) for _, _, a, b in self.rbranch]
        self.cpairs = [(a, b) for _, a, b in self.cbranch]
        self.ports = sorted({i for _, c, b, e, _ in self.bjts for i in (c, b, e) if i < self.nf})
        self.internal = [i for i in range(self.nf) if i not in self.ports]
        self._check_dc_paths()

    # -- structure ------------------------------------------------------------------------
    def _check_dc_paths(self) -> None:
        """Every free node needs a DC path (resistors, transistor junctions) to a fixed node."""
        parent = list(range(self.N))

        def find(i):
            while parent[i] != i:
                parent[i] = parent[parent[i]]
                i = parent[i]
            return i

        def union(a, b):
            parent[find(a)] = find(b)

        for a, b in self.rpairs:
            union(a, b)
        for _, c, b, e, _ in self.bjts:
            union(b, e)
            union(b, c)
        for i in range(self.nf, self.N - 1):
            union(i, self.N - 1)
        floating = [self.free[i] for i in range(self.nf) if find(i) != find(self.N - 1)]
        if floating:
            where = "; ".join(self.circuit.describe_node(n) for n in floating)
            raise CircuitError(
                f"no DC path to ground or the supply from {where}: a node reached only through "
                "capacitors has no operating point; add a resistor from it to ground (e.g. 1 MΩ)",
                tuple(floating),
            )

    def _slot(self, node: int):
        """Where a terminal's voltage lives: ("p", port position), ("x", fixed index) or ("g", 0)."""
        if node < self.nf:
            return ("p", self.ports.index(node))
        if node < self.nf + self.nx:
            return ("x", node - self.nf)
        return ("g", 0)

    # -- values ---------------------------------------------------------------------------
    def value(self, batch: Batch, ref: str) -> np.ndarray:
        """(B,) values of one element over the batch."""
        if ref in batch.values:
            return np.asarray(batch.values[ref], dtype=float)
        return np.full(batch.size, self.elements[ref].value)

    def conductances(self, batch: Batch) -> np.ndarray:
        """(n_rbranch, B) branch conductances, pots split at their wiper."""
        out = np.empty((len(self.rbranch), batch.size))
        for k, (ref, part, _, _) in enumerate(self.rbranch):
            r = self.value(batch, ref)
            if part != "R":
                el = self.elements[ref]
                pos = batch.positions.get(ref, np.full(batch.size, el.position))
                frac = taper(el.taper, pos)
                r = r * (1.0 - frac if part == "top" else frac) + POT_END_RESISTANCE
            out[k] = 1.0 / r
        return out

    def capacitance_values(self, batch: Batch) -> np.ndarray:
        out = np.empty((len(self.cbranch), batch.size))
        for k, (ref, _, _) in enumerate(self.cbranch):
            out[k] = self.value(batch, ref)
        return out

    def fixed_dc(self, batch: Batch) -> np.ndarray:
        """(nx, B) voltages of the fixed nodes at DC: the supply, EMFs at 0."""
        vx = np.zeros((self.nx, batch.size))
        vx[self.fixed.index(self.supply_node)] = batch.supply
        return vx

    def device_params(self, batch: Batch) -> list[dev.DeviceParams]:
        out = []
        for ref, _, _, _, model in self.bjts:
            beta = batch.beta.get(ref, np.full(batch.size, model.beta))
            out.append(dev.temperature_params(model, batch.temperature, beta))
        return out

    # -- DC -------------------------------------------------------------------------------
    def operating_point(
        self,
        batch: Batch,
        frozen: np.ndarray | None = None,
        fixed: np.ndarray | None = None,
        start: dict[str, tuple[np.ndarray, np.ndarray]] | None = None,
        max_iter: int = 100,
        strict: bool = True,
    ) -> OperatingPoint:
        """Solve the DC operating point of a batch.

        Parameters
        ----------
        batch
            The variants.
        frozen
            (n_cbranch, B) capacitor voltages: when given, each capacitor acts as a battery
            of that voltage (the quasi-static large-signal sweep); otherwise it is open.
        fixed
            (nx, B) voltages of the fixed nodes (default: the supply, EMFs at 0).
        start
            Junction voltages (vbe, vbc) to start Newton from, per transistor designator.
        strict
            When False, variants that do not converge are returned as they stand and marked
            in ``converged`` instead of raising (the clip sweep, whose far points may not).

        Raises
        ------
        ConvergenceError
            If some variant does not converge even with supply stepping (``strict`` only).
        """
        B = batch.size
        vx = self.fixed_dc(batch) if fixed is None else fixed
        G = _stamp(self.conductances(batch), self.rpairs, self.N)
        inj = np.zeros((self.N, B))
        if frozen is not None and self.cbranch:
            # Capacitors with a voltage given act as batteries; NaN leaves one open.
            held = np.isfinite(frozen)
            G += _stamp(np.where(held, FROZEN_G, 0.0), self.cpairs, self.N)
            volts = np.where(held, frozen, 0.0)
            for k, (_, a, b) in enumerate(self.cbranch):
                # A battery V from a to b, as a Norton source: G·V pushed into a, out of b.
                inj[a] += FROZEN_G * volts[k]
                inj[b] -= FROZEN_G * volts[k]
        red = self._reduce(G, vx, inj)
        params = self.device_params(batch)
        js = self._newton(red, vx, params, start, max_iter)
        if not js["converged"].all():
            bad = ~js["converged"]
            js2 = self._stepped(red, vx, params, bad, max_iter)
            js["vp"][:, bad] = js2["vp"]
            js["converged"][bad] = js2["converged"]
            if not js["converged"].all() and strict:
                raise ConvergenceError(
                    f"the operating point of {int((~js['converged']).sum())} of {B} variants could not be "
                    "found; check that the supply, bias resistors and transistor are connected as intended",
                )
        op = self._finish(red, G, vx, inj, params, batch, js)
        if not js["converged"].all():
            op.converged = js["converged"].copy()
        return op

    def _reduce(self, G, vx, inj):
        """Eliminate the internal nodes: Newton then runs on the ports only."""
        nf, P, I = self.nf, self.ports, self.internal
        Gff = G[:nf, :nf]
        Gfx = G[:nf, nf : nf + self.nx]
        rhs_f = -np.einsum("ijb,jb->ib", Gfx, vx) + inj[:nf]
        if I:
            GII = Gff[np.ix_(I, I)]
            GIP = Gff[np.ix_(I, P)]
            GPI = Gff[np.ix_(P, I)]
            GPP = Gff[np.ix_(P, P)]
            try:
                X = linalg.solve(GII, np.concatenate([GIP, rhs_f[I][:, None]], axis=1))
            except np.linalg.LinAlgError:
                raise CircuitError("the resistor network is singular (a node with no resistive connection?)") from None
            XP, Xr = X[:, : len(P)], X[:, len(P)]
            Yr = GPP - np.einsum("ikb,kjb->ijb", GPI, XP)
            Jr = rhs_f[P] - np.einsum("ikb,kb->ib", GPI, Xr)
        else:
            XP = Xr = None
            Yr = Gff[np.ix_(P, P)]
            Jr = rhs_f[P]
        return {"Yr": Yr, "Jr": Jr, "XP": XP, "Xr": Xr}

    def _all_voltages(self, vp, vx, red=None):
        """(N, B) node voltages; internal nodes filled in when ``red`` is given."""
        B = vx.shape[1]
        v = np.zeros((self.N, B))
        if self.ports:
            v[self.ports] = vp
        v[self.nf : self.nf + self.nx] = vx
        if red is not None and self.internal:
            v[self.internal] = red["Xr"] - (np.einsum("ikb,kb->ib", red["XP"], vp) if self.ports else 0.0)
        return v

    def _junctions(self, v, params):
        return [(p.sign * (v[b] - v[e]), p.sign * (v[b] - v[c])) for (_, c, b, e, _), p in zip(self.bjts, params)]

    def _device_system(self, red, vx, vj, params):
        """The Newton system on the ports with every transistor linearised at vj."""
        A = red["Yr"].copy()
        rhs = red["Jr"].copy()
        for (_, c, b, e, _), p, (vbe, vbc) in zip(self.bjts, params, vj):
            ic, ib, gcbe, gcbc, gbbe, gbbc = dev.currents(p, vbe, vbc)
            s = p.sign
            ic_eq = s * (ic - gcbe * vbe - gcbc * vbc)
            ib_eq = s * (ib - gbbe * vbe - gbbc * vbc)
            sb, se, sc = self._slot(b), self._slot(e), self._slot(c)
            for row, g_be, g_bc, ieq in ((c, gcbe, gcbc, ic_eq), (b, gbbe, gbbc, ib_eq)):
                for r_, sg in ((self._slot(row), 1.0), (se, -1.0)):
                    if r_[0] != "p":
                        continue
                    i = r_[1]
                    rhs[i] -= sg * ieq
                    for col, g in ((sb, g_be + g_bc), (se, -g_be), (sc, -g_bc)):
                        if col[0] == "p":
                            A[i, col[1]] += sg * g
                        elif col[0] == "x":
                            rhs[i] -= sg * g * vx[col[1]]
        return A, rhs

    def _newton(self, red, vx, params, start, max_iter, scale=None):
        """Newton's method with SPICE junction limiting; finished variants drop out."""
        B = vx.shape[1]
        vj = []
        for (ref, *_r), p in zip(self.bjts, params):
            if start and ref in start:
                vj.append((np.array(start[ref][0], dtype=float), np.array(start[ref][1], dtype=float)))
            else:
                # Start as if 100 µA flowed: close to most audio operating points.
                v0 = p.vt * np.log(1e-4 / p.is_)
                vj.append((np.broadcast_to(v0, (B,)).copy(), np.zeros(B)))
        if scale is not None:
            vx = vx * scale
            red = {**red, "Jr": red["Jr"] * scale, "Xr": None if red["Xr"] is None else red["Xr"] * scale}
        out_vp = np.zeros((len(self.ports), B))
        out_vj = [(a.copy(), b.copy()) for a, b in vj]
        converged = np.zeros(B, dtype=bool)
        active = np.arange(B)
        vp_old = np.zeros((len(self.ports), B))
        it = 0
        for it in range(1, max_iter + 1):
            A, rhs = self._device_system(red, vx, vj, params)
            vp = linalg.solve(A, rhs)
            raw = self._junctions(self._all_voltages(vp, vx), params)
            new_vj, change = [], np.zeros(vp.shape[1])
            for (vbe0, vbc0), (vbe, vbc), p in zip(vj, raw, params):
                vcrit = p.vt * np.log(p.vt / (np.sqrt(2.0) * p.is_))
                lbe = dev.pnjlim(vbe, vbe0, p.vt, vcrit)
                lbc = dev.pnjlim(vbc, vbc0, p.vt, vcrit)
                change = np.maximum.reduce([change, np.abs(lbe - vbe0), np.abs(lbc - vbc0),
                                            np.abs(lbe - vbe), np.abs(lbc - vbc)])
                new_vj.append((lbe, lbc))
            dv = np.max(np.abs(vp - vp_old), axis=0) if vp.size else np.zeros(vp.shape[1])
            vj = new_vj
            done = (change < 1e-9) & (dv < 1e-9 + 1e-9 * np.max(np.abs(vp), axis=0, initial=0.0))
            done &= np.all(np.isfinite(vp), axis=0)
            if done.any():
                idx = active[done]
                out_vp[:, idx] = vp[:, done]
                for k, (a, b) in enumerate(vj):
                    out_vj[k][0][idx] = a[done]
                    out_vj[k][1][idx] = b[done]
                converged[idx] = True
                keep = ~done
                if not keep.any():
                    break
                active = active[keep]
                vp, vx = vp[:, keep], vx[:, keep]
                vj = [(a[keep], b[keep]) for a, b in vj]
                red = {k: (v[..., keep] if v is not None else None) for k, v in red.items()}
                params = [_take_params(p, keep, keep.size) for p in params]
            vp_old = vp
        if not converged.all():
            out_vp[:, active] = vp
        return {"vp": out_vp, "vj": out_vj, "converged": converged, "iterations": it}

    def _stepped(self, red, vx, params, bad, max_iter):
        """Supply stepping for the variants that did not converge from the default start."""
        red_s = {k: (v[..., bad] if v is not None else None) for k, v in red.items()}
        vx_s = vx[:, bad]
        params_s = [_take_params(p, bad, vx.shape[1]) for p in params]
        start, res = None, None
        for lam in np.linspace(0.05, 1.0, 20):
            res = self._newton(red_s, vx_s, params_s, start, max_iter, scale=np.full(vx_s.shape[1], lam))
            start = {ref: res["vj"][k] for k, (ref, *_r) in enumerate(self.bjts)}
        return res

    def _finish(self, red, G, vx, inj, params, batch, js):
        v = self._all_voltages(js["vp"], vx, red)
        junction, ic_d, ib_d = {}, {}, {}
        dev_node = np.zeros((self.N, batch.size))
        for (ref, c, b, e, _), p, (vbe, vbc) in zip(self.bjts, params, self._junctions(v, params)):
            ic, ib, *_ = dev.currents(p, vbe, vbc)
            junction[ref] = (vbe, vbc)
            ic_d[ref], ib_d[ref] = ic, ib
            dev_node[c] += p.sign * ic
            dev_node[b] += p.sign * ib
            dev_node[e] -= p.sign * (ic + ib)
        # Current out of the supply terminal into the circuit: KCL at that fixed node.
        xs = self.index[self.supply_node]
        isup = np.einsum("jb,jb->b", G[xs], v) + dev_node[xs] - inj[xs]
        caps = {ref: v[a] - v[b] for ref, a, b in self.cbranch}
        return OperatingPoint(
            v={n: v[i] for i, n in enumerate(self.names)},
            junction=junction,
            ic=ic_d,
            ib=ib_d,
            supply_current=isup,
            iterations=js["iterations"],
            batch=batch,
            cap_voltage=caps,
        )

    # -- small signal ---------------------------------------------------------------------
    def small_signal(self, op: OperatingPoint):
        """Transistor stamps at the operating point: conductances and capacitances, (N, N, B)."""
        B = op.batch.size
        params = self.device_params(op.batch)
        Gd = np.zeros((self.N, self.N, B))
        Cd = np.zeros((self.N, self.N, B))
        for (ref, c, b, e, _), p in zip(self.bjts, params):
            vbe, vbc = op.junction[ref]
            _, _, gcbe, gcbc, gbbe, gbbc = dev.currents(p, vbe, vbc)
            for row, g_be, g_bc in ((c, gcbe, gcbc), (b, gbbe, gbbc)):
                for r_, sg in ((row, 1.0), (e, -1.0)):
                    Gd[r_, b] += sg * (g_be + g_bc)
                    Gd[r_, e] -= sg * g_be
                    Gd[r_, c] -= sg * g_bc
            cbe, cbe_vbc, cbc = dev.capacitances(p, vbe, vbc)
            for x, y, cap in ((b, e, cbe), (b, c, cbc)):
                Cd[x, x] += cap
                Cd[y, y] += cap
                Cd[x, y] -= cap
                Cd[y, x] -= cap
            for r_, sg in ((b, 1.0), (e, -1.0)):  # the B–E charge also moves with vbc
                Cd[r_, b] += sg * cbe_vbc
                Cd[r_, c] -= sg * cbe_vbc
        return Gd, Cd

    def capacitor_factors(self, op: OperatingPoint) -> tuple[np.ndarray, np.ndarray]:
        """Every capacitance of the small-signal circuit as ``U K Uᵀ`` on the free nodes.

        ``U`` is (nf, m): one column per capacitor branch (+1 at one node, −1 at the other,
        fixed nodes and ground left out), then two per transistor (base–emitter, base–
        collector). ``K`` is (m, m, B): each branch's capacitance on the diagonal, and for a
        transistor the block [[cbe, cbe_vbc], [0, cbc]] (the same quantities
        :meth:`small_signal` stamps). ``U @ K @ Uᵀ`` is the free-node block of the
        capacitance matrix :meth:`admittance` uses.
        """
        B = op.batch.size
        cols = [(a, b) for a, b in self.cpairs] + [pair for _, c, b, e, _ in self.bjts for pair in ((b, e), (b, c))]
        m = len(cols)
        U = np.zeros((self.nf, m))
        for j, (a, b) in enumerate(cols):
            if a < self.nf:
                U[a, j] += 1.0
            if b < self.nf:
                U[b, j] -= 1.0
        K = np.zeros((m, m, B))
        nc = len(self.cpairs)
        K[np.arange(nc), np.arange(nc)] = self.capacitance_values(op.batch)
        for t, ((ref, _, _, _, _), p) in enumerate(zip(self.bjts, self.device_params(op.batch))):
            vbe, vbc = op.junction[ref]
            cbe, cbe_vbc, cbc = dev.capacitances(p, vbe, vbc)
            j = nc + 2 * t
            K[j, j], K[j, j + 1], K[j + 1, j + 1] = cbe, cbe_vbc, cbc
        return U, K

    def admittance(self, op: OperatingPoint, freqs: np.ndarray, small=None, rows: int | None = None):
        """(rows, N, B, F) complex admittance matrix over the frequencies (Hz).

        ``rows`` keeps only the first rows (the free nodes' equations); default all N.
        """
        batch = op.batch
        Gd, Cd = small if small is not None else self.small_signal(op)
        G = _stamp(self.conductances(batch), self.rpairs, self.N) + Gd
        C = _stamp(self.capacitance_values(batch), self.cpairs, self.N) + Cd
        w = 2 * np.pi * np.asarray(freqs, dtype=float)  # (F,) or (B, F)
        r = self.N if rows is None else rows
        return G[:r, :, :, None] + 1j * (C[:r, :, :, None] * w)  # (measured 4× faster than filling .real/.imag)

    def ac(self, op: OperatingPoint, freqs, output_impedance: bool = False, small=None) -> ACResult:
        """Small-signal node voltages for every input (and the output-impedance test).

        Parameters
        ----------
        op
            The operating point to linearise at.
        freqs
            Frequencies in hertz.
        output_impedance
            Add an excitation of 1 A into the output node with the load removed.
        """
        freqs = np.atleast_1d(np.asarray(freqs, dtype=float))
        B, F = op.batch.size, freqs.shape[-1]
        nf = self.nf
        Y = self.admittance(op, freqs, small, rows=nf)
        Yff = Y[:, :nf]
        n_in = self.circuit.n_inputs
        n_exc = n_in + (1 if output_impedance else 0)
        rhs = np.zeros((nf, n_exc, B, F), dtype=complex)
        for k in range(n_in):
            j = self.index[f"in{k + 1}"]
            rhs[:, k] = -Y[:nf, j]
        if output_impedance:
            # The output test is a 1 A injection with the load removed. Removing the load is a
            # change of one diagonal entry, so by Sherman–Morrison the test column is the
            # injection with the load in place (the same matrix as the inputs, one more
            # right-hand side) scaled by 1/(1 − Y_load·z), z its own voltage.
            out = self.index[self.circuit.output_node]
            rhs[out, n_in] = 1.0
            V = linalg.solve(Yff, rhs)
            w = 2 * np.pi * freqs
            y_load = np.zeros((B, F), dtype=complex)
            for e in self.circuit.elements:
                if e.role == "load":
                    y_load += (1.0 / self.value(op.batch, e.ref))[:, None]
                elif e.role == "load_cap":
                    y_load += 1j * self.value(op.batch, e.ref)[:, None] * (w if w.ndim == 2 else w[None, :])
            V[:, n_in] /= 1.0 - y_load * V[out, n_in]
        else:
            V = linalg.solve(Yff, rhs)
        return ACResult(freqs, V, {n: i for i, n in enumerate(self.free)}, n_in)


def _take_params(p: dev.DeviceParams, idx, size) -> dev.DeviceParams:
    kw = {}
    for k in dev.DeviceParams.__slots__:
        v = getattr(p, k)
        kw[k] = v[idx] if isinstance(v, np.ndarray) and v.ndim >= 1 and v.shape[0] == size else v
    return dev.DeviceParams(**kw)
