"""Tests of optimizer.spec.quantities: reading and writing part values and spec quantities.

"§" numbers refer to the project's domain reference sheet
(/work/shared/reference/domain-reference.md).
"""

from __future__ import annotations

import math
from decimal import Decimal

import pytest
from hypothesis import given
from hypothesis import strategies as st

from optimizer.catalog.series import get_series, series_names
from optimizer.errors import InputError, ValueSyntaxError
from optimizer.spec.quantities import (
    DBU_REF,
    TOLERANCE_LETTERS,
    format_code,
    format_si,
    parse_quantity,
    parse_tolerance,
    parse_value,
)

# ---------------------------------------------------------------------------------------
# IEC 60062 letter-and-digit code


@pytest.mark.parametrize(
    ("code", "ohms"),
    [
        # IEC 60062 RKM examples, domain-reference §2.1 (WIKI-RKM)
        ("R47", 0.47),
        ("4R7", 4.7),
        ("470R", 470.0),
        ("4K7", 4700.0),
        ("47K", 47000.0),
        ("47K3", 47300.0),
        ("470K", 470000.0),
        ("4M7", 4.7e6),
        # further IEC 60062 examples, domain-reference §2.1 (probsee)
        ("R10", 0.1),
        ("R300", 0.3),
        ("1K0", 1000.0),
        ("2M2", 2.2e6),
        # lower-case k occurs in practice, domain-reference §2.1 (electrostudy)
        ("2k2", 2200.0),
    ],
)
def test_resistor_letter_code(code, ohms):
    pv = parse_value(code, "resistance")
    assert pv.value == ohms
    assert pv.tolerance is None


@pytest.mark.parametrize(
    ("code", "farads"),
    [
        # IEC 60062 capacitor examples, domain-reference §2.1 (probsee)
        ("10p", 10e-12),
        ("4n7", 4.7e-9),
        ("1µ0", 1e-6),
        # "µ (often written u)", domain-reference §2.1 (wikisum)
        ("1u0", 1e-6),
        # m = ×10⁻³ for capacitors, domain-reference §2.1 (wikisum)
        ("2m2", 2.2e-3),
    ],
)
def test_capacitor_letter_code(code, farads):
    assert parse_value(code, "capacitance").value == farads


@pytest.mark.parametrize(
    ("code", "ohms", "tolerance"),
    [
        # value followed by a tolerance letter, domain-reference §2.1
        ("2R2K", 2.2, 0.10),  # 2.2 Ω ±10 % (electronic7)
        ("4R7J", 4.7, 0.05),  # 4.7 Ω ±5 % (electronic7)
        ("1R8J", 1.8, 0.05),  # 1.8 Ω ±5 % (electrostudy)
        ("27KK", 27000.0, 0.10),  # 27 kΩ ±10 % (electrostudy)
    ],
)
def test_letter_code_with_tolerance_letter(code, ohms, tolerance):
    pv = parse_value(code, "resistance")
    assert pv.value == ohms
    assert pv.tolerance == tolerance


@pytest.mark.parametrize(
    ("letter", "tolerance"),
    [
        # IEC 60062 tolerance letters, domain-reference §2.2
        ("A", 0.0005),
        ("B", 0.001),
        ("C", 0.0025),
        ("D", 0.005),
        ("F", 0.01),
        ("G", 0.02),
        ("J", 0.05),
        ("K", 0.10),
        ("M", 0.20),
        ("N", 0.30),
    ],
)
def test_tolerance_letters(letter, tolerance):
    assert TOLERANCE_LETTERS[letter] == tolerance
    assert parse_tolerance(letter) == tolerance


def test_capacitor_trailing_f_is_the_farad_not_one_percent():
    # "F ×1" is the farad in the capacitor code, domain-reference §2.1 (wikisum)
    assert parse_value("4n7F", "capacitance").tolerance is None
    # J = ±5 % also after a capacitor value, domain-reference §2.2
    assert parse_value("4n7J", "capacitance").tolerance == 0.05


# ---------------------------------------------------------------------------------------
# SI notation. The prefixes k = 10³, M = 10⁶, n = 10⁻⁹, µ = 10⁻⁶ are SI (value from memory).


@pytest.mark.parametrize(
    ("text", "ohms"),
    [
        ("4.7k", 4700.0),
        ("4.7 kΩ", 4700.0),
        ("4700", 4700.0),  # a plain number is ohms (quantities.py docstring of parse_value)
        ("2.2 MOhm", 2.2e6),
        ("470 Ω", 470.0),
    ],
)
def test_resistance_si_notation(text, ohms):
    assert parse_value(text, "resistance").value == ohms


def test_plain_number_from_yaml_is_ohms():
    assert parse_value(4700, "resistance").value == 4700.0  # quantities.py docstring


@pytest.mark.parametrize(
    ("text", "farads"),
    [
        ("100nF", 100e-9),
        ("0.1 uF", 0.1e-6),
        ("4.7 nF", 4.7e-9),
        ("10 µF", 10e-6),
    ],
)
def test_capacitance_si_notation(text, farads):
    assert parse_value(text, "capacitance").value == farads


def test_letter_code_and_si_give_the_same_float_as_the_series():
    # 4.7 is in E12 (IEC 60063 via domain-reference §1.1); 4n7, 4.7 nF and the series
    # value must all be the one float nearest 4.7 × 10⁻⁹
    e12_nf = [v for v in get_series("E12").values_between(1e-9, 1e-8) if v == 4.7e-9]
    assert e12_nf == [4.7e-9]
    assert parse_value("4n7", "capacitance").value == e12_nf[0]
    assert parse_value("4.7 nF", "capacitance").value == e12_nf[0]


# ---------------------------------------------------------------------------------------
# Spec quantities


@pytest.mark.parametrize(
    ("text", "kind", "expected"),
    [
        ("9 V", "voltage", 9.0),  # 9 V battery, domain-reference §7
        ("20 Hz", "frequency", 20.0),  # SI unit, common practice, no source
        ("20 kHz", "frequency", 20e3),  # SI prefix k = 10³ (value from memory)
        ("3 mA", "current", 3e-3),  # SI prefix m = 10⁻³ (value from memory)
        ("6 dB", "decibel", 6.0),  # a plain decibel figure, common practice, no source
        ("1 %", "percent", 0.01),  # percent = 1/100, common practice, no source
        ("1/4 W", "power", 0.25),  # ¼ W written as a fraction, common practice, no source
        ("250 mW", "power", 0.25),  # SI prefix m = 10⁻³ (value from memory)
        ("30 s", "time", 30.0),  # SI unit, common practice, no source
    ],
)
def test_spec_quantities(text, kind, expected):
    assert parse_quantity(text, kind) == expected


def test_temperature_in_celsius_becomes_kelvin():
    # 0 °C = 273.15 K (SI definition, value from memory): 35 °C = 308.15 K
    assert parse_quantity("35 °C", "temperature") == pytest.approx(308.15, abs=1e-9)
    assert parse_quantity("300 K", "temperature") == 300.0  # kelvin kept as is (value from memory)


def test_dbu_reference():
    assert DBU_REF == pytest.approx(0.7746, abs=5e-5)  # 0 dBu = 0.7746 V rms, domain-reference §7


def test_minus_10_dbv_level():
    peak = parse_quantity("-10 dBV", "level")
    assert peak / math.sqrt(2) == pytest.approx(0.316, abs=5e-4)  # 0.316 V rms, domain-reference §7
    assert peak == pytest.approx(0.447, abs=5e-4)  # 0.447 V pk, domain-reference §7


def test_plus_4_dbu_level():
    peak = parse_quantity("+4 dBu", "level")
    assert peak / math.sqrt(2) == pytest.approx(1.228, abs=5e-4)  # 1.228 V rms, domain-reference §7
    assert peak == pytest.approx(1.736, abs=5e-4)  # 1.736 V pk, domain-reference §7


def test_level_marks():
    # rms × √2 = peak and pp / 2 = peak for a sine (value from memory)
    assert parse_quantity("1 V rms", "level") == pytest.approx(math.sqrt(2), rel=1e-12)
    assert parse_quantity("2 V pp", "level") == 1.0
    assert parse_quantity("0.5 V", "level") == 0.5  # plain volts are peak (quantities.py docstring)


def test_tolerance_as_percent():
    assert parse_tolerance("5 %") == 0.05  # percent = 1/100, common practice, no source
    with pytest.raises(ValueSyntaxError):
        parse_tolerance("150 %")


# ---------------------------------------------------------------------------------------
# Refusals. Each one is in the list of refused input in the quantities.py module docstring;
# the expected text is the reason that module gives.


@pytest.mark.parametrize(
    ("text", "kind", "reason"),
    [
        # M = mega for resistors, m = milli for capacitors, domain-reference §2.1
        ("2m2", "resistance", "a lower-case m on a resistance could mean milli or mega"),
        ("2.2m", "resistance", "a lower-case m on a resistance could mean milli or mega"),
        ("4.7k7", "resistance", "it has two decimal markers"),
        ("4,7k", "resistance", "a comma is not a decimal marker here"),
        # "E" as the ohm point, domain-reference §2.1 (value from memory there)
        ("4E7", "resistance", "'E' could be the ohm point of the letter code or an exponent"),
        # the same with a tolerance letter after it, as in 4R7J (domain-reference §2.1, electronic7)
        ("4E7J", "resistance", "'E' could be the ohm point of the letter code or an exponent"),
        ("4e7K", "resistance", "'E' could be the ohm point of the letter code or an exponent"),
        ("100", "capacitance", "a plain number could be pF, nF or µF"),
        ("4.7n7", "capacitance", "it has two decimal markers"),
        ("9", "voltage", "the unit is missing"),
        ("3", "current", "the unit is missing"),
        ("1", "percent", "the % sign is missing"),
        ("35", "temperature", "the unit is missing"),
    ],
)
def test_refusals_give_the_reason(text, kind, reason):
    with pytest.raises(ValueSyntaxError) as info:
        if kind in ("resistance", "capacitance"):
            parse_value(text, kind)
        else:
            parse_quantity(text, kind)
    assert reason in str(info.value)
    assert info.value.kind == kind
    assert isinstance(info.value, InputError)


def test_plain_number_capacitance_from_yaml_is_refused():
    with pytest.raises(ValueSyntaxError, match="could be pF, nF or µF"):
        parse_value(100, "capacitance")


def test_unknown_tolerance_letter_is_refused():
    # E is not an IEC 60062 tolerance letter (table in domain-reference §2.2)
    with pytest.raises(ValueSyntaxError, match="not a tolerance letter"):
        parse_value("4K7E", "resistance")


# ---------------------------------------------------------------------------------------
# Writing the code


@pytest.mark.parametrize(
    ("ohms", "code"),
    [
        # the RKM examples of domain-reference §2.1 (WIKI-RKM, probsee), written back
        (0.47, "R47"),
        (4.7, "4R7"),
        (470.0, "470R"),
        (4700.0, "4K7"),
        (47300.0, "47K3"),
        (4.7e6, "4M7"),
        (2.2e6, "2M2"),
        (0.1, "R1"),
    ],
)
def test_format_resistance_code(ohms, code):
    assert format_code(ohms, "resistance") == code


@pytest.mark.parametrize(
    ("farads", "code"),
    [
        (10e-12, "10p"),  # domain-reference §2.1 (probsee)
        (4.7e-9, "4n7"),  # domain-reference §2.1 (probsee)
        (1e-6, "1u"),  # 1µ0 in domain-reference §2.1, µ written u (wikisum)
        (2.2e-3, "2m2"),  # m = ×10⁻³, domain-reference §2.1 (wikisum)
    ],
)
def test_format_capacitance_code(farads, code):
    assert format_code(farads, "capacitance") == code


def test_format_si():
    assert format_si(4700, "Ω") == "4.7 kΩ"  # SI prefix k = 10³ (value from memory)
    assert format_si(100e-9, "F") == "100 nF"  # SI prefix n = 10⁻⁹ (value from memory)


# ---------------------------------------------------------------------------------------
# Round trips over every series value (IEC 60063 tables, via optimizer.catalog.series)


def _all_values(lo: float, hi: float) -> list[float]:
    return sorted({v for n in series_names() for v in get_series(n).values_between(lo, hi)})


RESISTANCES = _all_values(1.0, 10e6)  # 1 Ω … 10 MΩ
CAPACITANCES = _all_values(1e-12, 10e-3)  # 1 pF … 10 mF


def test_round_trip_every_series_value_exhaustively():
    for v in RESISTANCES:
        assert parse_value(format_code(v, "resistance"), "resistance").value == v, v
    for v in CAPACITANCES:
        assert parse_value(format_code(v, "capacitance"), "capacitance").value == v, v


@given(st.sampled_from(RESISTANCES))
def test_round_trip_resistance(v):
    assert parse_value(format_code(v, "resistance"), "resistance").value == v


@given(st.sampled_from(CAPACITANCES))
def test_round_trip_capacitance(v):
    assert parse_value(format_code(v, "capacitance"), "capacitance").value == v


@given(st.integers(min_value=1, max_value=9999), st.integers(min_value=-3, max_value=8))
def test_round_trip_any_four_figure_resistance(mantissa, exponent):
    # format_code keeps four significant figures (its docstring), so any value of four
    # figures or fewer must come back unchanged
    v = float(Decimal(mantissa).scaleb(exponent))
    assert parse_value(format_code(v, "resistance"), "resistance").value == v


@given(st.integers(min_value=1, max_value=9999), st.integers(min_value=-16, max_value=-3))
def test_round_trip_any_four_figure_capacitance(mantissa, exponent):
    v = float(Decimal(mantissa).scaleb(exponent))
    assert parse_value(format_code(v, "capacitance"), "capacitance").value == v
