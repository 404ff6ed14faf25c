"""How the inputs of a mixing stage get on with each other, at 1 kHz and nominal conditions.

For every input: its gain with every other source connected, at its level control's minimum,
middle and maximum rotation (the others at maximum); the input impedance its source sees at
each of those rotations; the isolation from every other input (how much of input k's EMF
appears at input j's jack, in dB below it); and the interaction — how far input j's gain moves
when input k's control goes from maximum to minimum (resistors summed into one node load each
other, so turning one source down changes the others).

Every figure comes from the same nodal analysis as the rest of the tool, on variants of the
netlist that differ only in pot rotations.
"""

from __future__ import annotations

import math

import numpy as np

from ..circuit.netlist import Circuit
from . import figures as fig
from .network import Batch, Network

__all__ = ["ROTATIONS", "mixing"]

#: Rotations reported: fully anticlockwise, the middle, fully clockwise.
ROTATIONS = {"min": 0.0, "mid": 0.5, "max": 1.0}
#: Gains below this are reported as "off" (an ideal pot at minimum passes nothing).
_OFF_DB = -200.0


def _db(x: np.ndarray) -> np.ndarray:
    return 20 * np.log10(np.maximum(np.abs(x), 1e-300))


def mixing(circuit: Circuit, supply: float, temperature: float, names: tuple[str, ...] = ()) -> dict:
    """Gain and input impedance per control rotation, isolation and interaction.

    Parameters
    ----------
    circuit
        The stage's netlist (pots at any rotation; the figures set their own).
    supply, temperature
        Conditions (V, K), normally the nominal ones.
    names
        The inputs' names, for the report.

    Returns
    -------
    dict
        ``{"inputs": [{"input": k, "name": ..., "level_control": ref or None,
        "gain_db": {"min", "mid", "max"}, "input_impedance": {...},
        "isolation_db": {"j": dB}, "interaction_db": {"j": dB}}]}``; dB values at an ideal
        pot's minimum that are below −200 dB are ``None`` ("off").
    """
    n = circuit.n_inputs
    pots = {e.input: e.ref for e in circuit.elements if e.kind == "POT" and e.input is not None}
    # Variant 0: every control at maximum. Then, per input with a control: that control at
    # min and mid, the others at maximum.
    variants: list[tuple[int | None, str]] = [(None, "max")]
    for k in sorted(pots):
        variants += [(k, "min"), (k, "mid")]
    B = len(variants)
    net = Network(circuit)
    batch = Batch.repeat(supply, temperature, B)
    for k, ref in pots.items():
        batch.positions[ref] = np.array([ROTATIONS[pos] if who == k else 1.0 for who, pos in variants])
    op = net.operating_point(batch)
    mb = fig.midband(net, op)
    gain = _db(mb.gain)  # (n, B)
    zin = np.abs(mb.zin)  # (n, B)
    out = []
    for k in range(1, n + 1):
        row = {"input": k, "name": names[k - 1] if k - 1 < len(names) else str(k), "level_control": pots.get(k)}
        g, z = {}, {}
        for label in ROTATIONS:
            if label == "max":
                col = 0
            elif k in pots:
                col = variants.index((k, label))
            else:
                continue
            gv = float(gain[k - 1, col])
            g[label] = None if gv < _OFF_DB or not math.isfinite(gv) else gv
            z[label] = float(zin[k - 1, col])
        row["gain_db"] = g
        row["input_impedance"] = z
        iso = {}
        for j in range(1, n + 1):
            if j != k:
                leak = float(mb.crosstalk[k - 1, j - 1, 0])
                iso[str(j)] = None if leak <= 0 else -20 * math.log10(leak)
        row["isolation_db"] = iso
        inter = {}
        for j in sorted(pots):
            if j != k:
                col = variants.index((j, "min"))
                inter[str(j)] = float(gain[k - 1, col] - gain[k - 1, 0])
        row["interaction_db"] = inter
        out.append(row)
    return {"inputs": out, "supply": float(supply), "temperature": float(temperature)}


def mixing_text(mx: dict) -> str:
    """The mixing figures as lines for the terminal."""
    lines = ["  Inputs together (1 kHz, nominal; other sources connected):"]
    for row in mx["inputs"]:
        g = row["gain_db"]
        z = row["input_impedance"]

        def fmt_g(x):
            return "off" if x is None else f"{x:+.1f} dB"

        def fmt_z(x):
            return f"{x / 1e3:.3g} kΩ" if x >= 1e3 else f"{x:.3g} Ω"

        if row["level_control"]:
            gains = " / ".join(f"{lab} {fmt_g(g[lab])}" for lab in ("min", "mid", "max"))
            zs = " / ".join(fmt_z(z[lab]) for lab in ("min", "mid", "max"))
            lines.append(f"    {row['name']}: gain {gains}; input impedance {zs} ({row['level_control']} min/mid/max)")
        else:
            lines.append(f"    {row['name']}: gain {fmt_g(g['max'])}; input impedance {fmt_z(z['max'])}")
        iso = [f"{v:.0f} dB down at {k}" for k, v in row["isolation_db"].items() if v is not None]
        if iso:
            lines.append("      its signal at the other jacks: " + ", ".join(iso))
        inter = [f"{v:+.2f} dB when {k} goes to minimum" for k, v in row["interaction_db"].items()]
        if inter:
            lines.append("      its gain moves " + ", ".join(inter))
    return "\n".join(lines)
