"""Numbers the constraint model takes from the analysis engine.

The model never restates device physics on its own: the base–emitter voltage at a current,
the effective current gain at a corner and the temperature scaling all come from
:mod:`optimizer.analysis.bjt`, the same equations the analysis solves.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..analysis import bjt as dev
from ..physics import thermal_voltage

__all__ = ["BUCKET_RATIO", "Corner", "DeviceCorner", "THD_SWING_FACTOR", "device_corner", "ie_buckets"]

#: Emitter-current buckets are this ratio wide; within one the base–emitter voltage is known
#: to within VT·ln(ratio) ≈ 4.7 mV at 25 °C.
BUCKET_RATIO = 1.25
I_MIN = 1e-6
I_MAX = 50e-3

#: The model's THD-limited swing is an upper bound: κ · 4 · THD · (1 + gm·R_deg) · I_C · r_L,
#: the second-harmonic estimate of an emitter-degenerated stage (domain reference §3.7),
#: times κ so that it is never below the harmonic-balance swing (checked in
#: tests/test_search_model.py on random designs).
THD_SWING_FACTOR = 1.2

#: Collector–emitter voltage below which the stage is taken as saturated in the model's
#: swing bound (V). The analysis finds 1 % THD well before VCE gets this low; the tests
#: check that the bound stays above the harmonic-balance swing.
SAT_KNEE = 0.1


@dataclass(frozen=True)
class Corner:
    """One corner of the model: supply, temperature and which end of beta."""

    name: str
    supply: float
    temperature: float
    beta_end: str  # "min" or "max"
    tol_sign: int  # +1: resistors move the way that lowers the current (LO); −1: the other way (HI)


@dataclass(frozen=True)
class DeviceCorner:
    """A transistor type at one corner: effective beta range, thermal voltage, VBE per bucket."""

    beta_lo: float  # BF(T) at the corner's end of the range
    beta_hi: float  # BF(T)·(1 + VCC/VAF): the Early effect raises I_C/I_B by up to this
    vt: float
    vbe_lo: np.ndarray  # per bucket: lowest VBE (V)
    vbe_hi: np.ndarray  # per bucket: highest VBE (V)
    alpha_lo: float
    va: float


def ie_buckets() -> np.ndarray:
    """Bucket edges (A), log-spaced from 1 µA to 50 mA."""
    n = int(math.ceil(math.log(I_MAX / I_MIN) / math.log(BUCKET_RATIO)))
    return I_MIN * BUCKET_RATIO ** np.arange(n + 1)


def device_corner(model, corner: Corner) -> DeviceCorner:
    """Bounds for one transistor model at one corner, from the analysis' device equations."""
    beta = model.beta_min if corner.beta_end == "min" else model.beta_max
    beta = beta if beta is not None else model.beta
    p = dev.temperature_params(model, corner.temperature, beta)
    vt = float(thermal_voltage(corner.temperature))
    edges = ie_buckets()
    bf = float(p.bf)
    # I_C = I_S (exp(vbe/VT) − 1)(1 + VCB/VAF) in the forward-active region (the engine's
    # equation without the reverse-junction terms): VBE is lowest for the bucket's lowest
    # current at the largest VCB (the supply), highest for its highest current at VCB = 0.
    alpha_lo = bf / (bf + 1)
    ic_lo = edges[:-1] * alpha_lo
    ic_hi = edges[1:]
    vbe_lo = vt * np.log1p(ic_lo / (p.is_ * (1 + corner.supply / model.va)))
    vbe_hi = vt * np.log1p(ic_hi / p.is_)
    return DeviceCorner(bf, bf * (1 + corner.supply / model.va), vt, vbe_lo - 1e-4, vbe_hi + 1e-4, alpha_lo, model.va)
