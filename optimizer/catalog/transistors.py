"""Transistor types (datasheet figures) and the device models derived from them.

A :class:`TransistorType` holds what a datasheet states: polarity, gain group, VBE at a
current, Early voltage, ratings, fT, Cob, pinout. :meth:`TransistorType.model` turns it
into a :class:`BjtModel`, the Ebers–Moll transport model with Early effect that the
analysis engine and the SPICE netlists use. The derivation (all at the datasheet
temperature, 25 °C):

* ``is``   = I_C / exp(V_BE / V_T) at the stated V_BE and I_C;
* ``beta`` = the typical hFE (geometric mean of min and max when no typical is given);
* ``va``   = the Early voltage;
* ``cjc``  = Cob scaled back to zero bias: Cob·(1 + V_CB/VJC)^MJC;
* ``cje``  = Cib scaled back to zero bias the same way (2·cjc when Cib is not given);
* ``tf``   = 1/(2π fT) − (Cje + Cjc at the test point)/g_m, so the model's fT matches
  the datasheet at its test current (never below 10 ps).

The catalog file (``catalog/transistors.yaml``) documents its own fields in its header.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path

from ..errors import FileProblems, Problem, ValueSyntaxError
from ..physics import thermal_voltage, T_REF
from ..spec.quantities import parse_quantity
from ..spec.source import Node, Reader, load_yaml
from .data import catalog_path

__all__ = ["BjtModel", "TransistorType", "load_transistors", "parse_model_fields", "transistor_types"]

#: Junction defaults (SPICE defaults for the Gummel–Poon model).
VJ_DEFAULT = 0.75
MJ_DEFAULT = 0.33
FC_DEFAULT = 0.5


@dataclass(frozen=True)
class BjtModel:
    """Ebers–Moll transport model with Early effect, as used by the analysis and netlists.

    All values SI at the nominal temperature ``tnom`` (kelvin). ``beta`` is the forward
    current gain used at nominal; corners replace it by ``beta_min`` / ``beta_max``.
    """

    polarity: str  # "npn" or "pnp"
    is_: float  # saturation current, A
    beta: float  # forward beta (BF)
    va: float  # forward Early voltage, V (VAF)
    beta_reverse: float = 1.0  # BR
    cjc: float = 0.0  # zero-bias B–C depletion capacitance, F
    cje: float = 0.0  # zero-bias B–E depletion capacitance, F
    tf: float = 0.0  # forward transit time, s
    vje: float = VJ_DEFAULT
    mje: float = MJ_DEFAULT
    vjc: float = VJ_DEFAULT
    mjc: float = MJ_DEFAULT
    fc: float = FC_DEFAULT
    xtb: float = 1.5  # beta temperature exponent
    xti: float = 3.0  # IS temperature exponent
    eg: float = 1.11  # band gap, eV
    tnom: float = T_REF  # K
    beta_min: float | None = None
    beta_max: float | None = None
    name: str = "custom"

    @property
    def sign(self) -> float:
        """+1 for NPN, −1 for PNP: junction voltages are ``sign·(vb − ve)``."""
        return 1.0 if self.polarity == "npn" else -1.0

    def with_beta(self, beta: float) -> "BjtModel":
        return replace(self, beta=beta)

    def to_json(self) -> dict[str, float | str | None]:
        """The model parameters under the keys of ``check --json`` (``is``, ``beta``, ...)."""
        d = asdict(self)
        d["is"] = d.pop("is_")
        return d

    def spice_card(self, model_name: str) -> str:
        """A ``.model`` line for SPICE (Gummel–Poon reduces to this model with these parameters)."""
        kind = "NPN" if self.polarity == "npn" else "PNP"
        p = {
            "IS": self.is_,
            "BF": self.beta,
            "BR": self.beta_reverse,
            "VAF": self.va,
            "CJE": self.cje,
            "VJE": self.vje,
            "MJE": self.mje,
            "CJC": self.cjc,
            "VJC": self.vjc,
            "MJC": self.mjc,
            "FC": self.fc,
            "TF": self.tf,
            "XTB": self.xtb,
            "XTI": self.xti,
            "EG": self.eg,
            "TNOM": self.tnom - 273.15,
        }
        body = " ".join(f"{k}={v:.6g}" for k, v in p.items())
        return f".model {model_name} {kind} ({body})"


@dataclass(frozen=True)
class TransistorType:
    """One transistor type as its datasheet describes it (SI units)."""

    name: str
    polarity: str
    package: str
    pinout: str  # lead order, e.g. "EBC": flat face toward you, leads down, left to right
    hfe_min: float
    hfe_max: float
    hfe_typ: float
    hfe_ic: float  # A, the current the hFE group is specified at
    vbe: float  # V at vbe_ic
    vbe_ic: float
    early_voltage: float
    vce_sat: float
    vceo: float
    ic_max: float
    ptot: float  # W at 25 °C ambient
    tj_max: float  # K
    ft: float
    ft_ic: float
    cob: float
    cob_vcb: float
    cib: float | None
    cib_veb: float
    beta_reverse: float
    xtb: float
    source: str
    note: str = ""
    aliases: tuple[str, ...] = field(default_factory=tuple)

    def model(self) -> BjtModel:
        """The device model derived from the datasheet figures (see the module docstring)."""
        vt = thermal_voltage(T_REF)
        is_ = self.vbe_ic / math.expm1(self.vbe / vt)
        cjc = self.cob * (1 + self.cob_vcb / VJ_DEFAULT) ** MJ_DEFAULT
        if self.cib is not None:
            cje = self.cib * (1 + self.cib_veb / VJ_DEFAULT) ** MJ_DEFAULT
        else:
            cje = 2 * cjc
        gm = self.ft_ic / vt
        # Capacitances at the fT test point: VBE ≈ the forward drop, VCB ≈ the Cob test voltage.
        vbe_test = vt * math.log(self.ft_ic / is_)
        cje_test = _depletion(cje, vbe_test, VJ_DEFAULT, MJ_DEFAULT, FC_DEFAULT)
        cjc_test = self.cob
        tf = max(1.0 / (2 * math.pi * self.ft) - (cje_test + cjc_test) / gm, 1e-11)
        return BjtModel(
            polarity=self.polarity,
            is_=is_,
            beta=self.hfe_typ,
            va=self.early_voltage,
            beta_reverse=self.beta_reverse,
            cjc=cjc,
            cje=cje,
            tf=tf,
            xtb=self.xtb,
            beta_min=self.hfe_min,
            beta_max=self.hfe_max,
            name=self.name,
        )

    def ptot_at(self, ambient: float) -> float:
        """Allowed dissipation at an ambient temperature (K), derated linearly to tj_max."""
        if ambient <= T_REF:
            return self.ptot
        return max(self.ptot * (self.tj_max - ambient) / (self.tj_max - T_REF), 0.0)


def _depletion(c0: float, v: float, vj: float, mj: float, fc: float) -> float:
    """Depletion capacitance of a junction at forward voltage v (SPICE form)."""
    if v < fc * vj:
        return c0 * (1 - v / vj) ** (-mj)
    f2 = (1 - fc) ** (1 + mj)
    f3 = 1 - fc * (1 + mj)
    return c0 / f2 * (f3 + mj * v / vj)


# -------------------------------------------------------------------------------------
# Loading

_TYPE_FIELDS = {
    "polarity": True,
    "package": True,
    "pinout": True,
    "hfe": True,
    "vbe": True,
    "early_voltage": True,
    "vce_sat": True,
    "vceo": True,
    "ic_max": True,
    "ptot": True,
    "tj_max": False,
    "ft": True,
    "cob": True,
    "cib": False,
    "beta_reverse": False,
    "xtb": False,
    "source": True,
    "note": False,
    "aliases": False,
}


def _at(
    r: Reader,
    node: Node | None,
    kind: str,
    at_key: str,
    at_kind: str,
    at_default: float | None = None,
    at_optional: bool = False,
):
    """Read ``{value: .., at_X: ..}`` (or a bare quantity when at_default is given).

    ``at_X`` is required unless there is a default or ``at_optional`` is set (then it
    reads as ``None`` when absent).
    """
    if node is None:
        return None, None
    if not node.is_map:
        if at_default is None:
            r.problem(node, node.path, f"must be a mapping with value and {at_key}")
            return None, None
        return r.parse(node, lambda t: parse_quantity(t, kind)), at_default
    need = ["value"] if at_default is not None or at_optional else ["value", at_key]
    m = r.keys(node, ["value", "min", "typ", "max", at_key], need) or {}
    return r.parse(m.get("value"), lambda t: parse_quantity(t, kind)), (
        r.parse(m.get(at_key), lambda t: parse_quantity(t, at_kind)) if at_key in m else at_default
    )


def _number(text: object) -> float:
    """A plain number (YAML 1.1 reads 1e-14 as text, so accept numeric text too)."""
    if isinstance(text, bool):
        raise ValueSyntaxError(text, "number", "true/false is not a number")
    if isinstance(text, (int, float)):
        return float(text)
    try:
        return float(str(text))
    except ValueError:
        raise ValueSyntaxError(text, "number", "it is not a number", "write e.g. 1e-14") from None


def _polarity(r: Reader, node: Node | None) -> str | None:
    """``npn`` or ``pnp``; otherwise a problem naming every option as close as the closest."""
    if node is None:
        return None
    options = ["npn", "pnp"]
    if isinstance(node.value, str) and node.value in options:
        return node.value
    text = str(node.value).strip().lower()
    score = {o: difflib.SequenceMatcher(None, text, o).ratio() for o in options}
    best = max(score.values())
    close = [o for o in options if score[o] == best and best >= 0.5]
    hint = f"; did you mean {' or '.join(repr(o) for o in close)}?" if close else ""
    r.problem(node, node.path, f"{node.plain()!r} is not allowed{hint} (allowed: {', '.join(options)})")
    return None


def _positive(r: Reader, node: Node | None, value: float | None) -> None:
    """Record a problem when a parsed figure is zero or negative."""
    if node is not None and value is not None and not value > 0:
        r.problem(node, node.path, f"must be above zero (got {node.plain()!r})")


def _load_type(r: Reader, name: str, node: Node) -> TransistorType | None:
    n0 = len(r.problems)  # before keys(): a missing required field must stop the entry too
    m = r.keys(node, _TYPE_FIELDS, [k for k, req in _TYPE_FIELDS.items() if req])
    if m is None:
        return None
    polarity = _polarity(r, m.get("polarity"))
    hfe = r.keys(m["hfe"], ["min", "typ", "max", "at_ic", "at_vce"], ["min", "max", "at_ic"]) if "hfe" in m else None
    hfe = hfe or {}
    hmin = r.parse(hfe.get("min"), _number)
    hmax = r.parse(hfe.get("max"), _number)
    htyp = r.parse(hfe.get("typ"), _number) if "typ" in hfe else None
    hic = r.parse(hfe.get("at_ic"), lambda t: parse_quantity(t, "current"))
    if "at_vce" in hfe:
        r.parse(hfe["at_vce"], lambda t: parse_quantity(t, "voltage"))
    _positive(r, hfe.get("min"), hmin)
    _positive(r, hfe.get("at_ic"), abs(hic) if hic is not None else None)
    if hmin is not None and hmax is not None and hmin > hmax:
        r.problem(m["hfe"], m["hfe"].path, f"min {hmin:g} is above max {hmax:g}")
    elif htyp is not None and hmin is not None and hmax is not None and not hmin <= htyp <= hmax:
        r.problem(hfe["typ"], hfe["typ"].path, f"typ {htyp:g} is outside min {hmin:g} … max {hmax:g}")
    vbe, vbe_ic = _at(r, m.get("vbe"), "voltage", "at_ic", "current")
    vce_sat, _ = _at(r, m.get("vce_sat"), "voltage", "at_ic", "current", at_default=0.0)
    ft, ft_ic = _at(r, m.get("ft"), "frequency", "at_ic", "current")
    cob, cob_vcb = _at(r, m.get("cob"), "capacitance", "at_vcb", "voltage")
    cib, cib_veb = _at(r, m.get("cib"), "capacitance", "at_veb", "voltage", at_optional=True) if "cib" in m else (None, 0.5)
    vals = dict(
        early_voltage=r.parse(m.get("early_voltage"), lambda t: parse_quantity(t, "voltage")),
        vceo=r.parse(m.get("vceo"), lambda t: parse_quantity(t, "voltage")),
        ic_max=r.parse(m.get("ic_max"), lambda t: parse_quantity(t, "current")),
        ptot=r.parse(m.get("ptot"), lambda t: parse_quantity(t, "power")),
    )
    tj = r.parse(m.get("tj_max"), lambda t: parse_quantity(t, "temperature")) if "tj_max" in m else 423.15
    br = r.parse(m.get("beta_reverse"), _number) if "beta_reverse" in m else 1.0
    xtb = r.parse(m.get("xtb"), _number) if "xtb" in m else 1.5
    aliases: tuple[str, ...] = ()
    if "aliases" in m:
        seq = r.seq(m["aliases"]) or []
        aliases = tuple(a for a in (r.text(x) for x in seq) if a)

    def sub_node(key: str, sub: str) -> Node | None:
        nd = m.get(key)
        return nd.value.get(sub) if nd is not None and nd.is_map else nd

    # Figures the model divides by or takes the logarithm of must be above zero. Voltages
    # and currents may carry a PNP sign (their magnitude is used); the rest may not.
    for nd, v in [
        (sub_node("vbe", "value"), vbe),
        (sub_node("vbe", "at_ic"), vbe_ic),
        (m.get("early_voltage"), vals["early_voltage"]),
        (m.get("vceo"), vals["vceo"]),
        (m.get("ic_max"), vals["ic_max"]),
        (sub_node("ft", "at_ic"), ft_ic),
    ]:
        _positive(r, nd, abs(v) if v is not None else None)
    for nd, v in [
        (m.get("ptot"), vals["ptot"]),
        (sub_node("ft", "value"), ft),
        (sub_node("cob", "value"), cob),
        (sub_node("cib", "value"), cib),
        (m.get("beta_reverse"), br),
    ]:
        _positive(r, nd, v)
    if tj is not None and tj <= T_REF:
        r.problem(m["tj_max"], m["tj_max"].path, f"must be above 25 °C (got {m['tj_max'].plain()!r})")
    # Text fields: a blank or missing value is a problem, not the text "None".
    package = r.text(m.get("package"))
    pinout = r.text(m.get("pinout"))
    source = r.text(m.get("source"))
    note = r.text(m["note"]) if "note" in m else ""
    if pinout is not None and sorted(pinout.upper()) != ["B", "C", "E"]:
        r.problem(m["pinout"], m["pinout"].path, f"{pinout!r} must name the three leads E, B and C once each, e.g. EBC")
    if len(r.problems) > n0:
        return None
    return TransistorType(
        name=name,
        polarity=polarity,
        package=package,
        pinout=pinout.upper(),
        hfe_min=hmin,
        hfe_max=hmax,
        hfe_typ=htyp if htyp is not None else math.sqrt(hmin * hmax),
        hfe_ic=hic,
        vbe=abs(vbe),
        vbe_ic=abs(vbe_ic),
        early_voltage=abs(vals["early_voltage"]),
        vce_sat=abs(vce_sat),
        vceo=abs(vals["vceo"]),
        ic_max=abs(vals["ic_max"]),
        ptot=vals["ptot"],
        tj_max=tj,
        ft=ft,
        ft_ic=abs(ft_ic),
        cob=cob,
        cob_vcb=abs(cob_vcb),
        cib=cib,
        cib_veb=abs(cib_veb) if cib_veb is not None else 0.5,
        beta_reverse=br,
        xtb=xtb,
        source=source,
        note=note,
        aliases=aliases,
    )


def load_transistors(path: str | Path | None = None) -> dict[str, TransistorType]:
    """Load the transistor catalog (default ``catalog/transistors.yaml``).

    Returns
    -------
    dict
        Type name → :class:`TransistorType`; aliases map to the same object.

    Raises
    ------
    FileProblems
        With every problem in the file.
    """
    p = Path(path) if path is not None else catalog_path("transistors.yaml")
    root = load_yaml(p)
    r = Reader(str(root.path) if False else _shown(p))
    types = r.mapping(root, "a mapping of type name → fields") or {}
    out: dict[str, TransistorType] = {}
    for name, node in types.items():
        t = _load_type(r, name, node)
        if t is not None:
            out[name] = t
    r.raise_if_any()
    for t in list(out.values()):
        for a in t.aliases:
            out.setdefault(a, t)
    return out


def _shown(p: Path) -> str:
    from ..errors import display_path

    return display_path(p)


_CACHE: dict[str, dict[str, TransistorType]] = {}


def transistor_types() -> dict[str, TransistorType]:
    """The bundled catalog, loaded once."""
    key = str(catalog_path("transistors.yaml"))
    if key not in _CACHE:
        _CACHE[key] = load_transistors()
    return _CACHE[key]


_MODEL_KEYS = {
    "polarity": "choice",
    "is": "number",
    "beta": "number",
    "va": "voltage",
    "beta_reverse": "number",
    "cjc": "capacitance",
    "cje": "capacitance",
    "tf": "time",
    "xtb": "number",
    "beta_min": "number",
    "beta_max": "number",
    "name": "text",
}


def parse_model_fields(r: Reader, node: Node) -> BjtModel | None:
    """Read an inline model ``{polarity: npn, is: 1e-14, beta: 200, va: 100, ...}``."""
    m = r.keys(node, _MODEL_KEYS, ["polarity", "is", "beta", "va"])
    if m is None:
        return None
    n0 = len(r.problems)

    def num_or_unit(key: str, kind: str) -> float | None:
        nd = m.get(key)
        if nd is None:
            return None
        if kind == "number":
            return r.parse(nd, _number)
        # Accept bare numbers (SI) as well as quantities with units for model parameters.
        if isinstance(nd.value, (int, float)) and not isinstance(nd.value, bool):
            return float(nd.value)
        if kind == "time" and isinstance(nd.value, str) and nd.value.strip()[-1:].isalpha() and not nd.value.strip().endswith("s"):
            return r.parse(nd, lambda t: parse_quantity(str(t) + "s", "time"))
        return r.parse(nd, lambda t: parse_quantity(t, kind))

    polarity = r.choice(m.get("polarity"), ["npn", "pnp"])
    vals = {k: num_or_unit(k, kind) for k, kind in _MODEL_KEYS.items() if kind not in ("choice", "text")}
    if len(r.problems) > n0:
        return None
    for key in ("is", "beta", "va"):
        if vals[key] is not None and vals[key] <= 0:
            r.problem(m[key], m[key].path, f"must be positive (got {m[key].plain()!r})")
            return None
    return BjtModel(
        polarity=polarity,
        is_=vals["is"],
        beta=vals["beta"],
        va=vals["va"],
        beta_reverse=vals["beta_reverse"] or 1.0,
        cjc=vals["cjc"] or 0.0,
        cje=vals["cje"] or 0.0,
        tf=vals["tf"] or 0.0,
        xtb=vals["xtb"] if vals["xtb"] is not None else 1.5,
        beta_min=vals["beta_min"],
        beta_max=vals["beta_max"],
        name=str(m["name"].value) if "name" in m else "custom",
    )


def _problem(file: str, msg: str) -> FileProblems:
    return FileProblems([Problem(file, 0, "", msg)])
