"""Judging an analysed design against a spec's targets, with normalised margins.

A margin says how far the worst corner sits inside a target's limit, as a natural-log
ratio of amplitudes (nepers): ``ln(actual / limit)`` for a lower limit and
``ln(limit / actual)`` for an upper limit, so 0.10 means about 10 % to spare and a negative
margin means the target is missed. Targets stated in decibels convert at
1 Np = 20/ln 10 ≈ 8.686 dB: a gain window of ±1.5 dB can have at most 0.173 of margin,
reached when the gain sits in the middle of the window at every corner.

The *design margin* is the smallest margin over all targets; the search maximises it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["DB_PER_NEPER", "TargetResult", "judge", "design_margin"]

DB_PER_NEPER = 20 / math.log(10)


@dataclass(frozen=True)
class TargetResult:
    """One target's verdict: the worst value found, the limit, the margin and where."""

    name: str
    limit: str
    value: float
    worst: float
    unit: str
    margin: float
    corner: str = ""

    @property
    def passed(self) -> bool:
        return self.margin >= 0

    def to_json(self) -> dict:
        return {"target": self.name, "limit": self.limit, "nominal": self.value, "worst": self.worst, "unit": self.unit,
                "margin": self.margin, "pass": self.passed, "corner": self.corner}


def _ln(a: float, b: float) -> float:
    if not (a > 0 and b > 0) or math.isinf(a) and math.isinf(b):
        return -math.inf if not a > 0 else math.inf
    return math.log(a / b)


#: The transistor must stay in its active region at every corner: VCE at least this (V).
ACTIVE_VCE = 0.5
#: ... and conduct at least this (A).
ACTIVE_IC = 1e-6


def _active_region(an) -> TargetResult:
    """The implicit target: every transistor in its active region at every corner."""
    refs = [q.ref for q in an.circuit.transistors]
    several = len(refs) > 1
    worst = None
    for q in refs:
        # The first transistor's figures also exist without a designator (older analyses).
        key = f"vce:{q}" if f"vce:{q}" in an.low else "vce"
        ikey = f"ic:{q}" if f"ic:{q}" in an.low else "ic"
        vce_lo, ic_lo = an.low[key], an.low[ikey]
        m_vce = _ln(vce_lo, ACTIVE_VCE) if vce_lo > 0 else -math.inf
        m_ic = _ln(ic_lo, ACTIVE_IC) if ic_lo > 0 else -math.inf
        m = min(m_vce, m_ic)
        if worst is None or m < worst[0]:
            corner = an.corner_of.get(f"{key}:min", "")  # where the worst VCE (the value shown) was
            worst = (m, q, an.nominal[key], vce_lo, corner)
    m, q, nom, vce_lo, corner = worst
    limit = f"VCE ≥ {ACTIVE_VCE:g} V, IC ≥ 1 µA"
    if several:
        limit += f" ({', '.join(refs)})"
        corner = f"{q}: {corner}" if corner else q
    return TargetResult("active region", limit, nom, vce_lo, "V", m, corner)


def judge(an, spec) -> list[TargetResult]:
    """Every target of the spec against an :class:`~optimizer.analysis.evaluate.Analysis`.

    Besides the spec's own targets there is always one implicit target, ``active region``:
    at every corner every transistor has VCE ≥ 0.5 V and I_C ≥ 1 µA (a stage that saturates
    or turns off at a corner is not an amplifier there). With several transistors it is
    one target whose margin is the smallest of theirs; the limit lists the transistors, and
    the values and the corner (prefixed ``Q2: `` …) are those of the one with that margin.
    """
    t = spec.targets
    n = an.circuit.n_inputs
    out: list[TargetResult] = []
    c = an.corner_of
    out.append(_active_region(an))

    def worst_over(base: str, d: str):
        keys = [f"{base}:{k}" for k in range(1, n + 1)]
        vals = [(an.low[k] if d == "min" else an.high[k], k) for k in keys]
        v, key = (min(vals) if d == "min" else max(vals))
        nominal = min(an.nominal[k] for k in keys) if d == "min" else max(an.nominal[k] for k in keys)
        return v, nominal, c.get(f"{key}:{d}", "")

    if t.gain is not None:
        glo, gnom_lo, clo = worst_over("gain_db", "min")
        ghi, gnom_hi, chi = worst_over("gain_db", "max")
        m_lo = (glo - t.gain.min) / DB_PER_NEPER
        m_hi = (t.gain.max - ghi) / DB_PER_NEPER
        worst, corner = (glo, clo) if m_lo <= m_hi else (ghi, chi)
        out.append(TargetResult("gain", f"{t.gain.min:+.2f} .. {t.gain.max:+.2f} dB", gnom_lo if m_lo <= m_hi else gnom_hi,
                                worst, "dB", min(m_lo, m_hi), corner))
    need = t.required_swing()
    if need is not None and "swing" in an.large_worst:
        sw = an.large_worst["swing"]
        what = "headroom" if t.headroom_min is not None else "swing"
        if what == "headroom":
            nom = t.headroom_nominal
            out.append(TargetResult("headroom", f"≥ {t.headroom_min:g} dB above nominal",
                                    20 * math.log10(max(an.large["swing"], 1e-12) / nom), 20 * math.log10(max(sw, 1e-12) / nom), "dB",
                                    _ln(sw, need), an.large_corner.get("swing", "")))
        else:
            out.append(TargetResult("swing", f"≥ {need:.3g} V peak", an.large["swing"], sw, "V", _ln(sw, need),
                                    an.large_corner.get("swing", "")))
        if "thd" in an.large_worst:
            out.append(TargetResult("distortion", f"THD ≤ {t.distortion_max * 100:g} % at {need:.3g} V peak",
                                    100 * an.large["thd"], 100 * an.large_worst["thd"], "%",
                                    _ln(t.distortion_max, an.large_worst["thd"]), an.large_corner.get("thd", "")))
    if "swing" in an.large_worst:
        sw = an.large_worst["swing"]
        for k, inp in enumerate(spec.inputs, start=1):
            if inp.max_level is None:
                continue
            g = 10 ** (an.high[f"gain_db:{k}"] / 20)
            peak_out = inp.max_level * g
            out.append(TargetResult(f"overload {inp.name}", f"{inp.max_level:.3g} V peak in stays under the swing",
                                    inp.max_level * 10 ** (an.nominal[f"gain_db:{k}"] / 20), peak_out, "V",
                                    _ln(sw, peak_out), an.large_corner.get("swing", "")))
    if t.input_impedance_min is not None:
        v, nom, corner = worst_over("input_impedance", "min")
        out.append(TargetResult("input impedance", f"≥ {t.input_impedance_min:.4g} Ω", nom, v, "Ω",
                                _ln(v, t.input_impedance_min), corner))
    if t.output_impedance_max is not None:
        v = an.high["output_impedance"]
        out.append(TargetResult("output impedance", f"≤ {t.output_impedance_max:.4g} Ω", an.nominal["output_impedance"], v,
                                "Ω", _ln(t.output_impedance_max, v), c.get("output_impedance:max", "")))
    if t.low_cutoff_max is not None:
        v, nom, corner = worst_over("low_cutoff", "max")
        out.append(TargetResult("low cutoff", f"≤ {t.low_cutoff_max:g} Hz", nom, v, "Hz", _ln(t.low_cutoff_max, v), corner))
    if t.high_cutoff_min is not None:
        v, nom, corner = worst_over("high_cutoff", "min")
        out.append(TargetResult("high cutoff", f"≥ {t.high_cutoff_min:g} Hz", nom, v, "Hz", _ln(v, t.high_cutoff_min), corner))
    if t.supply_current_max is not None:
        v = an.high["supply_current"]
        out.append(TargetResult("supply current", f"≤ {t.supply_current_max * 1e3:g} mA", an.nominal["supply_current"], v, "A",
                                _ln(t.supply_current_max, v), c.get("supply_current:max", "")))
    if t.isolation_min is not None and n > 1:
        v, nom, corner = worst_over("crosstalk_db", "max")
        out.append(TargetResult("isolation", f"≥ {t.isolation_min:g} dB", -nom, -v, "dB",
                                (-v - t.isolation_min) / DB_PER_NEPER, corner))
    if t.snr_min is not None and an.noise:
        nominal_rms = t.headroom_nominal / math.sqrt(2)
        snr = 20 * math.log10(nominal_rms / an.noise["output_rms"])
        out.append(TargetResult("snr", f"≥ {t.snr_min:g} dB", snr, snr, "dB", (snr - t.snr_min) / DB_PER_NEPER, "nominal"))
    return out


def design_margin(results: list[TargetResult]) -> float:
    """The smallest margin over all targets (inf when the spec sets none)."""
    return min((r.margin for r in results), default=math.inf)
