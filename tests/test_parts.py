"""Tests of optimizer.catalog.parts: capacitor types and ratings, resistor power ratings,
potentiometer values and tapers.

"§" numbers refer to the project's domain reference sheet
(/work/shared/reference/domain-reference.md).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from optimizer.catalog.parts import (
    CAPACITOR_TYPES,
    CAPACITOR_VOLTAGE_RATINGS,
    LOG_TAPER_MIDPOINT,
    POT_TOLERANCE,
    POT_VALUES,
    RESISTOR_POWER_RATINGS,
    TAPERS,
    capacitor_values,
    default_capacitor_type,
    polarised,
    pot_values,
    power_rating_for,
    taper_fraction,
    voltage_rating_for,
)
from optimizer.errors import InputError, ValueSyntaxError
from optimizer.spec.quantities import parse_value

# ---------------------------------------------------------------------------------------
# Ratings


def test_capacitor_voltage_ratings():
    # domain-reference §6.2 list (35 V from memory there; the 80 V of that list is not offered)
    assert CAPACITOR_VOLTAGE_RATINGS == (6.3, 10, 16, 25, 35, 50, 63, 100)


def test_resistor_power_ratings():
    assert RESISTOR_POWER_RATINGS == (0.125, 0.25, 0.5, 1.0, 2.0)  # common practice, no source


@pytest.mark.parametrize(
    ("needed", "rating"),
    [
        # next rating up in the domain-reference §6.2 list
        (0.0, 6.3),
        (5.0, 6.3),
        (6.3, 6.3),
        (9.0, 10.0),
        (10.0, 10.0),
        (10.01, 16.0),
        (50.0, 50.0),
        (63.5, 100.0),
        (100.0, 100.0),
    ],
)
def test_voltage_rating_for(needed, rating):
    assert voltage_rating_for(needed) == rating


def test_voltage_rating_with_derating_on_a_12_v_rail():
    # ≤ 80 % of rated voltage "i.e. ≥ 16 V parts on a 9–12 V rail", domain-reference §6.2
    assert voltage_rating_for(12 / 0.8) == 16.0
    # fresh 9 V battery up to ≈ 9.6 V (domain-reference §7), at 80 %: 12 V → 16 V part
    assert voltage_rating_for(9.6 / 0.8) == 16.0


def test_voltage_rating_above_100_v_is_an_input_error():
    # 100 V is the top of the §6.2 list as offered
    with pytest.raises(InputError, match="100 V"):
        voltage_rating_for(100.5)


@pytest.mark.parametrize(
    ("needed", "rating"),
    [
        # next rating up in the common-practice table (no source)
        (0.0, 0.125),
        (0.1, 0.125),
        (0.125, 0.125),
        (0.2, 0.25),
        (0.3, 0.5),
        (0.75, 1.0),
        (1.5, 2.0),
        (2.0, 2.0),
    ],
)
def test_power_rating_for(needed, rating):
    assert power_rating_for(needed) == rating


def test_power_rating_above_2_w_is_an_input_error():
    with pytest.raises(InputError, match="2 W"):  # 2 W tops the common-practice table
        power_rating_for(2.1)


@pytest.mark.parametrize("bad", [-1.0, math.nan])
def test_ratings_reject_nonsense(bad):
    with pytest.raises(ValueError):
        voltage_rating_for(bad)
    with pytest.raises(ValueError):
        power_rating_for(bad)


# ---------------------------------------------------------------------------------------
# Capacitor types


def test_capacitor_types():
    # ceramic, film, aluminium electrolytic and bipolar electrolytic, domain-reference §6.2
    assert set(CAPACITOR_TYPES) == {"ceramic", "film", "electrolytic", "bipolar"}


@pytest.mark.parametrize(
    ("code", "expected"),
    [
        # boundaries 1 nF and 1 µF: common practice, no source
        ("10p", "ceramic"),
        ("999p", "ceramic"),
        ("1n0", "film"),
        ("100n", "film"),
        ("999n", "film"),
        ("1u0", "electrolytic"),
        ("10u", "electrolytic"),
        ("4m7", "electrolytic"),
    ],
)
def test_default_capacitor_type(code, expected):
    # values as the parser gives them, so the boundary floats are the parser's floats
    assert default_capacitor_type(parse_value(code, "capacitance").value) == expected


def test_default_capacitor_type_boundary_slack():
    # a computed value a hair below 1 nF / 1 µF counts as the boundary (1e-9 relative slack)
    assert default_capacitor_type(1e-9 * (1 - 1e-12)) == "film"
    assert default_capacitor_type(1e-6 * (1 - 1e-12)) == "electrolytic"
    assert default_capacitor_type(1e-9 * (1 - 1e-6)) == "ceramic"


@pytest.mark.parametrize(
    ("kind", "expected"),
    [
        ("electrolytic", True),  # anode must stay positive, domain-reference §6.2
        ("Electrolytic", True),  # same, case ignored
        ("bipolar", False),  # non-polarised electrolytic, domain-reference §6.2
        ("film", False),  # "use a film or bipolar electrolytic" when polarity is unknown, §6.2
        ("ceramic", False),  # common practice, no source
    ],
)
def test_polarised(kind, expected):
    assert polarised(kind) is expected


def test_unknown_capacitor_type():
    with pytest.raises(ValueSyntaxError) as info:
        polarised("paper")
    assert "ceramic, film, electrolytic, bipolar" in str(info.value)


# ---------------------------------------------------------------------------------------
# Capacitor values


def test_electrolytic_values_are_clamped_to_100n_10m():
    # E6 (IEC 60063 via domain-reference §1.1) inside 100 nF … 10 mF (common practice, no
    # source): five decades of 6 values plus 10 mF
    vals = capacitor_values("E6", 1e-9, 1.0, "electrolytic")
    assert vals[0] == 100e-9 and vals[-1] == 10e-3
    assert len(vals) == 5 * 6 + 1
    assert 47e-6 in vals  # 4.7 is in E6 (§1.1)


def test_ceramic_values_stop_at_100n():
    # ceramic 1 pF … 100 nF (common practice, no source); E12 from §1.1
    vals = capacitor_values("e12", 1e-13, 1e-6, "ceramic")
    assert vals[0] == 1e-12 and vals[-1] == 100e-9
    assert 4.7e-9 in vals and 820e-12 in vals  # 4.7 and 8.2 are in E12 (§1.1)


def test_film_values_stop_at_10u():
    # film 1 nF … 10 µF (common practice, no source); E6 from §1.1
    assert capacitor_values("E6", 1e-6, 1e-3, "film") == [1e-6, 1.5e-6, 2.2e-6, 3.3e-6, 4.7e-6, 6.8e-6, 10e-6]


def test_capacitor_values_outside_the_type_range_are_none():
    # 1 µF … 10 µF lies above the 100 nF top of ceramics (common practice, no source)
    assert capacitor_values("E6", 1e-6, 10e-6, "ceramic") == []


def test_capacitor_values_without_type_cover_1p_to_10m():
    # union of the type ranges, 1 pF … 10 mF (common practice, no source); E3 from §1.1
    vals = capacitor_values("E3", 1e-15, 1.0, None)
    assert vals[0] == 1e-12 and vals[-1] == 10e-3
    assert len(vals) == 10 * 3 + 1  # ten decades of E3 plus 10 mF


def test_capacitor_values_errors():
    with pytest.raises(ValueSyntaxError):
        capacitor_values("E7", 1e-9, 1e-6, "film")  # no such series (§1)
    with pytest.raises(ValueSyntaxError):
        capacitor_values("E6", 1e-9, 1e-6, "tantalum")  # not one of the four types
    with pytest.raises(ValueError):
        capacitor_values("E6", 1e-6, 1e-9, "film")


# ---------------------------------------------------------------------------------------
# Potentiometers


def test_pot_tolerance():
    assert POT_TOLERANCE == 0.20  # ±20 %, domain-reference §6.1


def test_pot_values_e3_style():
    # "European E3-style" list, domain-reference §6.1 (from memory there)
    expected = [1e3, 2.2e3, 4.7e3, 10e3, 22e3, 47e3, 100e3, 220e3, 470e3, 1e6]
    assert pot_values() == expected
    assert pot_values("E3") == expected
    assert list(POT_VALUES["e3"]) == expected


def test_pot_values_1_2_5_style():
    # "US-style" list, domain-reference §6.1 (from memory there)
    expected = [1e3, 2e3, 5e3, 10e3, 20e3, 25e3, 50e3, 100e3, 250e3, 500e3, 1e6, 2e6]
    assert pot_values("1-2-5") == expected


def test_pot_values_range():
    # 250 k and 500 k, the guitar volume/tone values of domain-reference §6.1
    assert pot_values("1-2-5", 200e3, 600e3) == [250e3, 500e3]
    assert pot_values("e3", 10e3, 100e3) == [10e3, 22e3, 47e3, 100e3]  # §6.1 list, ends inclusive
    assert pot_values("e3", 5e6, 1e7) == []


def test_unknown_pot_style():
    with pytest.raises(ValueSyntaxError) as info:
        pot_values("e6")
    assert "e3, 1-2-5" in str(info.value)


def test_tapers_are_stored_by_name():
    assert TAPERS == ("linear", "log")  # domain-reference §6.1: store taper explicitly


@pytest.mark.parametrize("position", [0.0, 0.1, 0.25, 0.5, 0.8, 1.0])
def test_linear_taper(position):
    assert taper_fraction("linear", position) == position  # linear: fraction = rotation


@pytest.mark.parametrize(
    ("position", "fraction"),
    [
        (0.0, 0.0),  # track end
        (0.25, 0.05),  # ≈5 % at ¼ turn, domain-reference §6.1
        (0.5, 0.10),  # "10 % log taper": 10 % at half rotation, domain-reference §6.1
        (0.75, 0.55),  # derived: 0.10 + 0.90 × 0.5 on the upper segment of the two-segment law
        (1.0, 1.0),  # track end
    ],
)
def test_log_taper(position, fraction):
    assert taper_fraction("log", position) == pytest.approx(fraction, abs=1e-12)


def test_log_taper_midpoint():
    assert LOG_TAPER_MIDPOINT == 0.10  # 10 % common, domain-reference §6.1


@given(st.floats(min_value=0, max_value=1), st.floats(min_value=0, max_value=1))
def test_log_taper_is_monotonic_and_below_linear(a, b):
    lo, hi = min(a, b), max(a, b)
    assert taper_fraction("log", lo) <= taper_fraction("log", hi)
    # a 10 % law lies on or below the straight line (0.10 < 0.5 at half rotation, §6.1)
    assert taper_fraction("log", lo) <= lo + 1e-15


@pytest.mark.parametrize("letter", ["A", "B", "C"])
def test_taper_letters_are_refused(letter):
    # the letters mean log in some regions and linear in others, domain-reference §6.1
    with pytest.raises(ValueSyntaxError, match="linear in some regions and log in others"):
        taper_fraction(letter, 0.5)


def test_taper_errors():
    with pytest.raises(ValueSyntaxError):
        taper_fraction("reverse", 0.5)
    with pytest.raises(ValueError):
        taper_fraction("linear", 1.5)
