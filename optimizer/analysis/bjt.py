"""The bipolar transistor: Ebers–Moll transport model with Early effect, batched.

These are the equations SPICE's Gummel–Poon model reduces to with only IS, BF, BR, VAF,
the junction capacitances and TF given (no high-injection knee, no leakage diodes, no
base resistance), so a netlist with the same ``.model`` card simulates the same device:

    i_be = IS·(exp(vbe/VT) − 1) + GMIN·vbe          i_bc = IS·(exp(vbc/VT) − 1) + GMIN·vbc
    1/qb = 1 − vbc/VAF
    i_C  = (i_be − i_bc)/qb − i_bc/BR               i_B  = i_be/BF + i_bc/BR

Temperature (T, kelvin; model measured at TNOM): VT = kT/q,
IS(T) = IS·exp((T/TNOM − 1)·EG/VT)·(T/TNOM)^XTI and BF(T), BR(T) = ·(T/TNOM)^XTB.
For a PNP every junction voltage and current changes sign.

Arrays broadcast: every argument may be a NumPy array of the batch shape.
"""

from __future__ import annotations

import numpy as np

from ..physics import BOLTZMANN, CHARGE

__all__ = ["GMIN", "DeviceParams", "capacitances", "charges", "currents", "pnjlim", "temperature_params"]

#: Conductance across each junction, as SPICE adds by default (S).
GMIN = 1e-12
#: Largest exponent argument evaluated exactly; above it the exponential is continued linearly.
_EXP_MAX = 80.0


class DeviceParams:
    """Model parameters of one transistor position at the batch's temperatures (arrays)."""

    __slots__ = ("is_", "bf", "br", "vaf", "vt", "cje", "vje", "mje", "cjc", "vjc", "mjc", "fc", "tf", "sign")

    def __init__(self, **kw):
        for k in self.__slots__:
            setattr(self, k, kw[k])


def temperature_params(model, temperature, beta) -> DeviceParams:
    """Scale a :class:`~optimizer.catalog.transistors.BjtModel` to temperatures (K).

    ``beta`` is the forward beta at TNOM (a corner or sampled value, array or scalar).
    """
    t = np.asarray(temperature, dtype=float)
    vt = BOLTZMANN * t / CHARGE
    ratio = t / model.tnom
    ratlog = np.log(ratio)
    is_t = model.is_ * np.exp((ratio - 1.0) * model.eg / vt + model.xti * ratlog)
    bfac = np.exp(ratlog * model.xtb)
    return DeviceParams(
        is_=is_t,
        bf=np.asarray(beta, dtype=float) * bfac,
        br=model.beta_reverse * bfac,
        vaf=model.va,
        vt=vt,
        cje=model.cje,
        vje=model.vje,
        mje=model.mje,
        cjc=model.cjc,
        vjc=model.vjc,
        mjc=model.mjc,
        fc=model.fc,
        tf=model.tf,
        sign=model.sign,
    )


def _exp(x):
    """exp(x) and its derivative, continued linearly above _EXP_MAX (keeps Newton finite)."""
    xc = np.minimum(x, _EXP_MAX)
    e = np.exp(xc)
    return np.where(x > _EXP_MAX, e * (1.0 + x - _EXP_MAX), e), e


def currents(p: DeviceParams, vbe, vbc):
    """Collector and base current and their derivatives (NPN sense).

    Returns
    -------
    ic, ib, dic_dvbe, dic_dvbc, dib_dvbe, dib_dvbc
        Arrays of the broadcast shape; currents flow into the collector and the base.
    """
    ebe, debe = _exp(vbe / p.vt)
    ebc, debc = _exp(vbc / p.vt)
    ibe = p.is_ * (ebe - 1.0) + GMIN * vbe
    gbe = p.is_ * debe / p.vt + GMIN
    ibc = p.is_ * (ebc - 1.0) + GMIN * vbc
    gbc = p.is_ * debc / p.vt + GMIN
    inv_qb = 1.0 - vbc / p.vaf
    ic = (ibe - ibc) * inv_qb - ibc / p.br
    ib = ibe / p.bf + ibc / p.br
    dic_dvbe = gbe * inv_qb
    dic_dvbc = -gbc * inv_qb - (ibe - ibc) / p.vaf - gbc / p.br
    dib_dvbe = gbe / p.bf
    dib_dvbc = gbc / p.br
    return ic, ib, dic_dvbe, dic_dvbc, dib_dvbe, dib_dvbc


def _depletion(c0, v, vj, mj, fc):
    fcv = fc * vj
    below = c0 * np.power(np.maximum(1.0 - v / vj, 1e-12), -mj)
    f2 = (1.0 - fc) ** (1.0 + mj)
    f3 = 1.0 - fc * (1.0 + mj)
    above = c0 / f2 * (f3 + mj * v / vj)
    return np.where(v < fcv, below, above)


def _depletion_charge(c0, v, vj, mj, fc):
    """The depletion charge whose derivative is :func:`_depletion` (zero at v = 0)."""
    fcv = fc * vj
    below = c0 * vj * (1.0 - np.power(np.maximum(1.0 - v / vj, 1e-12), 1.0 - mj)) / (1.0 - mj)
    f2 = (1.0 - fc) ** (1.0 + mj)
    f3 = 1.0 - fc * (1.0 + mj)
    at_fc = c0 * vj * (1.0 - (1.0 - fc) ** (1.0 - mj)) / (1.0 - mj)
    above = at_fc + c0 / f2 * (f3 * (v - fcv) + mj / (2.0 * vj) * (v * v - fcv * fcv))
    return np.where(v < fcv, below, above)


def charges(p: DeviceParams, vbe, vbc):
    """The junctions' stored charges (NPN sense): base–emitter (diffusion TF·i_be·(1 − vbc/VAF)
    when forward biased, TF·i_be otherwise, plus depletion) and base–collector (depletion).
    Their derivatives are :func:`capacitances`."""
    ebe, _ = _exp(vbe / p.vt)
    ibe = p.is_ * (ebe - 1.0) + GMIN * vbe
    inv_qb = 1.0 - vbc / p.vaf
    qdiff = np.where(vbe > 0, p.tf * ibe * inv_qb, p.tf * ibe)
    qbe = qdiff + _depletion_charge(p.cje, vbe, p.vje, p.mje, p.fc)
    qbc = _depletion_charge(p.cjc, vbc, p.vjc, p.mjc, p.fc)
    return qbe, qbc


def capacitances(p: DeviceParams, vbe, vbc):
    """Small-signal capacitances at an operating point (NPN sense).

    Returns
    -------
    cbe, cbe_vbc, cbc
        The base–emitter capacitance (diffusion TF·g + depletion), the base–emitter charge's
        dependence on vbc (a transcapacitance, from the Early term), and the base–collector
        depletion capacitance, all in farads.
    """
    ebe, debe = _exp(vbe / p.vt)
    ibe = p.is_ * (ebe - 1.0) + GMIN * vbe
    gbe = p.is_ * debe / p.vt + GMIN
    inv_qb = 1.0 - vbc / p.vaf
    on = vbe > 0
    # Diffusion charge TF·i_be/qb (SPICE keeps the 1/qb factor only for a forward-biased junction).
    cdiff = np.where(on, p.tf * gbe * inv_qb, p.tf * gbe)
    cbe_vbc = np.where(on, -p.tf * ibe / p.vaf, 0.0)
    cbe = cdiff + _depletion(p.cje, vbe, p.vje, p.mje, p.fc)
    cbc = _depletion(p.cjc, vbc, p.vjc, p.mjc, p.fc)
    return cbe, cbe_vbc, cbc


def pnjlim(vnew, vold, vt, vcrit):
    """Limit a junction voltage step the way SPICE does, so Newton cannot overflow."""
    big = (vnew > vcrit) & (np.abs(vnew - vold) > 2.0 * vt)
    arg = 1.0 + (vnew - vold) / vt
    from_pos = np.where(arg > 0, vold + vt * np.log(np.maximum(arg, 1e-300)), vcrit)
    from_neg = vt * np.log(np.maximum(vnew / vt, 1e-300))
    limited = np.where(vold > 0, from_pos, from_neg)
    return np.where(big, limited, vnew)
