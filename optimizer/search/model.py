"""The CP-SAT model of a ``divider-ce`` stage: indices into candidate values, and bounds.

**What the model is.** A *relaxation* of the analysis: for every candidate design its
margin is never below the margin the analysis finds (tests/test_search_model.py checks this
on random designs). So when the model says no design reaches a margin, none does — that is
how ``infeasible`` and ``optimal`` are proved — and every design it proposes is analysed in
full, ranked by the analysis' margin, and cut from the model when it falls short.

**How.** Each physical relation is written as a *bracket*: inequalities that hold for the
true value whatever the model leaves unresolved (the base–emitter voltage within an
emitter-current bucket, the effective beta between BF and BF·(1 + VCB/VA), integer
rounding, the reactance of the coupling and bypass capacitors at 1 kHz). The solver may pick
any value inside a bracket, so it can only be optimistic. The figures are evaluated at two
corners: LO (lowest beta and supply, coldest, resistors at the tolerance ends that lower the
current and the gain) for the lower limits, and HI (the other ends) for the upper limits.

**Margin.** ``u = S·e^t`` and ``v = S·e^(−t)`` (``u·v ≈ S²``) carry the common margin t:
a lower limit L becomes ``X ≥ L·u/S`` and an upper limit H becomes ``X ≤ H·v/S``, so
maximising u maximises the smallest margin (the margins of optimizer.analysis.targets).

Integer units: resistance 0.1 Ω, current 10 nA, voltage 1 nV (V = I·R exactly), conductance
K/R with K = 10¹⁰ (R in 0.1 Ω), capacitance 1 pF.
"""

from __future__ import annotations

import math

from ortools.sat.python import cp_model

from ..analysis.network import POT_END_RESISTANCE
from ..spec.specfile import Spec
from .bounds import SAT_KNEE, THD_SWING_FACTOR, Corner, device_corner, ie_buckets
from .candidates import Candidates, RoleSlot
from .intexpr import Bounded, Builder

__all__ = ["S", "StageModel", "TARGET_NAMES"]

S = 1000  # margin scale: u = S·e^t
R_U = 10.0  # integer units per ohm
I_U = 1e8  # per ampere
V_U = 1e9  # per volt
K = 10**10  # conductance scale
C_U = 1e12  # per farad
T_MIN, T_MAX = -3.0, 3.0
F_MID = 1000.0
#: Sizing rule of the coupling and bypass capacitors: at 1 kHz each one's reactance is at most
#: ρ = 1/10 of the resistance it works into (common practice, no source: the usual rule asks
#: the same at the lowest frequency). ρ² = RHO_NUM/RHO_DEN.
RHO = 0.1
RHO_NUM, RHO_DEN = 1, 100

#: The targets the model constrains (names as in optimizer.analysis.targets).
TARGET_NAMES = ("gain", "headroom", "input impedance", "output impedance", "low cutoff", "supply current", "active region")

# Tolerance ends at each corner (+1: value·(1 + tol), −1: value·(1 − tol)). LO lowers the
# current and the gain; HI raises the current (the worst case for saturation and the current
# budget) and the gain.
DIRS = {
    "LO": {"bias_top": +1, "bias_bottom": -1, "collector": -1, "emitter": +1, "emitter_bypassed": +1,
           "input_series": +1, "level_pot": +1},
    "HI": {"bias_top": +1, "bias_bottom": +1, "collector": +1, "emitter": -1, "emitter_bypassed": -1,
           "input_series": -1, "level_pot": -1},
    # The most current: the worst case for saturation and the current budget (bias only).
    "HS": {"bias_top": -1, "bias_bottom": +1, "collector": +1, "emitter": -1, "emitter_bypassed": -1,
           "input_series": -1, "level_pot": -1},
}


RHO_INV = 10  # 1/ρ


def bypass_re_min(spec: Spec) -> float:
    """The smallest emitter resistance re = VT/IE any design of the spec can have (Ω)."""
    from ..physics import thermal_voltage

    imax = spec.targets.supply_current_max or 20e-3
    return float(thermal_voltage(spec.ambient.min)) / imax


def sizing_rule_ok(spec: Spec, parts: dict, sources: list[float]) -> bool:
    """The capacitor sizing rule the model imposes, on a design's values.

    ``parts`` maps (role, input) → (value, tolerance). Coupling capacitors: X(1 kHz) at the
    capacitor's low end ≤ ρ × the resistance it works into at the resistors' low ends
    (Rs + Rseries, or Rs + half the smaller of Rseries and the pot); the output capacitor
    into the load; the bypass capacitor into RE1 + the smallest re.
    """
    def lo(key):
        v, t = parts[key]
        return v * (1 - t)

    def x_lo(key):
        return _x(lo(key))

    for k, rs in enumerate(sources, start=1):
        rs = max(rs, 1.0)
        into = rs + lo(("input_series", k))
        if ("level_pot", k) in parts:
            into = rs + min(lo(("input_series", k)), lo(("level_pot", k))) / 2
        if RHO_INV * x_lo(("input_cap", k)) > into * (1 + 1e-6):
            return False
    if RHO_INV * x_lo(("output_cap", None)) > spec.load.resistance * (1 + 1e-6):
        return False
    if ("bypass_cap", None) in parts:
        re1 = lo(("emitter", None)) if ("emitter", None) in parts else 0.0
        if RHO_INV * x_lo(("bypass_cap", None)) > (re1 + bypass_re_min(spec)) * (1 + 1e-6):
            return False
    return True


def _r(x: float) -> int:
    return int(round(x * R_U))


def _x(c: float) -> float:
    """Reactance (Ω) of a capacitance at 1 kHz."""
    return 1.0 / (2 * math.pi * F_MID * c)


class StageModel:
    """The model for one spec, one topology and its candidates.

    Attributes: ``m`` (the CpModel), ``x`` (one-hot booleans per slot), ``tr`` (one per
    transistor type), ``u``/``v`` (the margin), ``on`` (one literal per target, for
    explaining infeasibility).
    """

    def __init__(self, spec: Spec, cands: Candidates, separate: str | None = None, offset: dict | None = None):
        self.spec, self.cands = spec, cands
        self.m = cp_model.CpModel()
        self.b = Builder(self.m)
        self.x: dict[tuple, list] = {}
        self.slot: dict[tuple, RoleSlot] = {}
        self.on: dict[str, cp_model.IntVar] = {}
        self.separate = separate
        # Offsets make a target's limits stricter by e^δ (only to steer proposals: a model
        # with offsets is no longer a relaxation, so it never proves anything).
        self.offset = dict(offset or {})
        self._build()

    # -- helpers --------------------------------------------------------------------------
    def has(self, role: str, inp=None) -> bool:
        return (role, inp) in self.x

    def per(self, role: str, f, inp=None) -> Bounded:
        """Σ f(item)·x over a slot (the constant 0 when the slot does not exist)."""
        key = (role, inp)
        if key not in self.x:
            return self.b.const(0)
        return self.b.onehot(self.x[key], [f(it) for it in self.slot[key].items])

    def rv(self, role: str, d: int, inp=None) -> Bounded:
        """A resistance at one tolerance end (d = +1 or −1), in 0.1 Ω units."""
        return self.per(role, lambda it: _r(it.value * (1 + d * it.tolerance)), inp)

    def target(self, name: str):
        if name not in self.on:
            self.on[name] = self.m.new_bool_var(f"target[{name}]")
        return self.on[name]

    def _margin_pair(self, name: str):
        b = self.b
        u = b.var(int(S * math.exp(T_MIN)), int(S * math.exp(T_MAX)), name)
        v = b.var(int(S * math.exp(-T_MAX)), int(S * math.exp(-T_MIN)) + 1, name.replace("u", "v"))
        uv = b.prod(u, v, name + "·v")
        self.m.add(uv.expr <= S * S + 2 * S)
        return u, v

    def row(self, ct, target: str, also=()) -> None:
        ct.only_enforce_if([self.target(target), *also])

    def up(self, target: str, coef) -> cp_model.LinearExpr:
        """coef·u for a lower limit: the limit with the common margin (and the target's offset)."""
        return int(math.floor(coef * math.exp(self.offset.get(target, 0.0)))) * self.U(target).expr

    def down(self, target: str, coef) -> cp_model.LinearExpr:
        """coef·v for an upper limit."""
        return int(math.ceil(coef * math.exp(-self.offset.get(target, 0.0)))) * self.V(target).expr

    def U(self, target: str):
        """The margin variable u of a target (its own when it is being explained)."""
        return self.u_sep if self.separate == target else self.u

    def V(self, target: str):
        return self.v_sep if self.separate == target else self.v

    # -- the model ------------------------------------------------------------------------
    def _build(self) -> None:
        m, b, spec = self.m, self.b, self.spec
        for s in self.cands.slots:
            tag = s.role.name + ("" if s.input is None else str(s.input))
            xs = [m.new_bool_var(f"x[{tag}={i}]") for i in range(len(s.items))]
            m.add_exactly_one(xs)
            self.x[s.key] = xs
            self.slot[s.key] = s
        self.tr = [m.new_bool_var(f"transistor={nm}") for nm, _ in self.cands.transistors]
        m.add_exactly_one(self.tr)
        if self.has("emitter_bypassed") and self.has("bypass_cap"):
            m.add(self.x[("emitter_bypassed", None)][0] == self.x[("bypass_cap", None)][0])  # both absent or both present
        self.u, self.v = self._margin_pair("u")
        # A window's margin never exceeds half its width (valid for every design).
        self.t_cap = T_MAX
        if spec.targets.gain is not None:
            self.t_cap = min(T_MAX, (spec.targets.gain.max - spec.targets.gain.min) / 2 / (20 / math.log(10)))
            m.add(self.u.expr <= int(math.ceil(S * math.exp(self.t_cap))) + 1)
        if self.separate:
            # The target being explained gets its own margin; the rest keep u, v.
            self.u_sep, self.v_sep = self._margin_pair("u_sep")
        self._stock()
        self._sizing_rule()
        t = spec.targets
        self.corners = {
            "LO": Corner("LO", spec.supply.min, spec.ambient.min, "min", +1),
            "HI": Corner("HI", spec.supply.max, spec.ambient.max, "max", -1),
            "HS": Corner("HS", spec.supply.min, spec.ambient.max, "max", -1),
        }
        self.q = {name: self._corner(c) for name, c in self.corners.items()}
        # Orderings the true values always satisfy (redundant, they help the solver): LO has the
        # least current, HS the most at the low supply; HS has the least VCE.
        m.add(self.q["LO"]["IE"].expr <= self.q["HI"]["IE"].expr)
        m.add(self.q["LO"]["IE"].expr <= self.q["HS"]["IE"].expr)
        m.add(self.q["HS"]["vce"].expr <= self.q["LO"]["vce"].expr + 1)
        if t.supply_current_max is not None:
            # The emitter current never exceeds the supply current (valid at any margin ≥ 0).
            imax_u = int(math.ceil(t.supply_current_max * I_U / min(d.alpha_lo for d in self.q["HI"]["devs"])))
            for q in self.q.values():
                m.add(q["IE"].expr <= imax_u)
        if t.gain is not None:
            self._gain()
        if t.input_impedance_min is not None:
            self._zin()
        need = self._need_swing()
        if need is not None:
            self._swing(need)
        if t.supply_current_max is not None:
            self._current()
        if t.low_cutoff_max is not None:
            self._low_cutoff()
        if t.output_impedance_max is not None:
            self._zout()
        self._active()

    def _active(self) -> None:
        """The implicit target: VCE ≥ 0.5 V and I_C ≥ 1 µA at both corners (margin ln(x/limit))."""
        from ..analysis.targets import ACTIVE_IC, ACTIVE_VCE

        for q in self.q.values():
            self.row(self.m.add(q["vce"].expr * S >= self.up("active region", int(ACTIVE_VCE * V_U))), "active region")
            self.row(self.m.add(q["IE"].expr * S >= self.up("active region", int(ACTIVE_IC * I_U))), "active region")

    def _sizing_rule(self) -> None:
        """Coupling capacitors: X(1 kHz) ≤ ρ·R at the tolerance ends (see RHO)."""
        m = self.m
        for k, inp in enumerate(self.spec.inputs, start=1):
            rs = _r(max(inp.source_resistance, 1.0))
            rser = self.rv("input_series", -1, k)
            # Twice the resistance the capacitor works into is at least these (with a pot, the
            # track in parallel with the series resistor: at least half the smaller).
            into2 = [(rser + rs).times(2)]
            if self.has("level_pot", k):
                rp = self.per("level_pot", lambda it: _r(it.value * (1 - it.tolerance)), k)
                into2 = [rser + 2 * rs, rp + 2 * rs]
            for it, bvar in zip(self.slot[("input_cap", k)].items, self.x[("input_cap", k)]):
                xi = _r(_x(it.value * (1 - it.tolerance)))
                for r_in in into2:
                    m.add(2 * RHO_INV * xi <= r_in.expr).only_enforce_if(bvar)
        rl = _r(self.spec.load.resistance)
        for it, bvar in zip(self.slot[("output_cap", None)].items, self.x[("output_cap", None)]):
            if RHO_INV * _r(_x(it.value * (1 - it.tolerance))) > rl:
                m.add(bvar == 0)
        if self.has("bypass_cap"):
            # The bypass capacitor works into RE1 + re; re is at least VT/I_max.
            re_min = _r(bypass_re_min(self.spec))
            re1 = self.rv("emitter", -1)
            for it, bvar in zip(self.slot[("bypass_cap", None)].items, self.x[("bypass_cap", None)]):
                if it.absent:
                    continue
                m.add(RHO_INV * _r(_x(it.value * (1 - it.tolerance))) <= re1.expr + re_min).only_enforce_if(bvar)

    def _need_swing(self):
        """The output peak to reach within the THD limit, including each source's overload."""
        t = self.spec.targets
        need = t.required_swing()
        if t.gain is not None:
            g = 10 ** (t.gain.min / 20)
            for inp in self.spec.inputs:
                if inp.max_level is not None:
                    need = max(need or 0.0, inp.max_level * g)
        return need

    def _stock(self) -> None:
        """Stock quantities hold across all designators."""
        if not self.cands.stock:
            return
        uses: dict[int, list] = {}
        for key, xs in self.x.items():
            for it, bvar in zip(self.slot[key].items, xs):
                if it.stock_line is not None:
                    uses.setdefault(it.stock_line, []).append(bvar)
        for line, bs in uses.items():
            self.m.add(sum(bs) <= self.cands.stock_qty[line])

    def _corner(self, c: Corner) -> dict:
        """Operating point, emitter impedance, input branches and gains at one corner."""
        m, b, spec = self.m, self.b, self.spec
        dirs, lo_corner = DIRS[c.name], c.name == "LO"
        q: dict = {"corner": c}
        R1 = b.fix(self.rv("bias_top", dirs["bias_top"]), f"R1{c.name}")
        R2 = b.fix(self.rv("bias_bottom", dirs["bias_bottom"]), f"R2{c.name}")
        S12 = b.fix(R1 + R2, f"R12{c.name}")
        kp = b.div(R2.times(10**6), S12, f"k{c.name}", hi=10**6)  # R2/(R1+R2) in ppm, floor
        vcc = int(round(c.supply * V_U))
        VTH = b.var(0, vcc, f"VTH{c.name}")
        m.add(10**6 * VTH.expr >= vcc * kp.expr - 10**6)
        m.add(10**6 * VTH.expr <= vcc * kp.expr + vcc + 10**6)
        R1k = b.prod(R1, kp, f"R1k{c.name}")
        rth_lo = max(R1.lo * R2.lo // max(R1.hi + R2.hi, 1) - 1, 0)
        RTH = b.var(rth_lo, R1.hi, f"RTH{c.name}")
        m.add(10**6 * RTH.expr >= R1k.expr - 10**6)
        m.add(10**6 * RTH.expr <= R1k.expr + R1.expr + 10**6)
        RE1 = self.rv("emitter", dirs["emitter"])
        RE2 = self.rv("emitter_bypassed", dirs["emitter_bypassed"])
        RE = b.fix(RE1 + RE2, f"RE{c.name}")
        edges = ie_buckets()
        IE = b.var(int(edges[0] * I_U), int(edges[-1] * I_U), f"IE{c.name}")
        z = [m.new_bool_var(b.name(f"bucket{c.name}")) for _ in range(len(edges) - 1)]
        m.add_exactly_one(z)
        m.add(IE.expr >= sum(int(math.floor(edges[i] * I_U)) * z[i] for i in range(len(z))))
        m.add(IE.expr <= sum(int(math.ceil(edges[i + 1] * I_U)) * z[i] for i in range(len(z))))
        P1 = b.prod(IE, RE, f"IE.RE{c.name}")
        P2 = b.prod(IE, RTH, f"IE.RTH{c.name}")
        devs = [device_corner(tt.model(), c) for _, tt in self.cands.transistors]
        for lit, dc in zip(self.tr, devs):
            ba, bb = int(math.floor(dc.beta_lo)), int(math.ceil(dc.beta_hi))
            va = sum(int(math.floor(dc.vbe_lo[i] * V_U)) * z[i] for i in range(len(z)))
            vb = sum(int(math.ceil(dc.vbe_hi[i] * V_U)) * z[i] for i in range(len(z)))
            # IE·(RE + RTH/(β+1)) = VTH − VBE for some β in [ba, bb] and VBE in the bucket.
            m.add((bb + 1) * P1.expr + P2.expr <= (bb + 1) * (VTH.expr - va + 2)).only_enforce_if(lit)
            m.add((ba + 1) * P1.expr + P2.expr >= (ba + 1) * (VTH.expr - vb - 2)).only_enforce_if(lit)
        q.update(R1=R1, R2=R2, S12=S12, VTH=VTH, RTH=RTH, RE1=RE1, RE2=RE2, IE=IE, P1=P1, vcc=vcc, devs=devs)
        # VCE ≤ VCC − α·IE·RC − IE·RE (the collector carries at least α·IE).
        rc = b.fix(self.rv("collector", dirs["collector"]), f"RC{c.name}")
        Pc = b.prod(IE, rc, f"IE.RC{c.name}")
        amin = int(math.floor(1000 * min(d.alpha_lo for d in devs)))
        Pca = b.var(0, Pc.hi * amin // 1000 + 1, f"IC.RC{c.name}")
        m.add(1000 * Pca.expr <= amin * Pc.expr)
        m.add(1000 * Pca.expr >= amin * Pc.expr - 1000)
        vce = b.var(0, vcc, f"VCE{c.name}")
        m.add(vce.expr <= vcc - Pca.expr - P1.expr + 1)
        q["vce"] = vce
        if c.name == "HS":
            q["RE1"] = RE1
            return q
        vt = (min if lo_corner else max)(d.vt for d in devs)
        vt_u = int(round(vt * V_U))
        q["vt_u"] = vt_u
        re = b.div(b.const(vt_u), IE, f"re{c.name}")  # VT/IE in 0.1 Ω, floor
        q["re"] = re
        # Emitter impedance |a + z| at 1 kHz, a = re + RE1, z = RE2∥C_E = r − j·y:
        # x = a + r ≤ |a + z| = √(x² + y²) ≤ min(x + y, x + y²/(2x)) (see _emitter).
        a = b.fix(re + RE1, f"a{c.name}")
        x_lo, E_up = self._emitter(a, dirs, c.name)
        E = x_lo if lo_corner else E_up
        q["E"], q["a"], q["x"], q["E_up"] = E, a, x_lo, E_up
        # Input branches: R' = Rseries + Rs, or Rseries + Rs∥Rpot with the pot at maximum;
        # in series with the coupling capacitor's reactance X (at most X_k at 1 kHz).
        G, Geff = [], []
        for k, inp in enumerate(spec.inputs, start=1):
            rs = max(inp.source_resistance, 1.0)
            ser = self.rv("input_series", dirs["input_series"], k)
            if self.has("level_pot", k):
                d = dirs["level_pot"]
                par = self.per("level_pot", lambda it: _r(rs * (it.value * (1 + d * it.tolerance) + POT_END_RESISTANCE)
                                                          / (rs + it.value * (1 + d * it.tolerance) + 2 * POT_END_RESISTANCE)), k)
                Rp = b.fix(ser + par, f"Rbr{k}{c.name}")
                # Only Rpot/(Rs + Rpot) of the source reaches the branch: α/R' = 1/R''.
                f = self.per("level_pot", lambda it: int(round(1e4 * (1 + rs / (it.value * (1 + d * it.tolerance))))), k)
                Pf = b.prod(b.fix(ser, f"Rser{k}{c.name}"), f, f"Rser.f{k}{c.name}")
                Rpp = b.var(max((Pf.lo // 10**4) + _r(rs) - 1, 1), Pf.hi // 10**4 + _r(rs) + 1, f"Reff{k}{c.name}")
                m.add(10**4 * Rpp.expr >= Pf.expr + 10**4 * _r(rs) - 10**4)
                m.add(10**4 * Rpp.expr <= Pf.expr + 10**4 * _r(rs) + 10**4)
            else:
                Rp = b.fix(ser + _r(rs), f"Rbr{k}{c.name}")
                Rpp = Rp
            # With the sizing rule X ≤ ρ·R at 1 kHz: ρ-corrections are small and linear.
            if lo_corner:
                # |1/(R + jX)| ≤ 1/R for the source's share; the base node's load is at least
                # Re(1/(R + jX)) ≥ (1/R)/(1 + ρ²).
                ge_full = b.div(b.const(K), Rp, f"G{k}{c.name}")
                gk = b.var(0, ge_full.hi, f"Gre{k}{c.name}")
                m.add(RHO_DEN * gk.expr >= RHO_DEN * ge_full.expr - RHO_NUM * ge_full.expr - RHO_DEN)
                m.add(gk.expr <= ge_full.expr)
                ge = ge_full if Rpp is Rp else b.div(b.const(K), Rpp, f"Geff{k}{c.name}")
            else:
                # |1/(R + jX)| ≥ (1/R)/√(1 + ρ²) ≥ (1/R)(1 − ρ²/2) for the source's share.
                gk = b.div(b.const(K), Rp, f"G{k}{c.name}")
                ge_full = gk if Rpp is Rp else b.div(b.const(K), Rpp, f"Geff{k}{c.name}")
                ge = b.var(0, ge_full.hi, f"Geffx{k}{c.name}")
                m.add(2 * RHO_DEN * ge.expr >= 2 * RHO_DEN * ge_full.expr - RHO_NUM * ge_full.expr - 2 * RHO_DEN)
                m.add(ge.expr <= ge_full.expr)
            G.append(gk)
            Geff.append(ge)
        q["G"], q["Geff"] = G, Geff
        RTHp = b.fix(RTH + 1, f"RTHp{c.name}")
        Grth = b.div(b.const(K), RTHp, f"Grth{c.name}")
        # The transistor's input, 1/Zb with Zb = (β+1)(a + z). HI: |1/Zb| ≤ 1/((β+1)a).
        # LO: Re(1/Zb) = Re(a + z)/((β+1)|a + z|²) ≥ a/((β+1)·E_up²).
        n = len(spec.inputs)
        if lo_corner:
            bb1 = b.fix(b.onehot(self.tr, [int(math.ceil(dc.beta_hi)) + 1 for dc in devs]), "beta+1 LO")
            BE = b.prod(E_up, bb1, "(b+1)Eup")
            t1 = b.div(b.const(K), b.fix(BE + 1, "(b+1)Eup+1"), "K/(b+1)Eup")
            t2 = b.prod(t1, x_lo, "K.x/(b+1)Eup")
            # a ≤ E_up, so the quotient never exceeds K/((β+1)·a) ≤ K/((β+1)·a_min).
            Gzb = b.div(t2, b.fix(E_up + 1, "Eup+1"), f"Gzb{c.name}", hi=K // max(bb1.lo * max(x_lo.lo, 1), 1) + 1)
        else:
            ba1 = b.fix(b.onehot(self.tr, [int(math.floor(dc.beta_lo)) + 1 for dc in devs]), "beta+1 HI")
            ZB = b.prod(x_lo, ba1, f"Zb{c.name}")
            Gzb = b.fix(b.div(b.const(K), b.fix(ZB + 1, f"Zbp{c.name}"), f"Gzb0{c.name}") + 1, f"Gzb{c.name}")
        Gsum = Grth + Gzb
        for g in G:
            Gsum = Gsum + g
        Gb = b.fix(Gsum if lo_corner else Gsum + (n + 2), f"Gb{c.name}")
        q["Gb"], q["Grth"], q["Gzb"] = Gb, Grth, Gzb
        # Rs'/(β+1): the source resistance at the base seen from the emitter. Rs' ≤
        # 1/(G_RTH + Σ G_k); β at the corner's low end for the chosen type.
        gsrc = Grth
        for g in G:
            gsrc = gsrc + g
        rsrc = b.div(b.const(K), b.fix(gsrc + 1, f"Gsrc{c.name}"), f"Rs'{c.name}")
        bmin_all = int(math.floor(min(dc.beta_lo for dc in devs))) + 1
        rsb = b.var(0, rsrc.hi // bmin_all + 2, f"Rs'/beta{c.name}")
        for lit, dc in zip(self.tr, devs):
            bt = int(math.floor(dc.beta_lo)) + 1
            m.add(bt * rsb.expr <= rsrc.expr + 2 * bt).only_enforce_if(lit)
        q["rsb"] = rsb
        # Load conductance g_L = 1/RC + 1/RL, plus 1/ro and the output capacitor at HI.
        g_rl = int(round(K / _r(spec.load.resistance)))
        dcoll = dirs["collector"]
        grc = self.per("collector", lambda it: int(round(K / _r(it.value * (1 + dcoll * it.tolerance)))))
        if lo_corner:
            gL = b.fix(grc + g_rl, f"gL{c.name}")
        else:
            vaf = min(dc.va for dc in devs)
            # The transistor's output conductance: 1/ro ≤ IC/VAF ≤ IE/VAF, and with the
            # emitter degenerated r_out ≥ ro·gm·min(x, rπ)/2, so g_out ≤ 2VT/(VAF·min(x, rπ))
            # ≤ 2VT/(VAF·x) + 2VT/(VAF·rπ). Units: 1 S = 1e9, 1 A = 1e8, 1 Ω = 10.
            gro = b.var(0, 10 * IE.hi // int(vaf) + 2, "g_ro")
            m.add(int(vaf) * gro.expr <= 10 * IE.expr + int(vaf))
            kx = int(math.ceil(2 * vt * 1e9 * R_U / vaf))
            q1 = b.div(b.const(kx), b.fix(x_lo + 1, "x+1"), "2VT/VAF.x")
            bmin_t = int(math.floor(min(dc.beta_lo for dc in devs))) + 1
            q2 = b.div(b.const(kx), b.fix((re + 1).times(bmin_t), "rpi"), "2VT/VAF.rpi")
            m.add(gro.expr <= q1.expr + q2.expr + 2)
            # The output capacitor (X ≤ ρ·RL by the sizing rule) lowers |v_out| by at most
            # a factor 1/√(1 + ρ²): g_L·(1 + ρ²/2).
            base = b.fix(grc + g_rl + gro + 1, "gL0")
            gL = b.var(base.lo, base.hi + base.hi * RHO_NUM // (2 * RHO_DEN) + 2, f"gL{c.name}")
            m.add(2 * RHO_DEN * gL.expr <= 2 * RHO_DEN * base.expr + RHO_NUM * base.expr + 2 * RHO_DEN)
            m.add(gL.expr >= base.expr)
        q["gL"] = gL
        PQ = b.prod(E, gL, f"E.gL{c.name}")
        Q = b.scale_down(PQ, 10**5, up=not lo_corner, base=f"Q{c.name}")
        Qp = b.fix(Q + 1, f"Qp{c.name}")
        q["Qp"] = Qp
        return q

    def _emitter(self, a: Bounded, dirs: dict, cname: str) -> tuple[Bounded, Bounded]:
        """(x, E_up): x = a + Re z ≤ |a + z| ≤ E_up, z = RE2∥C_E at 1 kHz.

        For each (RE2, C_E) pair, Re z, Im z and Im² z are bracketed over the capacitor's
        tolerance (rows per capacitor choice, linear in RE2's choice).
        """
        b, m = self.b, self.m
        if not self.has("bypass_cap"):
            return a, a
        re2_items = self.slot[("emitter_bypassed", None)].items
        re2_x = self.x[("emitter_bypassed", None)]
        d = dirs["emitter_bypassed"]
        rows = []
        hi_r = hi_y = hi_y2 = 0
        for it_c, x_c in zip(self.slot[("bypass_cap", None)].items, self.x[("bypass_cap", None)]):
            if it_c.absent:
                continue
            xs = (_x(it_c.value * (1 + it_c.tolerance)), _x(it_c.value * (1 - it_c.tolerance)))  # X range
            rr_lo, rr_hi, yy_hi, y2_lo, y2_hi = [], [], [], [], []
            for it_r in re2_items:
                if it_r.absent:
                    for lst in (rr_lo, rr_hi, yy_hi, y2_lo, y2_hi):
                        lst.append(0)
                    continue
                R = it_r.value * (1 + d * it_r.tolerance)
                re_z = [R * X * X / (R * R + X * X) for X in xs]
                im_z = [R * R * X / (R * R + X * X) for X in xs]
                y_max = R / 2 if xs[0] <= R <= xs[1] else max(im_z)
                rr_lo.append(int(math.floor(R_U * min(re_z))))
                rr_hi.append(int(math.ceil(R_U * max(re_z))) + 1)
                yy_hi.append(int(math.ceil(R_U * y_max)) + 1)
                y2_lo.append(int(math.floor(R_U**2 * min(im_z) ** 2)))
                y2_hi.append(int(math.ceil(R_U**2 * y_max**2)) + 1)
            hi_r, hi_y, hi_y2 = max(hi_r, max(rr_hi)), max(hi_y, max(yy_hi)), max(hi_y2, max(y2_hi))
            rows.append((x_c, rr_lo, rr_hi, yy_hi, y2_lo, y2_hi))
        r = b.var(0, hi_r, f"Re_z{cname}")
        y = b.var(0, hi_y, f"Im_z{cname}")
        y2 = b.var(0, hi_y2, f"Im2_z{cname}")
        lin = lambda vals: sum(v * xx for v, xx in zip(vals, re2_x) if v)  # noqa: E731
        for x_c, rr_lo, rr_hi, yy_hi, y2_lo, y2_hi in rows:
            m.add(r.expr >= lin(rr_lo)).only_enforce_if(x_c)
            m.add(r.expr <= lin(rr_hi)).only_enforce_if(x_c)
            m.add(y.expr <= lin(yy_hi)).only_enforce_if(x_c)
            m.add(y2.expr >= lin(y2_lo)).only_enforce_if(x_c)
            m.add(y2.expr <= lin(y2_hi)).only_enforce_if(x_c)
        absent = self.x[("bypass_cap", None)][0]
        for v in (r, y, y2):
            m.add(v.expr == 0).only_enforce_if(absent)
        x = b.fix(a + r, f"x{cname}")
        q = b.div(y2, b.fix(x.times(2) + 1, f"2x{cname}"), f"y2/2x{cname}")
        E_up = b.var(x.lo, x.hi + min(y.hi, q.hi) + 2, f"Eup{cname}")
        m.add(E_up.expr >= x.expr)
        m.add(E_up.expr <= x.expr + y.expr + 1)
        m.add(E_up.expr <= x.expr + q.expr + 2)
        return x, E_up

    def _gains_at(self, q: dict) -> list:
        """Gain of each input at a corner, ×1e4 and without α_F: A = 1e9·Geff_k / (Gb·Q).

        The quotient's domain is capped at 2·10⁸ (a gain of 2·10⁴): beyond that no stage of
        this kind goes, and the rows that use it never need more.
        """
        b, lo_corner = self.b, q["corner"].name == "LO"
        P5 = b.prod(q["Gb"], q["Qp"], f"Gb.Q{q['corner'].name}")
        out = []
        for k, ge in enumerate(q["Geff"], start=1):
            num = b.fix(((ge + 1) if lo_corner else ge).times(10**9), f"Anum{k}")
            a = b.var(0, 2 * 10**8, f"A{k}{q['corner'].name}")
            self.m.add_division_equality(a.expr, num.expr, P5.expr)
            out.append(a)
        return out

    # -- targets --------------------------------------------------------------------------
    def _gain(self) -> None:
        t = self.spec.targets.gain
        gmin, gmax = 10 ** (t.min / 20), 10 ** (t.max / 20)
        lo, hi = self.q["LO"], self.q["HI"]
        lo["A"], hi["A"] = self._gains_at(lo), self._gains_at(hi)
        for k in range(len(self.spec.inputs)):
            for lit, dlo, dhi in zip(self.tr, lo["devs"], hi["devs"]):
                a_lo = dhi.beta_lo / (dhi.beta_lo + 1)
                a_hi = dlo.beta_hi / (dlo.beta_hi + 1)
                # A·α_F ≥ gmin·1e4·u/S at LO;  A·α_F ≤ gmax·1e4·v/S at HI.
                self.row(self.m.add(int(math.ceil(a_hi * 1e6)) * (lo["A"][k].expr + 1) * S
                                    >= self.up("gain", int(math.floor(gmin * 1e10)))), "gain", [lit])
                self.row(self.m.add(int(math.floor(a_lo * 1e6)) * hi["A"][k].expr * S
                                    <= self.down("gain", int(math.ceil(gmax * 1e10)))), "gain", [lit])

    def _zin_inner(self, k: int) -> Bounded:
        """Upper bound of Rseries + 1/G_rest (+ the input capacitor's reactance) at LO: the
        impedance input k sees past its level control (cached)."""
        cache = self.q["LO"].setdefault("zin_inner", {})
        if k in cache:
            return cache[k]
        b, lo = self.b, self.q["LO"]
        rest = lo["Grth"] + lo["Gzb"] + 1
        for j, gj in enumerate(lo["G"], start=1):
            if j != k:
                rest = rest + gj
        zrest = b.div(b.const(K), b.fix(rest, f"Grest{k}"), f"Zrest{k}")
        ser = self.rv("input_series", DIRS["LO"]["input_series"], k)
        xcin = self.per("input_cap", lambda it: _r(_x(it.value * (1 - it.tolerance))), k)
        cache[k] = b.fix(ser + zrest + xcin + 2, f"Zinner{k}")
        return cache[k]

    def _zin(self) -> None:
        """Zin = Rpot ∥ (Rseries + 1/G_rest) (+ the input capacitor's reactance), at LO."""
        zmin = self.spec.targets.input_impedance_min
        m, b = self.m, self.b
        for k in range(1, len(self.spec.inputs) + 1):
            inner = self._zin_inner(k)
            if self.has("level_pot", k):
                yin = b.div(b.const(K), inner, f"Yinner{k}")
                gpot = self.per("level_pot", lambda it: int(math.floor(K / _r(it.value * (1 + it.tolerance) + 2 * POT_END_RESISTANCE))), k)
                self.row(m.add((gpot.expr + yin.expr) * S <= self.down("input impedance", int(math.ceil(K / _r(zmin))))),
                         "input impedance")
            else:
                self.row(m.add(inner.expr * S >= self.up("input impedance", _r(zmin))), "input impedance")

    def _swing(self, need: float) -> None:
        """Swing at the THD limit: bounded above by cutoff, saturation and distortion."""
        m, b = self.m, self.b
        lo, hi = self.q["LO"], self.q["HI"]
        need_u = need * V_U
        thd = self.spec.targets.distortion_max
        rl = self.spec.load.resistance
        IE = lo["IE"]
        # r_L = RC∥RL with RC at its low end.
        rL = b.fix(self.per("collector", lambda it: _r(it.value * (1 - it.tolerance) * rl / (it.value * (1 - it.tolerance) + rl)) + 1), "rL")
        Y1 = b.prod(IE, rL, "IE.rL")  # IC·rL bound, nV
        # Cutoff: the collector can rise at most IC·rL.
        self.row(m.add(Y1.expr * S >= self.up("headroom", int(math.floor(need_u)))), "headroom")
        # Distortion: swing ≤ κ·4·THD·(1 + gm·(RE1 + Rs'/(β+1)))·IC·rL.
        rsb = lo["rsb"]
        Dg = b.fix(lo["RE1"] + rsb, "Rdeg")
        P3 = b.prod(IE, Dg, "IE.Rdeg")
        X1 = b.scale_down(P3 + lo["vt_u"], 10**5, up=True, base="X1")
        Y1s = b.scale_down(Y1, 10**5, up=True, base="Y1s")
        XY = b.prod(X1, Y1s, "X1.Y1")
        kap = THD_SWING_FACTOR * 4 * thd
        coef = int(math.floor(need_u * lo["vt_u"] / (kap * 1e10 * S)))
        self.row(m.add(XY.expr >= self.up("headroom", coef)), "headroom")
        # Saturation: as the output falls by v, the collector falls by v and the emitter rises
        # by v·RE1/rL, so VCE reaches the knee V_K when v = (VCE − V_K)·rL/(rL + RE1), with
        # VCE = VCC − IC·RC − IE·RE; at both corners.
        for qd in (lo, self.q["HS"]):
            cn = qd["corner"].name
            dcol = DIRS[cn]["collector"]
            vce = qd["vce"]
            vk = int(SAT_KNEE * V_U)
            vce_k = b.var(0, qd["vcc"], f"VCE-knee{cn}")
            m.add(vce_k.expr <= vce.expr - vk)
            rl_c = b.fix(self.per("collector", lambda it, s=dcol: _r(it.value * (1 + s * it.tolerance) * rl
                                                                      / (it.value * (1 + s * it.tolerance) + rl)) + 1), f"rL{cn}")
            frac = b.div(rl_c.times(10**4), b.fix(rl_c + qd["RE1"], f"rL+RE1{cn}"), f"rL/(rL+RE1){cn}", hi=10**4)
            Ps = b.prod(b.scale_down(vce_k, 10**3, up=True, base=f"VCEk/1e3{cn}"), b.fix(frac + 1, f"frac+{cn}"), f"sat{cn}")
            # Ps = ⌈(VCE − V_K)/1 µV⌉·(frac·1e4 + 1) is (VCE − V_K)·frac in units of 0.1 nV.
            self.row(m.add(Ps.expr * S >= self.up("headroom", 10 * int(math.floor(need_u)))), "headroom")

    def _current(self) -> None:
        """Supply current ≥ α·IE + VCC/(R1 + R2) at HI (the divider carries at least that)."""
        imax = self.spec.targets.supply_current_max
        hi = self.q["HI"]
        idiv = self.b.div(self.b.const(hi["vcc"]), hi["S12"], "Idiv")
        amin = int(math.floor(1000 * min(d.alpha_lo for d in hi["devs"])))
        self.row(self.m.add((amin * hi["IE"].expr + 1000 * idiv.expr) * S
                            <= self.down("supply current", int(math.ceil(imax * I_U * 1000)))), "supply current")

    def _cap_rows(self, role, inp, rbounds, also=()) -> None:
        """C·R ≥ 1/(2π·fmax)·e^t for each capacitor choice and each resistance bound R."""
        fmax = self.spec.targets.low_cutoff_max
        kf = C_U * R_U / (2 * math.pi * fmax)
        D = 1000
        for it, bvar in zip(self.slot[(role, inp)].items, self.x[(role, inp)]):
            if it.absent:
                continue
            coef = int(math.floor(D * kf / (S * it.value * (1 - it.tolerance) * C_U)))
            for rb in rbounds:
                self.row(self.m.add(D * rb.expr >= self.up("low cutoff", coef)), "low cutoff", [bvar, *also])

    def _low_cutoff(self) -> None:
        """Each capacitor's own corner is a lower bound of the whole response's corner."""
        m, b, lo = self.m, self.b, self.q["LO"]
        r1, r2 = self.rv("bias_top", +1), self.rv("bias_bottom", +1)
        for k, inp in enumerate(self.spec.inputs, start=1):
            rs = _r(max(inp.source_resistance, 1.0))
            # Zin ≤ Rseries + 1/G_rest at LO (and ≤ the pot's track with a level control).
            bounds = [self._zin_inner(k) + rs]
            if self.has("level_pot", k):
                bounds.append(self.per("level_pot", lambda it: _r(it.value * (1 + it.tolerance) + 2 * POT_END_RESISTANCE), k) + rs)
            self._cap_rows("input_cap", k, bounds)
        self._cap_rows("output_cap", None, [self.rv("collector", +1) + _r(self.spec.load.resistance)])
        if self.has("bypass_cap"):
            self._bypass_cutoff()

    def _bypass_cutoff(self) -> None:
        """The bypass section's own −3 dB point, a lower bound of the whole response's.

        With a = re + RE1 + Rs'/(β+1) in series and b = RE2 bypassed by C, the section's gain
        ratio is a/|a + b/(1 + jωbC)| ≥ 1/√2 only if b ≤ (√2 − 1)·a·(1 + (ωbC)²). At the
        target frequency this must hold (at margin 0; the margin itself is not applied here).
        """
        m, b, lo = self.m, self.b, self.q["LO"]
        fmax = self.spec.targets.low_cutoff_max
        w = 2 * math.pi * fmax
        rsb = lo["rsb"]
        a_up = b.fix(lo["re"] + lo["RE1"] + rsb + 2, "a_up")
        # Dividing by b: the section stays within 3 dB iff a ≥ 1/((√2 − 1)(1/b + (ωC)²·b)),
        # a constant for each (RE2, C_E) pair; one row per capacitor, linear in RE2's choice.
        re2_items = self.slot[("emitter_bypassed", None)].items
        re2_x = self.x[("emitter_bypassed", None)]
        for it, bvar in zip(self.slot[("bypass_cap", None)].items, self.x[("bypass_cap", None)]):
            if it.absent:
                continue
            cval = it.value * (1 + it.tolerance)  # the largest capacitance: the easiest case
            need = []
            for r_it in re2_items:
                if r_it.absent:
                    need.append(0)
                    continue
                bo = r_it.value * (1 + r_it.tolerance)
                f = (math.sqrt(2) - 1) * (1 / bo + (w * cval) ** 2 * bo)
                need.append(int(math.floor(R_U / f)))
            self.row(m.add(a_up.expr >= sum(n_ * x_ for n_, x_ in zip(need, re2_x) if n_)), "low cutoff", [bvar])

    def _zout(self) -> None:
        """Zout ≥ RC∥ro ≥ RC·VAF/(VAF + VCC) (ro ≥ VAF/IC and IC·RC ≤ VCC)."""
        zmax = self.spec.targets.output_impedance_max
        vaf = min(tt.model().va for _, tt in self.cands.transistors)
        f = vaf / (vaf + self.spec.supply.max)
        zo = self.per("collector", lambda it: _r(it.value * (1 - it.tolerance) * f))
        self.row(self.m.add(zo.expr * S <= self.down("output impedance", _r(zmax))), "output impedance")

    # -- objectives and cuts ---------------------------------------------------------------
    def simplicity(self):
        """(parts, BOM lines, parts bought, capacitor size, tie-break) as linear expressions.

        Parts: every part fitted. Lines: distinct (kind, value) pairs. Bought: parts not taken
        from the stock list. Capacitor size: the sum over capacitors of the rank of the value
        among that capacitor's candidates (smaller capacitors are smaller and cheaper).
        Tie-break: the sum of item indices (smaller values first), so the best design is
        unique and every run finds the same one.
        """
        m = self.m
        parts = 1  # the transistor
        bought = 0
        tie = 0
        capsize = 0
        by_value: dict[tuple, list] = {}
        for key, xs in self.x.items():
            items = self.slot[key].items
            kind = self.slot[key].role.kind
            ranks = {v: r for r, v in enumerate(sorted({round(it.value, 15) for it in items if not it.absent}))}
            for i, (it, bvar) in enumerate(zip(items, xs)):
                if it.absent:
                    continue
                parts = parts + bvar
                if it.source != "stock":
                    bought = bought + bvar
                tie = tie + i * bvar
                if kind == "C":
                    capsize = capsize + ranks[round(it.value, 15)] * bvar
                by_value.setdefault((kind, round(it.value, 15)), []).append(bvar)
        lines = 0
        for vals in by_value.values():
            used = m.new_bool_var("")
            for bvar in vals:
                m.add_implication(bvar, used)
            lines = lines + used
        return parts, lines, bought, capsize, tie

    def hint(self, choice) -> None:
        """Suggest a design to start from (the best of the previous round)."""
        for key, i in choice.pick:
            for j, bvar in enumerate(self.x[key]):
                self.m.add_hint(bvar, j == i)
        for j, bvar in enumerate(self.tr):
            self.m.add_hint(bvar, j == choice.transistor)

    def forbid_core(self, pick: dict, transistor: int) -> None:
        """Cut every design with this transistor and these resistors and pots (any capacitors)."""
        lits = [self.x[key][i] for key, i in pick.items() if self.slot[key].role.kind != "C"] + [self.tr[transistor]]
        self.m.add_bool_or([~lit for lit in lits])

    def forbid(self, pick: dict, transistor: int) -> None:
        """Cut one design from the model (a no-good on its choices)."""
        lits = [self.x[key][i] for key, i in pick.items()] + [self.tr[transistor]]
        self.m.add_bool_or([~lit for lit in lits])

    # -- decoding -------------------------------------------------------------------------
    def chosen(self, value) -> tuple[dict, int]:
        """(slot key → item index, transistor index) from a solver's ``value`` function."""
        pick = {key: next(i for i, bvar in enumerate(xs) if value(bvar)) for key, xs in self.x.items()}
        tr = next(i for i, bvar in enumerate(self.tr) if value(bvar))
        return pick, tr


def model_margins(spec: Spec, cands: Candidates, pick: dict, transistor: int, time_limit: float = 10.0,
                  names=None) -> dict:
    """The model's own margin for each target (or for those in ``names``), with every
    decision fixed to a choice.

    Used to check that the model never says less than the analysis (it is a relaxation).
    Returns target name → margin (nepers); −inf where the model has no solution.
    """
    out = {}
    if names is None:
        names = StageModel(spec, cands).on.keys()
    for name in names:
        sm = StageModel(spec, cands)
        for key, xs in sm.x.items():
            sm.m.add(xs[pick[key]] == 1)
        sm.m.add(sm.tr[transistor] == 1)
        for other, lit in sm.on.items():
            sm.m.add(lit == (1 if other == name else 0))
        sm.m.maximize(sm.u.expr)
        solver = cp_model.CpSolver()
        solver.parameters.num_workers = 1
        solver.parameters.max_time_in_seconds = time_limit
        st = solver.solve(sm.m)
        if st == cp_model.OPTIMAL:
            out[name] = math.log(solver.value(sm.u.expr) / S)
        elif st == cp_model.FEASIBLE:
            out[name] = math.log(solver.best_objective_bound / S)
        else:
            out[name] = -math.inf
    return out
