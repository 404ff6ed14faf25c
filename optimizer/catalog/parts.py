"""What parts exist besides the E-series values: capacitor types and ratings, resistor
power ratings, potentiometer values and tapers.

Each table says where it comes from. "domain-reference §n" is the project's reference
sheet (/work/shared/reference/domain-reference.md); "common practice, no source" marks a
fact of the trade that no stored source was read for.
"""

from __future__ import annotations

import math

from ..errors import InputError, ValueSyntaxError
from .series import REL_TOL, get_series

__all__ = [
    "CAPACITOR_RANGES",
    "CAPACITOR_TYPES",
    "CAPACITOR_VOLTAGE_RATINGS",
    "LOG_TAPER_MIDPOINT",
    "POT_STYLES",
    "POT_TOLERANCE",
    "POT_VALUES",
    "RESISTOR_POWER_RATINGS",
    "TAPERS",
    "capacitor_values",
    "default_capacitor_type",
    "polarised",
    "pot_values",
    "power_rating_for",
    "taper_fraction",
    "voltage_rating_for",
]

# ---------------------------------------------------------------------------------------
# Ratings

#: DC voltage ratings of capacitors, volts. domain-reference §6.2 (6.3 … 100 V from the
#: list read there; 35 V is from memory in that sheet). §6.2 also lists 80 V, which this
#: table leaves out.
CAPACITOR_VOLTAGE_RATINGS: tuple[float, ...] = (6.3, 10.0, 16.0, 25.0, 35.0, 50.0, 63.0, 100.0)

#: Power ratings of through-hole resistors, watts. Common practice, no source.
RESISTOR_POWER_RATINGS: tuple[float, ...] = (0.125, 0.25, 0.5, 1.0, 2.0)


def _smallest_at_least(need: float, ratings: tuple[float, ...], what: str, unit: str) -> float:
    try:
        x = float(need)
    except (TypeError, ValueError):
        raise ValueError(f"the {what} needed must be a number (got {need!r})") from None
    if math.isnan(x) or x < 0:
        raise ValueError(f"the {what} needed must be zero or more (got {need!r})")
    for r in ratings:
        if r >= x * (1 - REL_TOL):
            return r
    raise InputError(
        f"a part must stand {x:g} {unit}, more than the highest {what} offered "
        f"({ratings[-1]:g} {unit}); lower the supply or choose the part by hand"
    )


def voltage_rating_for(volts_needed: float) -> float:
    """The smallest standard capacitor voltage rating that is at least ``volts_needed``.

    Any derating (e.g. using a part at no more than 80 % of its rating, domain-reference
    §6.2) is the caller's: pass the voltage already divided by the derating factor.

    Parameters
    ----------
    volts_needed
        The voltage the capacitor must stand, volts, zero or more.

    Returns
    -------
    float
        One of :data:`CAPACITOR_VOLTAGE_RATINGS`.

    Raises
    ------
    InputError
        When more than the highest rating (100 V) is needed.
    ValueError
        When ``volts_needed`` is negative or not a number.
    """
    return _smallest_at_least(volts_needed, CAPACITOR_VOLTAGE_RATINGS, "voltage rating", "V")


def power_rating_for(watts: float) -> float:
    """The smallest standard resistor power rating that is at least ``watts``.

    As with :func:`voltage_rating_for`, any derating is the caller's.

    Parameters
    ----------
    watts
        The power the resistor must dissipate, watts, zero or more.

    Returns
    -------
    float
        One of :data:`RESISTOR_POWER_RATINGS`.

    Raises
    ------
    InputError
        When more than the highest rating (2 W) is needed.
    ValueError
        When ``watts`` is negative or not a number.
    """
    return _smallest_at_least(watts, RESISTOR_POWER_RATINGS, "power rating", "W")


# ---------------------------------------------------------------------------------------
# Capacitors

#: Capacitor types. "electrolytic" is the aluminium, polarised kind; "bipolar" is the
#: non-polarised electrolytic (domain-reference §6.2 names both).
CAPACITOR_TYPES: tuple[str, ...] = ("ceramic", "film", "electrolytic", "bipolar")

#: Usual range of each type, farads, inclusive. Common practice, no source; the bipolar
#: range is assumed to be the same as the polarised one (also no source).
CAPACITOR_RANGES: dict[str, tuple[float, float]] = {
    "ceramic": (1e-12, 100e-9),
    "film": (1e-9, 10e-6),
    "electrolytic": (100e-9, 10e-3),
    "bipolar": (100e-9, 10e-3),
}

# Where default_capacitor_type changes type, farads. Common practice, no source.
_CERAMIC_BELOW = 1e-9
_FILM_BELOW = 1e-6


def _capacitor_type(type_: object) -> str:
    key = type_.strip().lower() if isinstance(type_, str) else None
    if key not in CAPACITOR_TYPES:
        raise ValueSyntaxError(
            type_,
            "capacitor type",
            "there is no such type",
            "use one of " + ", ".join(CAPACITOR_TYPES),
        )
    return key


def default_capacitor_type(value_farad: float) -> str:
    """The type of capacitor normally used for a value.

    Below 1 nF a ceramic (C0G) part; from 1 nF up to, not including, 1 µF a film part;
    from 1 µF up an aluminium electrolytic. Common practice, no source. A value within
    :data:`~optimizer.catalog.series.REL_TOL` of a boundary counts as the boundary.

    Parameters
    ----------
    value_farad
        The capacitance, farads, positive.

    Returns
    -------
    str
        ``"ceramic"``, ``"film"`` or ``"electrolytic"``.

    Raises
    ------
    ValueError
        When the value is not a positive finite number.
    """
    c = float(value_farad)
    if not (math.isfinite(c) and c > 0):
        raise ValueError(f"a capacitance must be a positive finite number (got {value_farad!r})")
    if c < _CERAMIC_BELOW * (1 - REL_TOL):
        return "ceramic"
    if c < _FILM_BELOW * (1 - REL_TOL):
        return "film"
    return "electrolytic"


def polarised(type_: str) -> bool:
    """Whether a capacitor of this type has a + and a − lead.

    Parameters
    ----------
    type_
        One of :data:`CAPACITOR_TYPES` (case is ignored).

    Returns
    -------
    bool
        True only for ``"electrolytic"``.

    Raises
    ------
    ValueSyntaxError
        For an unknown type.
    """
    return _capacitor_type(type_) == "electrolytic"


def capacitor_values(series: str, lo: float, hi: float, type: str | None = None) -> list[float]:  # noqa: A002
    """The values of ``series`` in [lo, hi] that are made in a capacitor type.

    The range is first narrowed to the type's usual range (:data:`CAPACITOR_RANGES`).
    With ``type=None`` the type is left to :func:`default_capacitor_type`, which covers
    1 pF to 10 mF, so that is the range used. Electrolytics are offered in the series
    asked for: the E6 mantissas 10 15 22 33 47 68 are all made, and a finer series is
    the caller's choice.

    Parameters
    ----------
    series
        A series name, e.g. ``"E6"`` (case is ignored).
    lo, hi
        The wanted range, farads, ``0 < lo <= hi``.
    type
        One of :data:`CAPACITOR_TYPES`, or ``None``.

    Returns
    -------
    list of float
        The values, ascending; empty when the range and the type's range do not meet.

    Raises
    ------
    ValueSyntaxError
        For an unknown series or type.
    ValueError
        When ``lo`` or ``hi`` is not a positive finite number or ``lo > hi``.
    """
    s = get_series(series)
    if type is None:
        t_lo = min(r[0] for r in CAPACITOR_RANGES.values())
        t_hi = max(r[1] for r in CAPACITOR_RANGES.values())
    else:
        t_lo, t_hi = CAPACITOR_RANGES[_capacitor_type(type)]
    for name, x in (("lo", lo), ("hi", hi)):
        try:
            ok = math.isfinite(float(x)) and float(x) > 0
        except (TypeError, ValueError):
            ok = False
        if not ok:
            raise ValueError(f"{name} must be a positive finite number (got {x!r})")
    lo, hi = float(lo), float(hi)
    if lo > hi:
        raise ValueError(f"lo must not exceed hi (got {lo!r} > {hi!r})")
    a, b = max(lo, t_lo), min(hi, t_hi)
    if a > b * (1 + REL_TOL):
        return []
    return s.values_between(a, max(a, b))


# ---------------------------------------------------------------------------------------
# Potentiometers

#: Default tolerance of a potentiometer's total resistance: ±20 % (domain-reference
#: §6.1; ±10 % is also common there).
POT_TOLERANCE = 0.20

#: Potentiometer values by style, ohms. Both lists are domain-reference §6.1, which has
#: them from memory. "e3": the E3 steps 1k, 2k2, 4k7 … 1M. "1-2-5": 1k, 2k, 5k … with 25k
#: and 250k, up to 2M (that list has no 2.5k and no 200k).
POT_VALUES: dict[str, tuple[float, ...]] = {
    "e3": (1e3, 2.2e3, 4.7e3, 10e3, 22e3, 47e3, 100e3, 220e3, 470e3, 1e6),
    "1-2-5": (1e3, 2e3, 5e3, 10e3, 20e3, 25e3, 50e3, 100e3, 250e3, 500e3, 1e6, 2e6),
}

#: The style names :func:`pot_values` accepts.
POT_STYLES: tuple[str, ...] = tuple(POT_VALUES)


def pot_values(style: str = "e3", lo: float = 1e3, hi: float = 2e6) -> list[float]:
    """Potentiometer values of one style in [lo, hi] (ends inclusive within REL_TOL).

    Parameters
    ----------
    style
        ``"e3"`` or ``"1-2-5"`` (see :data:`POT_VALUES`; case is ignored).
    lo, hi
        The range, ohms.

    Returns
    -------
    list of float
        The values, ascending; empty when none lies in the range.

    Raises
    ------
    ValueSyntaxError
        For an unknown style.
    ValueError
        When ``lo > hi``.
    """
    key = style.strip().lower() if isinstance(style, str) else None
    if key not in POT_VALUES:
        raise ValueSyntaxError(
            style,
            "potentiometer value style",
            "there is no such style",
            "use one of " + ", ".join(POT_STYLES),
        )
    if lo > hi:
        raise ValueError(f"lo must not exceed hi (got {lo!r} > {hi!r})")
    return [v for v in POT_VALUES[key] if lo * (1 - REL_TOL) <= v <= hi * (1 + REL_TOL)]


#: Tapers, stored by name. Letter codes (A, B, C) mean different things in different
#: regions (domain-reference §6.1), so they are never accepted.
TAPERS: tuple[str, ...] = ("linear", "log")

#: Fraction of the track at half rotation for the "log" taper: the common 10 % law
#: (domain-reference §6.1: "x % log taper" = x % at 50 % rotation; 10 % common).
LOG_TAPER_MIDPOINT = 0.10


def taper_fraction(taper: str, position: float) -> float:
    """Fraction of the track between the wiper and the bottom end.

    ``"linear"``: the fraction is the position. ``"log"``: two straight segments through
    (0, 0), (0.5, :data:`LOG_TAPER_MIDPOINT`) and (1, 1), the two-segment approximation
    most log pots are (domain-reference §6.1).

    Parameters
    ----------
    taper
        ``"linear"`` or ``"log"`` (case is ignored).
    position
        Rotation, 0 (fully anticlockwise) to 1 (fully clockwise).

    Returns
    -------
    float
        The fraction, 0 to 1.

    Raises
    ------
    ValueSyntaxError
        For an unknown taper (a letter code gets its own explanation).
    ValueError
        When ``position`` is outside [0, 1].
    """
    key = taper.strip().lower() if isinstance(taper, str) else None
    if key not in TAPERS:
        if isinstance(taper, str) and len(taper.strip()) == 1 and taper.strip().isalpha():
            reason = "taper letters mean linear in some regions and log in others"
        else:
            reason = "there is no such taper"
        raise ValueSyntaxError(taper, "potentiometer taper", reason, "write linear or log")
    p = float(position)
    if not 0 <= p <= 1:
        raise ValueError(f"position must be between 0 and 1 (got {position!r})")
    if key == "linear":
        return p
    m = LOG_TAPER_MIDPOINT
    if p <= 0.5:
        return 2 * m * p
    return m + (1 - m) * (2 * p - 1)
