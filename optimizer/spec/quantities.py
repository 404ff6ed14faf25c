"""Reading and writing the values people type: part values and spec quantities.

This is the only module that reads units. Everything it returns is an SI float (ohm,
farad, volt, ampere, hertz, second, kelvin, watt), a fraction (percent / 100) or a
decibel figure, and everything after it works on those floats.

Part values
    :func:`parse_value` reads a resistance or capacitance in the IEC 60062 letter-and-digit
    code (``4K7``, ``4k7``, ``R47``, ``2M2``, ``4n7``, ``1u0``, ``1µ0``), optionally followed
    by a tolerance letter (``27KK`` = 27 kΩ ±10 %), or in SI notation with or without a
    unit (``4.7k``, ``4.7 kΩ``, ``4700``, ``100nF``, ``0.1 uF``, ``2.2 MOhm``).
    :func:`format_code` writes the letter-and-digit code back; the two round-trip for every
    standard series value.

Spec quantities
    :func:`parse_quantity` reads ``9 V``, ``20 Hz``, ``3 mA``, ``6 dB``, ``-10 dBV``,
    ``+4 dBu``, ``1 %``, ``35 °C``, ``30 s``, ``0.25 W``, ``1/4 W``.

Ambiguous input is refused, never guessed: a lower-case ``m`` on a resistance (milli or
mega?), two decimal markers (``4.7k7``), a comma (``4,7k``), a bare ``4E7`` (4.7 Ω in the
letter code, 4×10⁷ as an exponent), a capacitance with neither multiplier nor unit
(``100``: pF or µF?), and a voltage, current, frequency or temperature without its unit.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from decimal import Decimal
from fractions import Fraction

from ..errors import ValueSyntaxError

__all__ = [
    "DBU_REF",
    "PartValue",
    "TOLERANCE_LETTERS",
    "format_code",
    "format_si",
    "parse_quantity",
    "parse_tolerance",
    "parse_value",
]

#: 0 dBu in volts rms: the voltage of 1 mW in 600 Ω, √0.6 V.
DBU_REF = math.sqrt(0.6)

#: Tolerance letters of IEC 60062 (symmetric ones only), as fractions.
TOLERANCE_LETTERS: dict[str, float] = {
    "A": 0.0005,
    "B": 0.001,
    "C": 0.0025,
    "D": 0.005,
    "F": 0.01,
    "G": 0.02,
    "J": 0.05,
    "K": 0.10,
    "M": 0.20,
    "N": 0.30,
}

# Powers of ten of the multiplier letters and SI prefixes.
_RES_LETTERS = {"L": -3, "R": 0, "r": 0, "K": 3, "k": 3, "M": 6, "G": 9}
_CAP_LETTERS = {"p": -12, "n": -9, "u": -6, "µ": -6, "μ": -6, "m": -3}
_SI_PREFIX = {
    "p": -12,
    "n": -9,
    "u": -6,
    "µ": -6,
    "μ": -6,
    "m": -3,
    "": 0,
    "k": 3,
    "K": 3,
    "M": 6,
    "Meg": 6,
    "meg": 6,
    "G": 9,
}


def _scaled(number: str, power: int) -> float:
    """``number`` × 10**power, rounded once (so 4n7 is exactly the float nearest 4.7e-9)."""
    return float(Decimal(number).scaleb(power))

_NUM = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"


@dataclass(frozen=True)
class PartValue:
    """A part value as read: the SI value and, when a letter gave it, the tolerance."""

    value: float
    tolerance: float | None = None


def _fail(text: object, kind: str, reason: str, hint: str = "") -> ValueSyntaxError:
    return ValueSyntaxError(text, kind, reason, hint)


def _common_checks(text: str, kind: str, example: str) -> str:
    s = text.strip()
    if not s:
        raise _fail(text, kind, "it is empty", f"write a value such as {example}")
    if "," in s:
        raise _fail(
            text,
            kind,
            "a comma is not a decimal marker here",
            f"write a point or the letter code, e.g. {example}",
        )
    if s.count(".") > 1:
        raise _fail(text, kind, "it has two decimal points", f"write one, e.g. {example}")
    return s


def parse_value(text: object, kind: str) -> PartValue:
    """Read a resistance or capacitance.

    Parameters
    ----------
    text
        What the user wrote. Plain numbers (YAML ``4700``) are read as ohms for a resistance;
        a capacitance always needs a multiplier letter or a unit.
    kind
        ``"resistance"`` or ``"capacitance"``.

    Returns
    -------
    PartValue
        The value in ohms or farads, and the tolerance a trailing letter gave (or ``None``).

    Raises
    ------
    ValueSyntaxError
        When the text is not a value of that kind or could be read two ways.
    """
    if kind not in ("resistance", "capacitance"):
        raise ValueError(f"kind must be 'resistance' or 'capacitance' (got {kind!r})")
    if isinstance(text, bool):
        raise _fail(text, kind, "true/false is not a value", "write a value such as 4K7")
    if isinstance(text, (int, float)):
        return _parse_number(text, kind)
    if not isinstance(text, str):
        raise _fail(text, kind, f"a {type(text).__name__} is not a value", "write e.g. 4K7")
    if kind == "resistance":
        return _parse_resistance(text)
    return _parse_capacitance(text)


def _parse_number(x: float, kind: str) -> PartValue:
    if not math.isfinite(x) or x <= 0:
        raise _fail(x, kind, "it must be a positive number", "")
    if kind == "capacitance":
        raise _fail(
            x,
            kind,
            "a plain number could be pF, nF or µF",
            f"write it with a multiplier or unit, e.g. {x:g}n or {x:g} µF",
        )
    return PartValue(float(x))


_RKM_RES = re.compile(r"^(\d*)([LRrKkMG])(\d*)([A-Z]?)$")
_RKM_CAP = re.compile(r"^(\d*)([pnuµμm])(\d*)([A-Z]?)$")


def _tol_letter(letter: str, text: str, kind: str) -> float | None:
    if not letter:
        return None
    if letter not in TOLERANCE_LETTERS:
        allowed = ", ".join(TOLERANCE_LETTERS)
        raise _fail(text, kind, f"{letter!r} is not a tolerance letter", f"use one of {allowed}")
    return TOLERANCE_LETTERS[letter]


def _parse_resistance(text: str) -> PartValue:
    kind = "resistance"
    s = _common_checks(text, kind, "4K7 or 4.7k")
    compact = s.replace(" ", "")
    if re.fullmatch(r"\d+[eE]\d+[A-Z]?", compact):  # also 4E7J: a tolerance letter may follow
        raise _fail(
            text,
            kind,
            "'E' could be the ohm point of the letter code or an exponent",
            f"write {compact[0:compact.upper().index('E')]}R{compact[compact.upper().index('E') + 1:]} "
            "for the letter code, or a number with a decimal point and exponent (e.g. 4.0e7)",
        )
    m = _RKM_RES.match(compact)
    if m:
        lead, letter, tail, tol = m.groups()
        if letter == "M" and not lead:
            raise _fail(text, kind, "the letter code needs a digit before M", "write e.g. 2M2")
        if not lead and not tail:
            raise _fail(text, kind, "there are no digits", "write e.g. 4K7")
        if not lead and letter not in ("R", "r", "L"):
            raise _fail(text, kind, f"the letter code needs a digit before {letter}", "write e.g. 4K7")
        value = _scaled(f"{lead or '0'}.{tail or '0'}", _RES_LETTERS[letter])
        if value == 0:
            raise _fail(text, kind, "it is zero", "a resistance must be positive")
        return PartValue(value, _tol_letter(tol, text, kind))
    if re.fullmatch(r"\d*\.\d*[LRrKkMG]\d+[A-Z]?", compact):
        raise _fail(
            text,
            kind,
            "it has two decimal markers (a point and a letter in the middle)",
            "write either 4.7k or 4K7",
        )
    if re.fullmatch(r"\d*\.?\d*m\d*[A-Za-zΩ]*", compact) and "m" in compact and "meg" not in compact:
        raise _fail(
            text,
            kind,
            "a lower-case m on a resistance could mean milli or mega",
            "write M for megohms (2M2, 2.2M) or L for milliohms (2L2)",
        )
    m = re.fullmatch(
        rf"({_NUM})\s*(Meg|meg|[pnuµμmkKMG]?)\s*(Ω|ohms?|Ohms?|OHMS?|R)?\s*([A-Z]?)",
        s,
    )
    if m:
        num, prefix, unit, tol = m.groups()
        if prefix == "m":
            raise _fail(
                text,
                kind,
                "a lower-case m on a resistance could mean milli or mega",
                "write M for megohms (2.2M) or L for milliohms (2L2)",
            )
        if prefix in ("p", "n", "u", "µ", "μ"):
            raise _fail(text, kind, f"{prefix!r} is a capacitor multiplier", "a resistance uses R, K, M or G")
        value = _scaled(num, _SI_PREFIX[prefix])
        if not math.isfinite(value) or value <= 0:
            raise _fail(text, kind, "it must be positive", "")
        return PartValue(value, _tol_letter(tol, text, kind))
    raise _fail(
        text,
        kind,
        "it is neither a letter code nor a number with a unit",
        "write e.g. 4K7, 470R, 4.7k, 4.7 kΩ or 4700",
    )


def _parse_capacitance(text: str) -> PartValue:
    kind = "capacitance"
    s = _common_checks(text, kind, "4n7 or 4.7 nF")
    compact = s.replace(" ", "")
    m = _RKM_CAP.match(compact)
    if m:
        lead, letter, tail, tol = m.groups()
        if not lead:
            raise _fail(text, kind, f"the letter code needs a digit before {letter}", "write e.g. 4n7")
        value = _scaled(f"{lead}.{tail or '0'}", _CAP_LETTERS[letter])
        if value == 0:
            raise _fail(text, kind, "it is zero", "a capacitance must be positive")
        # A trailing F is the farad (100nF), never the 1 % tolerance letter.
        return PartValue(value, None if tol == "F" else _tol_letter(tol, text, kind))
    if re.fullmatch(r"\d*\.\d*[pnuµμm]\d+[A-Z]?", compact):
        raise _fail(
            text,
            kind,
            "it has two decimal markers (a point and a letter in the middle)",
            "write either 4.7n or 4n7",
        )
    if re.fullmatch(r"\d+[PNU]\d*F?", compact):
        raise _fail(text, kind, "capacitor multipliers are lower case", "write p, n, u (or µ), e.g. 4n7")
    m = re.fullmatch(rf"({_NUM})\s*([pnuµμm]?)\s*(F|f)?\s*([A-Z]?)", s)
    if m:
        num, prefix, unit, tol = m.groups()
        if not prefix and not unit:
            raise _fail(
                text,
                kind,
                "a plain number could be pF, nF or µF",
                f"write it with a multiplier or unit, e.g. {num}n or {num} µF",
            )
        if unit == "f":
            raise _fail(text, kind, "the farad is written with a capital F", f"write {num}{prefix}F")
        value = _scaled(num, _SI_PREFIX[prefix])
        if not math.isfinite(value) or value <= 0:
            raise _fail(text, kind, "it must be positive", "")
        return PartValue(value, _tol_letter(tol, text, kind))
    if re.fullmatch(r"\d+[kKM]\d*F?", compact):
        raise _fail(text, kind, "K and M are resistor multipliers", "a capacitance uses p, n, u (µ) or m")
    raise _fail(
        text,
        kind,
        "it is neither a letter code nor a number with a unit",
        "write e.g. 4n7, 100n, 10u, 0.1 µF or 100 nF",
    )


# ---------------------------------------------------------------------------------------
# Formatting


def _sig(x: float, digits: int = 4) -> str:
    """x with up to ``digits`` significant figures, no exponent, no trailing zeros."""
    if x == 0:
        return "0"
    d = digits - 1 - math.floor(math.log10(abs(x)))
    r = round(x, d)
    s = f"{r:.{max(d, 0)}f}"
    if "." in s:
        s = s.rstrip("0").rstrip(".")
    return s


def format_code(value: float, kind: str) -> str:
    """Write a resistance or capacitance in the letter-and-digit code of IEC 60062.

    ``4700`` → ``4K7``, ``470`` → ``470R``, ``0.47`` → ``R47``, ``2.2e6`` → ``2M2``,
    ``4.7e-9`` → ``4n7``, ``1e-5`` → ``10u`` (``u`` stands for µ). Up to four significant
    figures are kept; :func:`parse_value` reads every result back to the same value.
    """
    if kind == "resistance":
        steps = [(1e9, "G"), (1e6, "M"), (1e3, "K"), (1.0, "R")]
    elif kind == "capacitance":
        steps = [(1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p")]
    else:
        raise ValueError(f"kind must be 'resistance' or 'capacitance' (got {kind!r})")
    if not (value > 0 and math.isfinite(value)):
        raise ValueError(f"value must be positive and finite (got {value!r})")
    # Round to four significant figures first, so 999.99999 becomes 1K and not 1000R.
    v = float(_sig(value, 4))
    scale, letter = steps[-1]
    for s_, l_ in steps:
        if v >= s_ * (1 - 1e-9):
            scale, letter = s_, l_
            break
    mant = _sig(v / scale, 4)
    if "." not in mant:
        return f"{mant}{letter}"
    whole, frac = mant.split(".")
    if whole == "0" and kind == "resistance":
        return f"R{frac}"
    return f"{whole}{letter}{frac}"


def format_si(value: float, unit: str, digits: int = 3) -> str:
    """Write a value with an SI prefix: ``format_si(4700, "Ω")`` → ``"4.7 kΩ"``."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}".strip()
    prefixes = [(1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n"), (1e-12, "p")]
    a = abs(value)
    for scale, p in prefixes:
        if a >= scale * 0.9995:
            return f"{_sig(value / scale, digits)} {p}{unit}"
    return f"{_sig(value / 1e-12, digits)} p{unit}"


# ---------------------------------------------------------------------------------------
# Spec quantities


_UNIT_KINDS = {
    "voltage": ("V", "9 V or 500 mV"),
    "current": ("A", "3 mA or 500 µA"),
    "frequency": ("Hz", "20 Hz or 20 kHz"),
    "time": ("s", "30 s"),
    "power": ("W", "0.25 W, 250 mW or 1/4 W"),
    "charge": ("Ah", "500 mAh or 1.2 Ah"),
}

_KINDS = (
    "voltage",
    "current",
    "frequency",
    "time",
    "power",
    "charge",
    "temperature",
    "decibel",
    "level",
    "percent",
    "resistance",
    "capacitance",
)


def parse_tolerance(text: object) -> float:
    """Read a tolerance: ``5 %``, ``0.5%`` or a tolerance letter (``J`` = 5 %). Returns a fraction.

    ``0 %`` is allowed: ideal parts, for comparisons that leave tolerances out.
    """
    if isinstance(text, str) and text.strip() in TOLERANCE_LETTERS:
        return TOLERANCE_LETTERS[text.strip()]
    frac = parse_quantity(text, "percent")
    if not 0 <= frac < 1:
        raise _fail(text, "tolerance", "it must be from 0 % up to (not including) 100 %", "write e.g. 5 %")
    return frac


def parse_quantity(text: object, kind: str) -> float:
    """Read a spec quantity and return it in SI.

    Parameters
    ----------
    text
        What the user wrote, e.g. ``"9 V"``, ``"-10 dBV"``, ``"35 °C"``.
    kind
        One of ``voltage`` (V), ``current`` (A), ``frequency`` (Hz), ``time`` (s),
        ``power`` (W), ``charge`` (a battery's ``mAh`` or ``Ah``, returned in coulombs),
        ``temperature`` (returned in kelvin), ``decibel`` (returned in dB),
        ``level`` (a signal amplitude, returned in volts **peak**: ``dBV`` and ``dBu`` are
        rms levels of a sine; plain volts are peak unless marked ``rms``, ``pk`` or ``pp``),
        ``percent`` (returned as a fraction), ``resistance`` or ``capacitance``.

    Raises
    ------
    ValueSyntaxError
        For a missing unit, a wrong unit, or a value that cannot be read.
    """
    if kind not in _KINDS:
        raise ValueError(f"kind must be one of {', '.join(_KINDS)} (got {kind!r})")
    if kind in ("resistance", "capacitance"):
        return parse_value(text, kind).value
    if isinstance(text, bool) or text is None or isinstance(text, (list, dict)):
        raise _fail(text, kind, "it is not a quantity", _example(kind))
    if isinstance(text, (int, float)):
        if kind == "percent":
            raise _fail(text, kind, "the % sign is missing", f"write {text:g} %")
        if kind == "temperature":
            raise _fail(text, kind, "the unit is missing", f"write {text:g} °C")
        raise _fail(text, kind, "the unit is missing", _example(kind))
    if not isinstance(text, str):
        raise _fail(text, kind, "it is not a quantity", _example(kind))
    s = text.strip()
    if "," in s:
        raise _fail(text, kind, "a comma is not a decimal marker here", _example(kind))
    if kind == "temperature":
        return _parse_temperature(text, s)
    if kind == "decibel":
        m = re.fullmatch(rf"({_NUM})\s*dB", s)
        if not m:
            raise _fail(text, kind, _why_not(s, "dB"), "write e.g. 6 dB")
        return float(m.group(1))
    if kind == "percent":
        m = re.fullmatch(rf"({_NUM})\s*%", s)
        if not m:
            if re.fullmatch(_NUM, s):
                raise _fail(text, kind, "the % sign is missing", f"write {s} %")
            raise _fail(text, kind, "it is not a percentage", "write e.g. 1 %")
        return float(m.group(1)) / 100.0
    if kind == "level":
        return _parse_level(text, s)
    unit, example = _UNIT_KINDS[kind]
    if kind == "power":
        m = re.fullmatch(r"(\d+)\s*/\s*(\d+)\s*W", s)
        if m:
            if int(m.group(2)) == 0:
                raise _fail(text, kind, "division by zero", "write e.g. 1/4 W")
            return float(Fraction(int(m.group(1)), int(m.group(2))))
    m = re.fullmatch(rf"({_NUM})\s*([pnuµμmkKMG]?)\s*(?i:{re.escape(unit)})", s)
    if not m:
        raise _fail(text, kind, _why_not(s, unit), f"write e.g. {example}")
    prefix = m.group(2)
    value = _scaled(m.group(1), _SI_PREFIX[prefix])
    return value * 3600.0 if kind == "charge" else value


def _example(kind: str) -> str:
    examples = {
        "temperature": "write e.g. 25 °C",
        "decibel": "write e.g. 6 dB",
        "level": "write e.g. -10 dBV, +4 dBu, 1.2 V rms or 0.5 V",
        "percent": "write e.g. 1 %",
    }
    if kind in _UNIT_KINDS:
        return f"write e.g. {_UNIT_KINDS[kind][1]}"
    return examples.get(kind, "")


def _why_not(s: str, unit: str) -> str:
    if re.fullmatch(_NUM, s):
        return "the unit is missing"
    m = re.fullmatch(rf"(?:\d+\s*/\s*\d+|{_NUM})\s*(.*)", s)
    if m and m.group(1):
        return f"the unit {m.group(1)!r} is not {unit!r}"
    return "it is not a number with a unit"


def _parse_temperature(text: object, s: str) -> float:
    m = re.fullmatch(rf"({_NUM})\s*(°C|℃|degC|C|K)", s)
    if not m:
        if re.fullmatch(_NUM, s):
            raise _fail(text, "temperature", "the unit is missing", f"write {s} °C")
        if re.fullmatch(rf"{_NUM}\s*(°F|F)", s):
            raise _fail(text, "temperature", "Fahrenheit is not accepted", "write the temperature in °C")
        raise _fail(text, "temperature", "it is not a temperature", "write e.g. 25 °C")
    v = float(m.group(1))
    kelvin = v if m.group(2) == "K" else v + 273.15
    if kelvin <= 0:
        raise _fail(text, "temperature", "it is below absolute zero", "write e.g. 25 °C")
    return kelvin


def _parse_level(text: object, s: str) -> float:
    m = re.fullmatch(rf"({_NUM})\s*(dBV|dBu)", s)
    if m:
        rms = (1.0 if m.group(2) == "dBV" else DBU_REF) * 10 ** (float(m.group(1)) / 20)
        return rms * math.sqrt(2)
    if re.fullmatch(rf"{_NUM}\s*(dbv|dbu|DBV|DBU|dBm)", s):
        raise _fail(text, "level", "levels are written dBV or dBu", "write e.g. -10 dBV or +4 dBu")
    m = re.fullmatch(rf"({_NUM})\s*([munµμ]?)V\s*(rms|pk|peak|pp|p-p)?", s)
    if not m:
        raise _fail(text, "level", _why_not(s, "V"), "write e.g. -10 dBV, +4 dBu, 0.3 V rms or 0.5 V")
    v = _scaled(m.group(1), _SI_PREFIX[m.group(2)])
    if v < 0:
        raise _fail(text, "level", "an amplitude cannot be negative", "write e.g. 0.5 V")
    mark = m.group(3)
    if mark == "rms":
        return v * math.sqrt(2)
    if mark in ("pp", "p-p"):
        return v / 2
    return v
