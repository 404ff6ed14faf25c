"""Tests of optimizer.catalog.series: the IEC 60063 tables and the look-ups on them.

"§" numbers refer to the project's domain reference sheet
(/work/shared/reference/domain-reference.md).
"""

from __future__ import annotations

import math
from decimal import Decimal

import pytest
from eseries import ESeries
from eseries import series as eseries_series
from hypothesis import assume, example, given
from hypothesis import strategies as st

from optimizer.catalog.series import REL_TOL, SERIES, Series, get_series, series_names
from optimizer.errors import InputError, ValueSyntaxError

# ---------------------------------------------------------------------------------------
# The tables, copied from the reference sheet (not from the module under test).

# IEC 60063 via domain-reference §1.1 (two significant figures).
IEC_E3 = (10, 22, 47)
IEC_E6 = (10, 15, 22, 33, 47, 68)
IEC_E12 = (10, 12, 15, 18, 22, 27, 33, 39, 47, 56, 68, 82)
IEC_E24 = (
    10, 11, 12, 13, 15, 16, 18, 20, 22, 24, 27, 30,
    33, 36, 39, 43, 47, 51, 56, 62, 68, 75, 82, 91,
)  # fmt: skip
# IEC 60063 via domain-reference §1.2 (three significant figures).
IEC_E48 = (
    100, 105, 110, 115, 121, 127, 133, 140, 147, 154, 162, 169, 178, 187, 196, 205,
    215, 226, 237, 249, 261, 274, 287, 301, 316, 332, 348, 365, 383, 402, 422, 442,
    464, 487, 511, 536, 562, 590, 619, 649, 681, 715, 750, 787, 825, 866, 909, 953,
)  # fmt: skip
IEC_E96 = (
    100, 102, 105, 107, 110, 113, 115, 118, 121, 124, 127, 130, 133, 137, 140, 143,
    147, 150, 154, 158, 162, 165, 169, 174, 178, 182, 187, 191, 196, 200, 205, 210,
    215, 221, 226, 232, 237, 243, 249, 255, 261, 267, 274, 280, 287, 294, 301, 309,
    316, 324, 332, 340, 348, 357, 365, 374, 383, 392, 402, 412, 422, 432, 442, 453,
    464, 475, 487, 499, 511, 523, 536, 549, 562, 576, 590, 604, 619, 634, 649, 665,
    681, 698, 715, 732, 750, 768, 787, 806, 825, 845, 866, 887, 909, 931, 953, 976,
)  # fmt: skip
IEC_E192 = (
    100, 101, 102, 104, 105, 106, 107, 109, 110, 111, 113, 114, 115, 117, 118, 120,
    121, 123, 124, 126, 127, 129, 130, 132, 133, 135, 137, 138, 140, 142, 143, 145,
    147, 149, 150, 152, 154, 156, 158, 160, 162, 164, 165, 167, 169, 172, 174, 176,
    178, 180, 182, 184, 187, 189, 191, 193, 196, 198, 200, 203, 205, 208, 210, 213,
    215, 218, 221, 223, 226, 229, 232, 234, 237, 240, 243, 246, 249, 252, 255, 258,
    261, 264, 267, 271, 274, 277, 280, 284, 287, 291, 294, 298, 301, 305, 309, 312,
    316, 320, 324, 328, 332, 336, 340, 344, 348, 352, 357, 361, 365, 370, 374, 379,
    383, 388, 392, 397, 402, 407, 412, 417, 422, 427, 432, 437, 442, 448, 453, 459,
    464, 470, 475, 481, 487, 493, 499, 505, 511, 517, 523, 530, 536, 542, 549, 556,
    562, 569, 576, 583, 590, 597, 604, 612, 619, 626, 634, 642, 649, 657, 665, 673,
    681, 690, 698, 706, 715, 723, 732, 741, 750, 759, 768, 777, 787, 796, 806, 816,
    825, 835, 845, 856, 866, 876, 887, 898, 909, 920, 931, 942, 953, 965, 976, 988,
)  # fmt: skip

IEC_TABLES = {
    "E3": IEC_E3,
    "E6": IEC_E6,
    "E12": IEC_E12,
    "E24": IEC_E24,
    "E48": IEC_E48,
    "E96": IEC_E96,
    "E192": IEC_E192,
}

# Series names in IEC 60063 via domain-reference §1.1/§1.2.
NAMES = ("E3", "E6", "E12", "E24", "E48", "E96", "E192")


# ---------------------------------------------------------------------------------------
# The tables themselves


def test_series_names_are_the_seven_iec_series():
    assert series_names() == NAMES  # IEC 60063 via domain-reference §1.1/§1.2


@pytest.mark.parametrize("name", NAMES)
def test_table_equals_iec_60063(name):
    s = get_series(name)
    assert s.mantissas == IEC_TABLES[name]  # IEC 60063 via domain-reference §1.1/§1.2
    # values per decade = the N of EN (IEC 60063 via domain-reference §1.1/§1.2)
    assert s.per_decade == int(name[1:])
    # two significant figures up to E24, three from E48 (domain-reference §1.1/§1.2)
    assert s.digits == (2 if int(name[1:]) <= 24 else 3)


@pytest.mark.parametrize("name", NAMES)
def test_table_equals_independent_eseries_library(name):
    # the eseries package, an independent implementation of IEC 60063
    assert get_series(name).mantissas == tuple(eseries_series(getattr(ESeries, name)))


@pytest.mark.parametrize(
    ("name", "tolerance"),
    [
        ("E3", 0.40),  # domain-reference §1.1: sources say ">20 %", 40 % or 50 %; 40 % chosen
        ("E6", 0.20),  # ±20 %, domain-reference §1.1
        ("E12", 0.10),  # ±10 %, domain-reference §1.1
        ("E24", 0.05),  # ±5 %, domain-reference §1.1
        ("E48", 0.02),  # ±2 %, domain-reference §1.2
        ("E96", 0.01),  # ±1 %, domain-reference §1.2
        ("E192", 0.005),  # ±0.5 %, domain-reference §1.2
    ],
)
def test_tolerance_of_each_series(name, tolerance):
    assert get_series(name).tolerance == tolerance


def _formula_2digit(n: int) -> tuple[int, ...]:
    # round(10**(i/n), 1) written as an integer mantissa, the formula of domain-reference §1.1
    return tuple(round(10 * 10 ** (i / n)) for i in range(n))


@pytest.mark.parametrize(
    ("name", "deviations"),
    [
        # domain-reference §1.1 "Deviations from the rounded geometric formula":
        # {standard value: formula value}, as mantissas
        ("E3", {47: 46}),
        ("E6", {33: 32, 47: 46}),
        ("E12", {27: 26, 33: 32, 39: 38, 47: 46, 82: 83}),
        ("E24", {27: 26, 30: 29, 33: 32, 36: 35, 39: 38, 43: 42, 47: 46, 82: 83}),
    ],
)
def test_two_digit_series_deviate_from_the_formula_exactly_where_listed(name, deviations):
    s = get_series(name)
    formula = _formula_2digit(s.per_decade)
    found = {std: f for std, f in zip(s.mantissas, formula) if std != f}
    assert found == deviations


def test_e24_has_eight_values_off_the_formula():
    # "Eight of the E24 values do not match the following formula", domain-reference §1.1
    s = get_series("E24")
    assert sum(std != f for std, f in zip(s.mantissas, _formula_2digit(24))) == 8


@pytest.mark.parametrize("name", ["E48", "E96", "E192"])
def test_three_digit_series_follow_the_formula_but_for_e192_index_185(name):
    s = get_series(name)
    n = s.per_decade
    formula = tuple(round(100 * 10 ** (i / n)) for i in range(n))  # round(10**(i/n), 2), §1.2
    off = [i for i in range(n) if s.mantissas[i] != formula[i]]
    # domain-reference §1.2: the formula holds for every E48 and E96 value and for all
    # E192 values except index 185
    assert off == ([185] if name == "E192" else [])


def test_e192_index_185_is_920_and_the_formula_gives_919():
    e192 = get_series("E192")
    assert e192.mantissas[185] == 920  # domain-reference §1.2 and §8 e192_exception
    assert round(100 * 10 ** (185 / 192)) == 919  # formula value 9.19, domain-reference §1.2


@pytest.mark.parametrize(
    ("coarse", "fine"),
    # every other value, domain-reference §1 (WIKI-E) and §1.2 "E48 = every 2nd E96, E96 = every 2nd E192"
    [("E6", "E12"), ("E12", "E24"), ("E48", "E96"), ("E96", "E192")],
)
def test_coarser_series_is_every_other_value_of_the_finer(coarse, fine):
    assert get_series(coarse).mantissas == get_series(fine).mantissas[::2]


def _as_fraction_of_ten(s: Series) -> set[Decimal]:
    return {Decimal(m).scaleb(1 - s.digits) for m in s.mantissas}


def test_e24_intersections():
    e24 = _as_fraction_of_ten(get_series("E24"))
    e48 = _as_fraction_of_ten(get_series("E48"))
    e96 = _as_fraction_of_ten(get_series("E96"))
    e192 = _as_fraction_of_ten(get_series("E192"))
    # series relations, domain-reference §1.2
    assert e24 & e96 == {Decimal(x) for x in ("1.0", "1.1", "1.3", "1.5", "2.0", "7.5")}
    assert e24 & e48 == {Decimal(x) for x in ("1.0", "1.1", "7.5")}
    absent = "2.2 2.7 3.0 3.3 3.6 3.9 4.3 5.1 5.6 6.2 6.8 8.2 9.1".split()
    assert e24 - e192 == {Decimal(x) for x in absent}


@pytest.mark.parametrize(
    ("name", "largest", "smallest"),
    # largest and smallest step between neighbours, domain-reference §1.2 table (to the
    # digits given there)
    [("E3", 2.200, 2.128), ("E6", 1.500, 1.424), ("E12", 1.250, 1.182), ("E24", 1.154, 1.067)],
)
def test_step_ratios(name, largest, smallest):
    s = get_series(name)
    vals = list(s.mantissas) + [10 * s.mantissas[0]]
    steps = [b / a for a, b in zip(vals, vals[1:])]
    assert max(steps) == pytest.approx(largest, abs=5e-4)
    assert min(steps) == pytest.approx(smallest, abs=5e-4)


# ---------------------------------------------------------------------------------------
# Names


def test_get_series_ignores_case_and_blanks():
    assert get_series("e24") is get_series("E24")
    assert get_series(" e192 ") is get_series("E192")


@pytest.mark.parametrize("bad", ["E7", "E", "", "24", "E24x"])
def test_unknown_series_message_lists_the_allowed_names(bad):
    with pytest.raises(ValueSyntaxError) as info:
        get_series(bad)
    msg = str(info.value)
    assert "there is no such series" in msg
    # the seven names, IEC 60063 via domain-reference §1.1/§1.2
    assert "E3, E6, E12, E24, E48, E96, E192" in msg
    assert isinstance(info.value, InputError)  # a user error (errors.py: exit 2)


def test_series_checks_its_table():
    with pytest.raises(ValueError):
        Series("bad", (10, 12, 11), 2, 0.1)  # not ascending
    with pytest.raises(ValueError):
        Series("bad", (10, 100), 2, 0.1)  # 100 has three digits
    with pytest.raises(ValueError):
        Series("bad", (10, 20), 2, 1.5)  # tolerance is a fraction


# ---------------------------------------------------------------------------------------
# Values and look-ups


def test_values_between_counts_over_five_decades():
    # 10 Ω … 1 MΩ is five whole decades of 24 values plus 1 MΩ itself: 24·5 + 1
    # (E24 table, domain-reference §1.1)
    vals = get_series("E24").values_between(10, 1e6)
    assert len(vals) == 121
    assert vals[0] == 10.0 and vals[-1] == 1e6
    assert vals == sorted(vals)


def test_values_between_capacitor_range_is_exact():
    # 1 pF … 10 mF is ten decades of 12 values plus 10 mF: 12·10 + 1 (E12 table, §1.1)
    vals = get_series("E12").values_between(1e-12, 1e-2)
    assert len(vals) == 121
    # 4.7 nF must be exactly the float of the decimal 4.7e-9 (E12 has 4.7, §1.1)
    assert 4.7e-9 in vals
    assert 4700.0 in get_series("E12").values_between(1, 1e7)


@pytest.mark.parametrize("name", NAMES)
def test_every_value_is_the_nearest_float_to_its_decimal(name):
    s = get_series(name)
    for k in range(-13, 8):
        shift = k - s.digits + 1
        # Python's float() of a decimal string is correctly rounded, so this is the
        # nearest float to mantissa × 10**shift (IEC table mantissas, §1.1/§1.2)
        expected = tuple(float(f"{m}e{shift}") for m in IEC_TABLES[name])
        assert s.decade(k) == expected


def test_values_between_inclusive_ends_with_relative_slack():
    e12 = get_series("E12")
    # E12 has 4.7 and 5.6 (§1.1); ends a hair off still count
    assert e12.values_between(4700 * (1 + 1e-10), 5600 * (1 - 1e-10)) == [4700.0, 5600.0]
    # but not when off by more than the 1e-9 slack
    assert e12.values_between(4700 * (1 + 1e-8), 5600 * (1 - 1e-8)) == []


def test_values_between_rejects_bad_ranges():
    e12 = get_series("E12")
    with pytest.raises(ValueError):
        e12.values_between(10, 1)
    with pytest.raises(ValueError):
        e12.values_between(0, 1)
    with pytest.raises(ValueError):
        e12.values_between(1, math.inf)


@pytest.mark.parametrize(
    ("target", "name", "expected"),
    [
        # nearest-value checks, domain-reference §1.2 ("nearest by ratio" column)
        (5000, "E12", 4700.0),
        (5000, "E24", 5100.0),
        (5140, "E12", 5600.0),
        (2500, "E24", 2400.0),
        (2500, "E12", 2700.0),
        (319, "E24", 330.0),
        (16834.2, "E96", 16900.0),
        (9195, "E192", 9200.0),
    ],
)
def test_nearest_by_ratio_table(target, name, expected):
    assert get_series(name).nearest(target) == expected


def test_5140_in_e12_ratio_and_difference_rules_disagree():
    e12 = get_series("E12")
    below, above = e12.neighbours(5140)
    by_difference = min((below, above), key=lambda v: abs(v - 5140))
    assert by_difference == 4700.0  # domain-reference §1.2, "nearest by difference" column
    assert e12.nearest(5140) == 5600.0  # domain-reference §1.2, "nearest by ratio" column


def test_nearest_tie_goes_to_the_larger_value():
    # A made-up series 1, 4, 10, …: 2 is the geometric mean of 1 and 4 (√(1·4) = 2,
    # arithmetic), so the tie rule decides.
    s = Series("test", (10, 40), 2, 0.5)
    assert s.nearest(2.0) == 4.0
    assert s.nearest(math.nextafter(2.0, 0)) == 1.0


def test_neighbours_at_most_at_least():
    e12 = get_series("E12")
    # E12 …3.9, 4.7, 5.6… and …8.2, 10, 12… (IEC 60063 via domain-reference §1.1)
    assert e12.neighbours(4700) == (3900.0, 5600.0)
    assert e12.neighbours(5000) == (4700.0, 5600.0)
    assert e12.neighbours(1000) == (820.0, 1200.0)
    assert e12.at_most(5000) == 4700.0
    assert e12.at_least(5000) == 5600.0
    assert e12.at_most(4700) == 4700.0
    assert e12.at_least(4700) == 4700.0
    # within the 1e-9 relative slack, 4700.0000001 is 4700
    assert e12.at_most(4700.0000001) == 4700.0
    assert e12.at_least(4700.0000001) == 4700.0
    assert e12.neighbours(4700.0000001) == (3900.0, 5600.0)
    assert e12.contains(4700.0000001)
    assert not e12.contains(4701)
    # E24 …9.1, 10 (§1.1): crossing a decade
    e24 = get_series("E24")
    assert e24.at_most(9.9e3) == 9100.0
    assert e24.at_least(9.2e3) == 10000.0
    assert e24.nearest(9.6e3) == 10000.0  # √(9.1·10) = 9.539 < 9.6 (arithmetic)


@pytest.mark.parametrize("bad", [0, -1, math.nan, math.inf])
def test_lookups_reject_non_positive(bad):
    with pytest.raises(ValueError):
        get_series("E12").nearest(bad)


# ---------------------------------------------------------------------------------------
# Properties over the whole range the tool uses (1e-13 … 1e9: capacitors to resistors)

def _close(v: float, x: float) -> bool:
    # "equal" with the 1e-9 relative slack the look-ups promise
    return abs(v - x) <= REL_TOL * x


xs = st.one_of(
    st.floats(min_value=-13, max_value=9).map(lambda e: 10.0**e),
    st.floats(min_value=1e-13, max_value=1e9),
)
series_objs = st.sampled_from(list(SERIES.values()))


@given(series_objs, xs)
def test_at_most_and_at_least_bracket_x(s, x):
    lo, hi = s.at_most(x), s.at_least(x)
    assert lo <= x or _close(lo, x)
    assert hi >= x or _close(hi, x)
    assert s.contains(lo) and s.contains(hi)
    # nothing of the series lies strictly between them
    assert len(s.values_between(lo, hi)) == (1 if lo == hi else 2)


@given(series_objs, xs)
def test_nearest_is_one_of_the_bracket_and_the_closer_by_ratio(s, x):
    lo, hi = s.at_most(x), s.at_least(x)
    v = s.nearest(x)
    assert v in (lo, hi)
    other = hi if v == lo else lo
    assert abs(math.log(v / x)) <= abs(math.log(other / x)) + 1e-12


@example(get_series("E3"), 999999999.0)  # 1e9 is just outside the slack: found by Hypothesis
@given(series_objs, xs)
def test_neighbours_are_strictly_outside(s, x):
    below, above = s.neighbours(x)
    assert below < x and not _close(below, x)
    assert above > x and not _close(above, x)
    # the only series value strictly between them is x itself, when x is one
    inner = [v for v in s.values_between(below, above) if v not in (below, above)]
    assert inner == ([s.at_most(x)] if s.contains(x) else [])


@given(series_objs, xs)
def test_any_decade_holds_exactly_n_values(s, x):
    # x and 10x sit equally far from their series values, except for float rounding of
    # 10x when that distance is right at the 1e-9 slack; such x are left out
    gap = min(abs(v - x) / x for v in (s.at_most(x), s.at_least(x)))
    assume(not 0.5e-9 < gap < 2e-9)
    # [x, 10x] holds N values, plus one when x itself is a value (both ends inclusive)
    n = len(s.values_between(x, 10 * x))
    assert n == s.per_decade + (1 if s.contains(x) else 0)


@given(series_objs, st.integers(min_value=-13, max_value=8))
def test_power_of_ten_decade_holds_n_plus_one(s, k):
    d = float(Decimal(1).scaleb(k))
    vals = s.values_between(d, 10 * d)
    assert len(vals) == s.per_decade + 1  # both ends are series values (every table starts at 1.0)
    assert vals[0] == d
