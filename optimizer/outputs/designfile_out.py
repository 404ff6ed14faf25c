"""Writing design files (``design-N.yaml``) that ``stagefit check`` reads back."""

from __future__ import annotations

from ..spec.quantities import format_code
from ..spec.designfile import Design

__all__ = ["design_yaml"]


def _v(x: float) -> str:
    return f"{x:.6g} V"


def _c(k: float) -> str:
    return f"{k - 273.15:.6g} °C"


def design_yaml(design: Design, header: list[str] = (), items: dict | None = None, ratings: dict | None = None) -> str:
    """The design as YAML text, with comment lines ``header`` on top.

    ``items`` (designator → search Item) adds where each part comes from; ``ratings`` adds
    the resistor power and capacitor voltage ratings the analysis chose.
    """
    out = [f"# {h}" for h in header]
    out.append(f"topology: {design.topology}")
    s = design.supply
    out.append(f"supply: {{nominal: {_v(s.nominal)}, min: {_v(s.min)}, max: {_v(s.max)}}}")
    a = design.ambient
    out.append(f"ambient: {{min: {_c(a.min)}, max: {_c(a.max)}, nominal: {_c(a.nominal)}}}")
    load = f"resistance: {format_code(design.load.resistance, 'resistance')}"
    if design.load.capacitance:
        load += f", capacitance: {format_code(design.load.capacitance, 'capacitance')}"
    out.append(f"load: {{{load}}}")
    m = design.model
    if design.transistor == m.name and m.name != "custom":
        out.append(f"transistor: {design.transistor}")
    else:
        out.append(
            "transistor: {"
            + f"polarity: {m.polarity}, is: {m.is_:.6g}, beta: {m.beta:.6g}, va: {_v(m.va)}, beta_reverse: {m.beta_reverse:.6g}, "
            + f"cjc: {m.cjc:.6g}, cje: {m.cje:.6g}, tf: {m.tf:.6g}"
            + (f", beta_min: {m.beta_min:.6g}" if m.beta_min is not None else "")
            + (f", beta_max: {m.beta_max:.6g}" if m.beta_max is not None else "")
            + "}"
        )
    names = design.input_names or tuple(str(i + 1) for i in range(design.n_inputs))
    ins = []
    for nm, rs in zip(names, design.sources):
        ins.append(f"{{name: {_quote(nm)}, source_resistance: {format_code(max(rs, 1e-3), 'resistance') if rs > 0 else 0}}}")
    out.append("inputs: [" + ", ".join(ins) + "]")
    out.append(f"thd_limit: {design.thd_limit * 100:g} %")
    if design.level is not None:
        out.append(f"level: {design.level:.6g} V")
    rr = {r["ref"]: r for r in (ratings or {}).get("resistors", [])}
    cr = {r["ref"]: r for r in (ratings or {}).get("capacitors", [])}
    out.append("parts:")
    for p in design.parts:
        kind = "capacitance" if p.ref.startswith("C") else "resistance"
        fields = [f"role: {p.role}"]
        if p.input is not None:
            fields.append(f"input: {p.input}")
        fields.append(f"value: {format_code(p.value, kind)}")
        fields.append(f"tolerance: {p.tolerance * 100:g} %")
        if p.type:
            fields.append(f"type: {p.type}")
        if p.ref.startswith("RV"):
            fields.append(f"taper: {p.taper}")
            fields.append(f"position: {p.position:g}")
        if items and p.ref in items:
            fields.append(f"source: {items[p.ref].source}")
        if p.ref in rr:
            fields.append(f"rating: {rr[p.ref]['rating']:g} W")
        if p.ref in cr:
            fields.append(f"rating: {cr[p.ref]['rating']:g} V")
        out.append(f"  {p.ref}: {{{', '.join(fields)}}}")
    return "\n".join(out) + "\n"


def _quote(s: str) -> str:
    if s and all(ch.isalnum() or ch in "-_." for ch in s) and not s[0].isdigit():
        return s
    return '"' + s.replace('"', "'") + '"'
