"""Spec files: what the stage must do and which parts it may use.

:func:`load_spec` reads a YAML spec into a frozen :class:`Spec` whose numbers are all SI
(volts, ohms, farads, hertz, amperes, kelvin; gains and headroom in dB; percentages as
fractions; signal levels in volts peak). Every problem in the file is reported at once,
each with its file, line, field path, the bad value and what is allowed. The README
documents every field; ``FIELDS`` below is the same list in code.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace
from pathlib import Path

from ..circuit.topologies import TOPOLOGIES  # the names a spec may use
from ..errors import Problem, display_path
from .quantities import format_si, parse_quantity, parse_tolerance, parse_value
from .source import Node, Reader, load_yaml

__all__ = [
    "Ambient",
    "GainTarget",
    "InputSpec",
    "Load",
    "PartsPolicy",
    "SearchSettings",
    "Spec",
    "Supply",
    "Targets",
    "load_spec",
]

USES = ("stock-only", "stock-first", "series-only")


@dataclass(frozen=True)
class Supply:
    """Supply voltage range in volts; ``capacity`` is a battery's charge in coulombs."""

    nominal: float
    min: float
    max: float
    capacity: float | None = None

    def scaled(self, nominal: float) -> "Supply":
        """The same range, scaled to another nominal voltage."""
        k = nominal / self.nominal
        return Supply(nominal, self.min * k, self.max * k, self.capacity)


@dataclass(frozen=True)
class Ambient:
    """Ambient temperature range in kelvin."""

    min: float
    max: float
    nominal: float


@dataclass(frozen=True)
class Load:
    resistance: float
    capacitance: float = 0.0


@dataclass(frozen=True)
class InputSpec:
    """One source: its resistance, its largest level (V peak) and whether it has a level control."""

    name: str
    source_resistance: float
    max_level: float | None = None
    level_control: bool = False


@dataclass(frozen=True)
class GainTarget:
    """Gain from each source to the load, level control at maximum, in dB: ``min``..``max``."""

    min: float
    max: float

    @property
    def centre(self) -> float:
        return 0.5 * (self.min + self.max)


@dataclass(frozen=True)
class Targets:
    """Every target; ``None`` means the spec does not constrain it.

    ``headroom_nominal`` is the nominal output level (V peak of a sine) that headroom is
    measured from; ``headroom_min`` is in dB. ``swing_min`` is an output peak in volts.
    ``distortion_max`` is the THD limit (fraction) at which swing and headroom are measured.
    """

    gain: GainTarget | None = None
    headroom_nominal: float | None = None
    headroom_min: float | None = None
    swing_min: float | None = None
    input_impedance_min: float | None = None
    output_impedance_max: float | None = None
    low_cutoff_max: float | None = None
    high_cutoff_min: float | None = None
    supply_current_max: float | None = None
    distortion_max: float = 0.01
    snr_min: float | None = None
    isolation_min: float | None = None

    def required_swing(self) -> float | None:
        """The output peak the stage must reach within the THD limit (V), or None."""
        need = []
        if self.headroom_nominal is not None and self.headroom_min is not None:
            need.append(self.headroom_nominal * 10 ** (self.headroom_min / 20))
        if self.swing_min is not None:
            need.append(self.swing_min)
        return max(need) if need else None


@dataclass(frozen=True)
class PartsPolicy:
    """Which values may be used."""

    resistor_series: str = "E24"
    resistor_tolerance: float = 0.05
    resistor_min: float = 10.0
    resistor_max: float = 1e6
    capacitor_series: str = "E6"
    capacitor_tolerance: float = 0.20
    capacitor_min: float = 10e-12
    capacitor_max: float = 1e-3
    pot_style: str = "e3"
    pot_tolerance: float = 0.20
    transistors: tuple[str, ...] = ("2N3904",)
    stock: Path | None = None
    use: str = "series-only"


@dataclass(frozen=True)
class SearchSettings:
    top: int = 5
    time_limit: float = 30.0
    seed: int = 1


@dataclass(frozen=True)
class Spec:
    """A whole spec, in SI units."""

    name: str
    supply: Supply
    ambient: Ambient
    load: Load
    inputs: tuple[InputSpec, ...]
    targets: Targets
    parts: PartsPolicy
    search: SearchSettings
    topologies: tuple[str, ...] = TOPOLOGIES
    description: str = ""
    path: Path | None = None

    def with_supply(self, supply: Supply) -> "Spec":
        return replace(self, supply=supply)


# ------------------------------------------------------------------------------------
# Loading


FIELDS = {
    "": ["name", "description", "supply", "ambient", "load", "inputs", "targets", "parts", "search", "topology"],
    "supply": ["nominal", "min", "max", "capacity"],
    "ambient": ["min", "max", "nominal"],
    "load": ["resistance", "capacitance"],
    "input": ["name", "source_resistance", "max_level", "level_control"],
    "inputs-count": ["count", "source_resistance", "max_level", "level_control"],
    "targets": [
        "gain",
        "headroom",
        "swing",
        "input_impedance",
        "output_impedance",
        "low_cutoff",
        "high_cutoff",
        "supply_current",
        "distortion",
        "snr",
        "isolation",
    ],
    "parts": ["resistors", "capacitors", "pots", "transistors", "stock", "use"],
    "resistors": ["series", "tolerance", "min", "max"],
    "capacitors": ["series", "tolerance", "min", "max"],
    "pots": ["values", "tolerance"],
    "search": ["top", "time_limit", "seed"],
    "topology": ["only", "exclude"],
}

_LIMITS = {
    "supply": (1.5, 48.0, "V"),
    "resistance_load": (100.0, 10e6, "Ω"),
    "capacitance_load": (0.0, 100e-9, "F"),
    "source_resistance": (0.0, 10e6, "Ω"),
    "level": (1e-4, 20.0, "V"),
    "gain": (-40.0, 60.0, "dB"),
    "gain_tol": (0.05, 20.0, "dB"),
    "headroom": (0.0, 40.0, "dB"),
    "impedance": (1.0, 100e6, "Ω"),
    "frequency": (0.01, 10e6, "Hz"),
    "current": (1e-6, 0.5, "A"),
    "thd": (1e-4, 0.2, ""),
    "snr": (0.0, 140.0, "dB"),
    "isolation": (0.0, 140.0, "dB"),
    "resistor": (0.1, 100e6, "Ω"),
    "capacitor": (1e-12, 0.1, "F"),
}


def _shown(unit: str):
    if unit in ("dB",):
        return lambda v: f"{v:g} dB"
    if unit == "":
        return lambda v: f"{v * 100:g} %"
    return lambda v: format_si(v, unit)


class _SpecReader(Reader):
    """Reader with the spec's own field helpers."""

    def quantity(self, node: Node | None, kind: str, limit: str | None = None) -> float | None:
        v = self.parse(node, lambda t: parse_quantity(t, kind))
        if v is None or limit is None:
            return v
        lo, hi, unit = _LIMITS[limit]
        return self.in_range(node, v, lo, hi, _shown(unit))

    def resistance(self, node: Node | None, limit: str) -> float | None:
        if node is not None and node.value in (0, 0.0) and not isinstance(node.value, bool) and _LIMITS[limit][0] == 0:
            return 0.0
        v = self.parse(node, lambda t: parse_value(t, "resistance").value)
        if v is None:
            return None
        lo, hi, unit = _LIMITS[limit]
        return self.in_range(node, v, lo, hi, _shown(unit))

    def capacitance(self, node: Node | None, limit: str) -> float | None:
        if node is not None and node.value in (0, 0.0) and not isinstance(node.value, bool):
            return 0.0
        v = self.parse(node, lambda t: parse_value(t, "capacitance").value)
        if v is None:
            return None
        lo, hi, unit = _LIMITS[limit]
        return self.in_range(node, v, lo, hi, _shown(unit))

    def ordered(self, node: Node, lo: float | None, hi: float | None, shown, what: str = "min") -> bool:
        if lo is not None and hi is not None and lo > hi:
            at = node.value.get(what) if node.is_map else None
            self.problem(at or node, at.path if at else node.path, f"{what} {shown(lo)} is above max {shown(hi)}")
            return False
        return True


def _supply(r: _SpecReader, node: Node | None) -> Supply | None:
    if node is None:
        return None
    if not node.is_map:
        v = r.quantity(node, "voltage", "supply")
        return Supply(v, v, v) if v is not None else None
    m = r.keys(node, FIELDS["supply"], ["nominal"]) or {}
    nom = r.quantity(m.get("nominal"), "voltage", "supply")
    lo = r.quantity(m.get("min"), "voltage", "supply") if "min" in m else nom
    hi = r.quantity(m.get("max"), "voltage", "supply") if "max" in m else nom
    cap = r.parse(m.get("capacity"), lambda t: parse_quantity(t, "charge")) if "capacity" in m else None
    if nom is None or lo is None or hi is None:
        return None
    v = _shown("V")
    ok = r.ordered(node, lo, hi, v)
    if ok and not lo <= nom <= hi:
        r.problem(m["nominal"], m["nominal"].path, f"nominal {v(nom)} is outside min {v(lo)} .. max {v(hi)}")
        return None
    return Supply(nom, lo, hi, cap) if ok else None


def _ambient(r: _SpecReader, node: Node | None) -> Ambient | None:
    if node is None:
        return Ambient(273.15, 313.15, 298.15)
    lim = (233.15, 358.15)
    show = lambda k: f"{k - 273.15:g} °C"  # noqa: E731
    if not node.is_map:
        t = r.parse(node, lambda x: parse_quantity(x, "temperature"))
        t = r.in_range(node, t, *lim, show)
        return Ambient(t, t, t) if t is not None else None
    m = r.keys(node, FIELDS["ambient"], ["min", "max"]) or {}
    lo = r.in_range(m["min"], r.parse(m.get("min"), lambda x: parse_quantity(x, "temperature")), *lim, show) if "min" in m else None
    hi = r.in_range(m["max"], r.parse(m.get("max"), lambda x: parse_quantity(x, "temperature")), *lim, show) if "max" in m else None
    if lo is None or hi is None or not r.ordered(node, lo, hi, show):
        return None
    if "nominal" in m:
        nom = r.parse(m["nominal"], lambda x: parse_quantity(x, "temperature"))
        if nom is None:
            return None
        if not lo <= nom <= hi:
            r.problem(m["nominal"], m["nominal"].path, f"nominal {show(nom)} is outside {show(lo)} .. {show(hi)}")
            return None
    else:
        nom = 298.15 if lo <= 298.15 <= hi else 0.5 * (lo + hi)
    return Ambient(lo, hi, nom)


def _load(r: _SpecReader, node: Node | None) -> Load | None:
    if node is None:
        return None
    m = r.keys(node, FIELDS["load"], ["resistance"])
    if m is None:
        return None
    res = r.resistance(m.get("resistance"), "resistance_load")
    cap = r.capacitance(m.get("capacitance"), "capacitance_load") if "capacitance" in m else 0.0
    return Load(res, cap) if res is not None and cap is not None else None


def _one_input(r: _SpecReader, node: Node, index: int, count_form: bool = False) -> InputSpec | None:
    keys = FIELDS["inputs-count"] if count_form else FIELDS["input"]
    m = r.keys(node, keys, ["source_resistance"])
    if m is None:
        return None
    name = r.text(m.get("name")) if "name" in m else str(index + 1)
    rs = r.resistance(m.get("source_resistance"), "source_resistance")
    lvl = r.quantity(m.get("max_level"), "level", "level") if "max_level" in m else None
    pot = r.boolean(m.get("level_control")) if "level_control" in m else False
    if name is None or rs is None or ("max_level" in m and lvl is None) or pot is None:
        return None
    return InputSpec(name, rs, lvl, pot)


def _inputs(r: _SpecReader, node: Node | None) -> tuple[InputSpec, ...] | None:
    if node is None:
        return None
    if node.is_map:
        m = r.keys(node, FIELDS["inputs-count"], ["count", "source_resistance"])
        if m is None:
            return None
        count = r.integer(m.get("count"), 1, 16)
        one = _one_input(r, node, 0, count_form=True)
        if count is None or one is None:
            return None
        return tuple(replace(one, name=str(i + 1)) for i in range(count))
    seq = r.seq(node, "a list of inputs or {count: N, source_resistance: R}")
    if seq is None:
        return None
    if not 1 <= len(seq) <= 16:
        r.problem(node, node.path, f"has {len(seq)} inputs (allowed: 1 to 16)")
        return None
    out = [_one_input(r, n, i) for i, n in enumerate(seq)]
    if any(x is None for x in out):
        return None
    names = [x.name for x in out]
    for i, nm in enumerate(names):
        if nm in names[:i]:
            r.problem(seq[i], seq[i].path + ".name", f"{nm!r} is used by another input; names must differ")
            return None
    return tuple(out)


def _bounded(r: _SpecReader, node: Node | None, key: str, kind: str, limit: str) -> float | None:
    """Read ``{key: quantity}`` from a target mapping."""
    if node is None:
        return None
    m = r.keys(node, [key], [key])
    if m is None or key not in m:
        return None
    if kind == "resistance":
        return r.resistance(m[key], limit)
    return r.quantity(m[key], kind, limit)


def _targets(r: _SpecReader, node: Node | None) -> Targets | None:
    if node is None:
        return Targets()
    m = r.keys(node, FIELDS["targets"])
    if m is None:
        return None
    n0 = len(r.problems)
    gain = None
    if "gain" in m:
        g = r.keys(m["gain"], ["value", "tolerance", "min", "max"])
        if g is not None:
            if "value" in g:
                val = r.quantity(g.get("value"), "decibel", "gain")
                if "tolerance" not in g:
                    r.problem(m["gain"], m["gain"].path + ".tolerance", "is missing (give value and tolerance, or min and max)")
                tol = r.quantity(g.get("tolerance"), "decibel", "gain_tol")
                if "min" in g or "max" in g:
                    r.problem(m["gain"], m["gain"].path, "give either value and tolerance, or min and max, not both")
                elif val is not None and tol is not None:
                    gain = GainTarget(val - tol, val + tol)
            elif "min" in g or "max" in g:
                lo = r.quantity(g.get("min"), "decibel", "gain") if "min" in g else None
                hi = r.quantity(g.get("max"), "decibel", "gain") if "max" in g else None
                if "min" in g and "max" in g and lo is not None and hi is not None:
                    if r.ordered(m["gain"], lo, hi, _shown("dB")):
                        gain = GainTarget(lo, hi)
                elif lo is not None or hi is not None:
                    gain = GainTarget(lo if lo is not None else -200.0, hi if hi is not None else 200.0)
            else:
                r.problem(m["gain"], m["gain"].path, "needs value and tolerance, or min and max")
    hn = hm = None
    if "headroom" in m:
        h = r.keys(m["headroom"], ["nominal", "min"], ["nominal", "min"])
        if h is not None:
            hn = r.quantity(h.get("nominal"), "level", "level")
            hm = r.quantity(h.get("min"), "decibel", "headroom")
    swing = _bounded(r, m.get("swing"), "min", "level", "level")
    zin = _bounded(r, m.get("input_impedance"), "min", "resistance", "impedance")
    zout = _bounded(r, m.get("output_impedance"), "max", "resistance", "impedance")
    flo = _bounded(r, m.get("low_cutoff"), "max", "frequency", "frequency")
    fhi = _bounded(r, m.get("high_cutoff"), "min", "frequency", "frequency")
    icc = _bounded(r, m.get("supply_current"), "max", "current", "current")
    thd = _bounded(r, m.get("distortion"), "max", "percent", "thd") if "distortion" in m else 0.01
    snr = _bounded(r, m.get("snr"), "min", "decibel", "snr")
    iso = _bounded(r, m.get("isolation"), "min", "decibel", "isolation")
    if flo is not None and fhi is not None and flo >= fhi:
        r.problem(m["low_cutoff"], m["low_cutoff"].path, f"low_cutoff {format_si(flo, 'Hz')} is not below high_cutoff {format_si(fhi, 'Hz')}")
    if snr is not None and hn is None:
        r.problem(m["snr"], m["snr"].path, "needs headroom.nominal: the signal-to-noise ratio is taken at the nominal level")
    if len(r.problems) > n0:
        return None
    return Targets(
        gain=gain,
        headroom_nominal=hn,
        headroom_min=hm,
        swing_min=swing,
        input_impedance_min=zin,
        output_impedance_max=zout,
        low_cutoff_max=flo,
        high_cutoff_min=fhi,
        supply_current_max=icc,
        distortion_max=thd if thd is not None else 0.01,
        snr_min=snr,
        isolation_min=iso,
    )


def _series_name(r: _SpecReader, node: Node | None, default: str) -> str | None:
    from ..catalog.series import series_names

    if node is None:
        return default
    if isinstance(node.value, str):
        for s in series_names():
            if node.value.strip().upper() == s:
                return s
    return r.choice(node, series_names())


def _parts(r: _SpecReader, node: Node | None, spec_dir: Path) -> PartsPolicy | None:
    base = PartsPolicy()
    if node is None:
        return base
    m = r.keys(node, FIELDS["parts"])
    if m is None:
        return None
    n0 = len(r.problems)
    kw: dict = {}
    if "resistors" in m:
        rm = r.keys(m["resistors"], FIELDS["resistors"]) or {}
        kw["resistor_series"] = _series_name(r, rm.get("series"), "E24")
        if "tolerance" in rm:
            kw["resistor_tolerance"] = r.parse(rm["tolerance"], parse_tolerance)
        elif kw["resistor_series"]:
            from ..catalog.series import get_series

            kw["resistor_tolerance"] = min(get_series(kw["resistor_series"]).tolerance, 0.05)
        if "min" in rm:
            kw["resistor_min"] = r.resistance(rm["min"], "resistor")
        if "max" in rm:
            kw["resistor_max"] = r.resistance(rm["max"], "resistor")
        if kw.get("resistor_min") and kw.get("resistor_max"):
            r.ordered(m["resistors"], kw["resistor_min"], kw["resistor_max"], _shown("Ω"))
    if "capacitors" in m:
        cm = r.keys(m["capacitors"], FIELDS["capacitors"]) or {}
        kw["capacitor_series"] = _series_name(r, cm.get("series"), "E6")
        if "tolerance" in cm:
            kw["capacitor_tolerance"] = r.parse(cm["tolerance"], parse_tolerance)
        if "min" in cm:
            kw["capacitor_min"] = r.capacitance(cm["min"], "capacitor")
        if "max" in cm:
            kw["capacitor_max"] = r.capacitance(cm["max"], "capacitor")
        if kw.get("capacitor_min") and kw.get("capacitor_max"):
            r.ordered(m["capacitors"], kw["capacitor_min"], kw["capacitor_max"], _shown("F"))
    if "pots" in m:
        pm = r.keys(m["pots"], FIELDS["pots"]) or {}
        if "values" in pm:
            kw["pot_style"] = r.choice(pm["values"], ["e3", "1-2-5"])
        if "tolerance" in pm:
            kw["pot_tolerance"] = r.parse(pm["tolerance"], parse_tolerance)
    if "transistors" in m:
        kw["transistors"] = _transistor_names(r, m["transistors"])
    if "stock" in m:
        text = r.text(m["stock"])
        if text is not None:
            p = (spec_dir / text) if not Path(text).is_absolute() else Path(text)
            if not p.is_file():
                r.problem(m["stock"], m["stock"].path, f"{text!r}: no such stock file (looked for {display_path(p)})")
            else:
                kw["stock"] = p
    if "use" in m:
        kw["use"] = r.choice(m["use"], USES)
    elif "stock" in kw:
        kw["use"] = "stock-first"
    if kw.get("use") in ("stock-only", "stock-first") and "stock" not in kw and "stock" not in m:
        r.problem(m["use"], m["use"].path, f"{kw['use']!r} needs a stock file (parts.stock)")
    if len(r.problems) > n0 or any(v is None for v in kw.values()):
        return None
    return replace(base, **kw)


def _transistor_names(r: _SpecReader, node: Node) -> tuple[str, ...] | None:
    from ..catalog.transistors import transistor_types

    names = [node] if not node.is_list else node.value
    known = transistor_types()
    out = []
    for n in names:
        t = r.text(n)
        if t is None:
            return None
        if t not in known:
            import difflib

            close = difflib.get_close_matches(t, list(known), n=1, cutoff=0.6)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            r.problem(n, n.path, f"unknown transistor type {t!r}{hint} (known: {', '.join(sorted(set(k for k in known)))})")
            return None
        out.append(t)
    if not out:
        r.problem(node, node.path, "needs at least one transistor type")
        return None
    return tuple(dict.fromkeys(out))


def _search(r: _SpecReader, node: Node | None) -> SearchSettings | None:
    if node is None:
        return SearchSettings()
    m = r.keys(node, FIELDS["search"])
    if m is None:
        return None
    top = r.integer(m.get("top"), 1, 50) if "top" in m else 5
    tl = r.quantity(m.get("time_limit"), "time") if "time_limit" in m else 30.0
    if tl is not None and not 0.1 <= tl <= 3600:
        r.problem(m["time_limit"], m["time_limit"].path, f"{m['time_limit'].plain()!r} is out of range (allowed: 0.1 s to 3600 s)")
        tl = None
    seed = r.integer(m.get("seed"), 0, 2**31 - 1) if "seed" in m else 1
    if top is None or tl is None or seed is None:
        return None
    return SearchSettings(top, tl, seed)


def _topologies(r: _SpecReader, node: Node | None) -> tuple[str, ...] | None:
    if node is None:
        return TOPOLOGIES
    if not node.is_map:
        t = r.choice(node, TOPOLOGIES)
        return (t,) if t else None
    m = r.keys(node, FIELDS["topology"])
    if m is None:
        return None
    chosen = list(TOPOLOGIES)
    if "only" in m:
        seq = m["only"].value if m["only"].is_list else [m["only"]]
        got = [r.choice(x, TOPOLOGIES) for x in seq]
        if None in got:
            return None
        chosen = [t for t in TOPOLOGIES if t in got]
    if "exclude" in m:
        seq = m["exclude"].value if m["exclude"].is_list else [m["exclude"]]
        got = [r.choice(x, TOPOLOGIES) for x in seq]
        if None in got:
            return None
        chosen = [t for t in chosen if t not in got]
    if not chosen:
        r.problem(node, node.path, "leaves no topology to try")
        return None
    return tuple(chosen)


_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")


def load_spec(path: str | Path) -> Spec:
    """Read and check a spec file.

    Parameters
    ----------
    path
        The YAML file. A stock file it names is looked for relative to the spec's folder.

    Returns
    -------
    Spec
        Frozen, all values SI.

    Raises
    ------
    FileProblems
        Listing every problem found, each with file, line, field, bad value and what is allowed.
    """
    p = Path(path)
    root = load_yaml(p)
    r = _SpecReader(display_path(p))
    m = r.keys(root, FIELDS[""], ["name", "supply", "load", "inputs"])
    if m is None:
        r.raise_if_any()
        raise AssertionError("unreachable")
    name = r.text(m.get("name"))
    if name is not None and not _NAME.match(name):
        r.problem(m["name"], "name", f"{name!r} must be letters, digits, '.', '_' or '-' (it names the output folder)")
        name = None
    desc = r.text(m.get("description")) if "description" in m else ""
    supply = _supply(r, m.get("supply"))
    ambient = _ambient(r, m.get("ambient"))
    load = _load(r, m.get("load"))
    inputs = _inputs(r, m.get("inputs"))
    targets = _targets(r, m.get("targets"))
    parts = _parts(r, m.get("parts"), p.resolve().parent)
    search = _search(r, m.get("search"))
    topo = _topologies(r, m.get("topology"))
    if targets is not None and inputs is not None and targets.snr_min is not None and targets.gain is None:
        pass
    r.raise_if_any()
    return Spec(
        name=name,
        supply=supply,
        ambient=ambient,
        load=load,
        inputs=inputs,
        targets=targets,
        parts=parts,
        search=search,
        topologies=topo,
        description=desc or "",
        path=p,
    )


def describe(spec: Spec) -> list[str]:
    """What the spec says, one line each, in the user's units (for ``stagefit validate``)."""
    v = lambda x, u: format_si(x, u)  # noqa: E731
    c = lambda k: f"{k - 273.15:g} °C"  # noqa: E731
    s = spec.supply
    lines = [f"spec {spec.name}" + (f": {spec.description}" if spec.description else "")]
    lines.append(f"  supply        {v(s.nominal, 'V')} (from {v(s.min, 'V')} to {v(s.max, 'V')})"
                 + (f", battery {s.capacity / 3.6:.0f} mAh" if s.capacity else ""))
    a = spec.ambient
    lines.append(f"  ambient       {c(a.min)} to {c(a.max)} (nominal {c(a.nominal)})")
    lines.append(f"  load          {v(spec.load.resistance, 'Ω')}" + (f" ∥ {v(spec.load.capacitance, 'F')}" if spec.load.capacitance else ""))
    for i, inp in enumerate(spec.inputs, 1):
        extra = f", up to {v(inp.max_level, 'V')} peak" if inp.max_level else ""
        pot = ", level control" if inp.level_control else ""
        lines.append(f"  input {i:<2}      {inp.name}: source {v(inp.source_resistance, 'Ω')}{extra}{pot}")
    t = spec.targets
    lines.append("  targets")
    if t.gain:
        lines.append(f"    gain          {t.gain.min:+.2f} dB to {t.gain.max:+.2f} dB, each source to the load")
    if t.headroom_min is not None:
        nom_rms = t.headroom_nominal / math.sqrt(2)
        lines.append(f"    headroom      ≥ {t.headroom_min:g} dB above {v(nom_rms, 'V')} rms ({20 * math.log10(nom_rms):+.1f} dBV)")
    if t.swing_min is not None:
        lines.append(f"    swing         ≥ {v(t.swing_min, 'V')} peak at the load")
    if t.required_swing():
        lines.append(f"    → the stage must reach {v(t.required_swing(), 'V')} peak with THD ≤ {t.distortion_max * 100:g} %")
    for label, val, unit, rel in [
        ("input Z", t.input_impedance_min, "Ω", "≥"),
        ("output Z", t.output_impedance_max, "Ω", "≤"),
        ("low cutoff", t.low_cutoff_max, "Hz", "≤"),
        ("high cutoff", t.high_cutoff_min, "Hz", "≥"),
        ("supply I", t.supply_current_max, "A", "≤"),
    ]:
        if val is not None:
            lines.append(f"    {label:<13} {rel} {v(val, unit)}")
    if t.snr_min is not None:
        lines.append(f"    SNR           ≥ {t.snr_min:g} dB at the nominal level")
    if t.isolation_min is not None:
        lines.append(f"    isolation     ≥ {t.isolation_min:g} dB between inputs")
    pp = spec.parts
    lines.append("  parts")
    lines.append(f"    resistors     {pp.resistor_series} ±{pp.resistor_tolerance * 100:g} %, {v(pp.resistor_min, 'Ω')} to {v(pp.resistor_max, 'Ω')}")
    lines.append(f"    capacitors    {pp.capacitor_series} ±{pp.capacitor_tolerance * 100:g} %, {v(pp.capacitor_min, 'F')} to {v(pp.capacitor_max, 'F')}")
    lines.append(f"    transistors   {', '.join(pp.transistors)}")
    if pp.stock:
        lines.append(f"    stock         {display_path(pp.stock)} ({pp.use})")
    lines.append(f"  topologies      {', '.join(spec.topologies)}")
    se = spec.search
    lines.append(f"  search          top {se.top}, time limit {se.time_limit:g} s, seed {se.seed}")
    return lines


def _unused(_: Problem) -> None:  # keeps Problem imported for type checkers
    return None
