"""SPICE netlists of a circuit, for independent simulation.

Node names are the circuit's own: supply ``vcc``, ground ``0``, each input's source EMF
``in1``, ``in2`` … driven by ``VIN1``, ``VIN2`` … (``DC 0 AC 1``) through its source
resistance ``RS1`` … into the jack node ``src1`` …, and the load on ``out``. A level pot
``RVk`` becomes two resistors, ``RVkA`` (top end to wiper) and ``RVkB`` (wiper to bottom
end), at its rotation. Values are written as plain numbers (``1e-05``, never ``10u`` or
``10m``, which SPICE would read as milli). The transistor's ``.model`` card carries
``TNOM``; ``.temp`` sets the simulation temperature. There is no analysis or control block
unless asked for (``analyses=``). A comment line per transistor names its collector, base and
emitter nodes (topologies with several transistors name the later ones' nodes ``b_q2`` …).
Every transistor gets its own ``.model`` card (``Q<type>_<designator>``), so a corner or a
substitution can give each its own parameters.
"""

from __future__ import annotations

from ..analysis.network import POT_END_RESISTANCE, taper
from .netlist import Circuit

__all__ = ["to_spice"]


def _num(x: float) -> str:
    return f"{x:.9g}"


def model_name(circuit: Circuit, ref: str) -> str:
    m = circuit.element(ref).model
    base = "".join(ch for ch in m.name.upper() if ch.isalnum()) or "CUSTOM"
    return f"Q{base}_{ref}"


def to_spice(
    circuit: Circuit,
    supply: float,
    temperature_c: float = 25.0,
    title: str = "",
    analyses: list[str] | None = None,
) -> str:
    """The netlist as SPICE text.

    Parameters
    ----------
    circuit
        The circuit (its transistor models go into ``.model`` cards).
    supply
        Supply voltage written on ``VCC``.
    temperature_c
        Simulation temperature (``.temp``), °C.
    title
        The first line (SPICE reads the first line as the title).
    analyses
        Lines to add before ``.end`` (e.g. ``[".op", ".ac dec 20 1 1e6"]``); none by default.
    """
    lines = [f"* {title or 'stagefit netlist: ' + circuit.topology}"]
    lines.append("* nodes: vcc supply, 0 ground, inK source EMF, srcK input jack, out load")
    for q in circuit.transistors:
        c, b, e = q.nodes
        lines.append(f"* {q.ref}: collector {c}, base {b}, emitter {e}")
    models: dict[str, str] = {}
    for e in circuit.elements:
        n = e.nodes
        if e.kind == "VSUPPLY":
            lines.append(f"{e.ref} {n[0]} {n[1]} DC {_num(supply)}")
        elif e.kind == "VSIG":
            lines.append(f"{e.ref} {n[0]} {n[1]} DC 0 AC 1")
        elif e.kind == "R":
            lines.append(f"{e.ref} {n[0]} {n[1]} {_num(e.value)}")
        elif e.kind == "C":
            lines.append(f"{e.ref} {n[0]} {n[1]} {_num(e.value)}")
        elif e.kind == "POT":
            frac = float(taper(e.taper, e.position))
            top = e.value * (1 - frac) + POT_END_RESISTANCE
            bottom = e.value * frac + POT_END_RESISTANCE
            lines.append(f"* {e.ref}: {e.taper} pot {_num(e.value)} ohm at rotation {e.position:g}")
            lines.append(f"{e.ref}A {n[0]} {n[1]} {_num(top)}")
            lines.append(f"{e.ref}B {n[1]} {n[2]} {_num(bottom)}")
        elif e.kind == "Q":
            name = model_name(circuit, e.ref)
            models[name] = e.model.spice_card(name)
            lines.append(f"{e.ref} {n[0]} {n[1]} {n[2]} {name}")
    lines.extend(models.values())
    lines.append(f".temp {temperature_c:g}")
    if analyses:
        lines.extend(analyses)
    lines.append(".end")
    return "\n".join(lines) + "\n"
