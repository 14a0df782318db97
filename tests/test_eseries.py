"""IEC 60063 preferred values and snapping.

Sources
-------
[IEC] IEC 60063:2015, *Preferred number series for resistors and capacitors*,
tables of E6, E12, E24 (two significant figures) and E48, E96, E192 (three).
The published facts used here are the ones recorded as verified ([V]) in
../shared/REFERENCES.md, section "E-series": the E6/E12/E24 tables; E96 =
round(10^(k/96), 2); E48 = every second E96 value; E192 = round(10^(k/192), 2)
except k = 185, published as 9.20; E24 departs from round(10^(k/24), 1) at
exactly 2.7 3.0 3.3 3.6 3.9 4.3 4.7 8.2; E24 and E96 share only 1.0 1.1 1.3 1.5
2.0 7.5; usual tolerances E6 20 %, E12 10 %, E24 5 %, E48 2 %, E96 1 %, E192 0.5 %.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from loopkit.errors import DesignError
from loopkit.eseries import (
    SERIES,
    SERIES_NAMES,
    TOLERANCE,
    is_capacitor,
    is_resistor,
    neighbours,
    part_warnings,
    snap,
    snap_parts,
    values,
)

# [IEC] tables as published (REFERENCES.md "E-series", [V]).
IEC_E6 = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)
IEC_E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
IEC_E24 = (
    1.0,
    1.1,
    1.2,
    1.3,
    1.5,
    1.6,
    1.8,
    2.0,
    2.2,
    2.4,
    2.7,
    3.0,
    3.3,
    3.6,
    3.9,
    4.3,
    4.7,
    5.1,
    5.6,
    6.2,
    6.8,
    7.5,
    8.2,
    9.1,
)
DECIMALS = {"E6": 1, "E12": 1, "E24": 1, "E48": 2, "E96": 2, "E192": 2}


def literal(mantissa: float, decade: int, series: str) -> float:
    """The value as a decimal literal, e.g. 4.7 and -6 -> float("4.7e-6")."""
    return float(f"{mantissa:.{DECIMALS[series]}f}e{decade}")


def candidates(series: str, x: float) -> list[float]:
    """Preferred values of the decades around x, built from the decimal text."""
    d = math.floor(math.log10(x))
    return [literal(m, k, series) for k in range(d - 2, d + 3) for m in SERIES[series]]


# ------------------------------------------------------------------ the tables
def test_two_figure_tables_are_the_published_ones():
    # [IEC] E6, E12, E24 tables.
    assert SERIES["E6"] == IEC_E6
    assert SERIES["E12"] == IEC_E12
    assert SERIES["E24"] == IEC_E24


def test_e96_is_the_rounded_geometric_series():
    # [IEC]: E96 = round(10^(k/96), 2), k = 0..95.
    assert SERIES["E96"] == tuple(round(10 ** (k / 96), 2) for k in range(96))


def test_e48_is_every_second_e96_value():
    # [IEC]: E48 = every second E96 value.
    assert len(SERIES["E48"]) == 48
    assert SERIES["E48"] == SERIES["E96"][::2]


def test_e192_is_the_rounded_geometric_series_except_920():
    # [IEC]: E192 = round(10^(k/192), 2) except k = 185, published as 9.20.
    formula = [round(10 ** (k / 192), 2) for k in range(192)]
    differing = [k for k in range(192) if SERIES["E192"][k] != formula[k]]
    assert differing == [185]
    assert formula[185] == 9.19
    assert SERIES["E192"][185] == 9.20


def test_e24_departs_from_the_formula_exactly_where_published():
    # [IEC]: E24 is not round(10^(k/24), 1) at 2.7 3.0 3.3 3.6 3.9 4.3 4.7 8.2.
    formula = [round(10 ** (k / 24), 1) for k in range(24)]
    differing = [SERIES["E24"][k] for k in range(24) if SERIES["E24"][k] != formula[k]]
    assert differing == [2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2]


def test_e24_and_e96_share_only_the_published_values():
    # [IEC]: E24 and E96 share only 1.0 1.1 1.3 1.5 2.0 7.5.
    assert sorted(set(SERIES["E24"]) & set(SERIES["E96"])) == [1.0, 1.1, 1.3, 1.5, 2.0, 7.5]


def test_coarser_two_figure_series_are_subsets():
    # Read off the [IEC] tables above: E12 is every second E24 value, E6 every fourth.
    assert SERIES["E12"] == IEC_E24[::2]
    assert SERIES["E6"] == IEC_E24[::4]


@pytest.mark.parametrize("name, n", [("E6", 6), ("E12", 12), ("E24", 24), ("E48", 48), ("E96", 96), ("E192", 192)])
def test_one_decade_ascending(name, n):
    m = SERIES[name]
    assert len(m) == n
    assert m[0] == 1.0 and m[-1] < 10.0
    assert np.all(np.diff(m) > 0)
    # each value stays within 5 % of the geometric series 10^(k/n) (E6's 3.3 is 4.4 % off)
    k = np.arange(n)
    assert np.all(np.abs(np.array(m) / 10 ** (k / n) - 1) < 0.05)


def test_usual_tolerances():
    # [IEC] usual tolerances per series.
    assert dict(TOLERANCE) == {"E6": 0.2, "E12": 0.1, "E24": 0.05, "E48": 0.02, "E96": 0.01, "E192": 0.005}
    assert SERIES_NAMES == ("E6", "E12", "E24", "E48", "E96", "E192", "none")


def test_tables_cannot_be_changed():
    with pytest.raises(TypeError):
        SERIES["E12"] = (1.0,)


# ------------------------------------------------------------------ values()
def test_values_one_decade_includes_both_ends():
    got = values("E12", 1e3, 10e3)
    assert got.tolist() == [
        1000.0,
        1200.0,
        1500.0,
        1800.0,
        2200.0,
        2700.0,
        3300.0,
        3900.0,
        4700.0,
        5600.0,
        6800.0,
        8200.0,
        10000.0,
    ]


@pytest.mark.parametrize("name", list(SERIES))
def test_values_equal_the_decimal_literals_over_many_decades(name):
    got = values(name, 1e-15, 1e9)
    want = [literal(m, d, name) for d in range(-15, 10) for m in SERIES[name]]
    assert got.tolist() == [w for w in want if w <= 1e9]


def test_values_sub_range():
    assert values("E24", 4.4e-9, 5.6e-9).tolist() == [4.7e-9, 5.1e-9, 5.6e-9]
    assert values("E6", 5e3, 6e3).size == 0


@pytest.mark.parametrize(
    "args",
    [
        ("E12", 1e3, 1e2),
        ("E12", 0.0, 1.0),
        ("E12", -1.0, 1.0),
        ("E12", 1.0, math.inf),
        ("E13", 1.0, 10.0),
        ("none", 1.0, 10.0),
    ],
)
def test_values_rejects_bad_input(args):
    with pytest.raises(DesignError):
        values(*args)


# ------------------------------------------------------------------ snap()
SNAP_CASES = [
    # (value, series, expected); the boundary between neighbours a < b is sqrt(a b)
    (9.9e3, "E12", 10e3),  # sqrt(8.2k * 10k) = 9.055k: across the decade to 10k
    (9.0e3, "E12", 8.2e3),
    (9.1e3, "E12", 10e3),
    (0.83, "E6", 1.0),  # sqrt(0.68 * 1.0) = 0.8246
    (0.82, "E6", 0.68),
    (1.04e-9, "E24", 1.0e-9),  # sqrt(1.0 * 1.1) = 1.0488
    (1.05e-9, "E24", 1.1e-9),
    (4.4e-9, "E24", 4.3e-9),  # sqrt(4.3 * 4.7) = 4.4956
    (4.5e-9, "E24", 4.7e-9),
    (4.6e-6, "E12", 4.7e-6),
    (10.3e3, "E96", 10.2e3),  # sqrt(10.2 * 10.5) = 10.349
    (10.4e3, "E96", 10.5e3),
    (9.19, "E192", 9.20),  # the published exception
    (9.19, "E96", 9.09),  # sqrt(9.09 * 9.31) = 9.1995
    (9.20, "E96", 9.31),
    (4.53e3, "E96", 4.53e3),  # a preferred value snaps to itself
    (1e-12, "E12", 1e-12),
    (1e6, "E24", 1e6),
    (995e3, "E192", 1e6),  # sqrt(988k * 1M) = 994.0k
    (993e3, "E192", 988e3),
]


@pytest.mark.parametrize("value, series, expected", SNAP_CASES)
def test_snap_table(value, series, expected):
    got = snap(value, series)
    assert type(got) is float
    assert got == expected


@pytest.mark.parametrize("name", list(SERIES))
@pytest.mark.parametrize("decade", [-12, -9, 0, 3, 6])
def test_geometric_midpoints_go_up(name, decade):
    m = list(SERIES[name]) + [10.0]
    lower = np.array([literal(a, decade, name) for a in m[:-1]])
    upper = np.array([literal(b, decade, name) for b in m[1:-1]] + [literal(1.0, decade + 1, name)])
    mid = np.sqrt(lower * upper)
    assert np.array_equal(snap(mid, name), upper)
    assert np.array_equal(snap(mid * (1 - 1e-9), name), lower)
    assert np.array_equal(snap(mid * (1 + 1e-9), name), upper)


def test_snap_arrays_keep_their_shape():
    x = np.array([[1.04e3, 1.05e3], [9.9e3, 3.0e-12]])
    got = snap(x, "E24")
    assert got.shape == (2, 2)
    assert got.tolist() == [[1.0e3, 1.1e3], [10e3, 3.0e-12]]


def test_snap_none_returns_the_value():
    assert snap(1234.5678, "none") == 1234.5678
    x = np.array([1.0, 2.5])
    assert snap(x, "none") is x


@pytest.mark.parametrize("value", [0.0, -1e3, math.nan, math.inf, [1.0, -2.0]])
def test_snap_rejects_values_without_a_preferred_value(value):
    with pytest.raises(DesignError, match="must be a finite value > 0"):
        snap(value, "E12")


def test_snap_rejects_unknown_series_and_lists_the_allowed():
    with pytest.raises(DesignError) as err:
        snap(1e3, "E25")
    assert "E25" in str(err.value)
    assert "E6, E12, E24, E48, E96, E192, none" in str(err.value)


positive = st.floats(min_value=1e-14, max_value=1e9, allow_nan=False, allow_infinity=False)


@settings(max_examples=300, deadline=None)
@given(x=positive, series=st.sampled_from(list(SERIES)))
def test_snap_is_the_nearest_preferred_value_by_ratio(x, series):
    s = snap(x, series)
    pool = candidates(series, x)
    assert s in pool  # a value of the series, equal to its decimal literal
    best = min(abs(math.log(c / x)) for c in pool)
    assert abs(math.log(s / x)) <= best + 1e-12
    assert snap(s, series) == s


@settings(max_examples=100, deadline=None)
@given(xs=st.lists(positive, min_size=1, max_size=20), series=st.sampled_from(list(SERIES)))
def test_snap_array_equals_snap_of_each(xs, series):
    assert snap(np.array(xs), series).tolist() == [snap(x, series) for x in xs]


# ------------------------------------------------------------------ neighbours()
@pytest.mark.parametrize(
    "value, series, expected",
    [
        (4.53e3, "E24", (4.3e3, 4.7e3)),
        (4.7e3, "E24", (4.7e3, 4.7e3)),
        (9.5e3, "E24", (9.1e3, 10e3)),
        (0.95, "E6", (0.68, 1.0)),
        (1.005e-9, "E192", (1.0e-9, 1.01e-9)),
        (123.0, "none", (123.0, 123.0)),
    ],
)
def test_neighbours_table(value, series, expected):
    assert neighbours(value, series) == expected


@settings(max_examples=200, deadline=None)
@given(x=positive, series=st.sampled_from(list(SERIES)))
def test_neighbours_bracket_the_value(x, series):
    below, above = neighbours(x, series)
    pool = candidates(series, x)
    assert below in pool and above in pool
    assert below <= x * (1 + 1e-9) and above >= x * (1 - 1e-9)
    assert not any(below < c < above for c in pool)
    assert snap(x, series) in (below, above)


# ------------------------------------------------------------------ parts
def test_designators():
    assert all(is_resistor(d) for d in ("R1", "R2", "R3", "Rpull", "R_led", "R"))
    assert all(is_capacitor(d) for d in ("C1", "C2", "C3", "Chf", "C"))
    assert not any(is_resistor(d) or is_capacitor(d) for d in ("CTR", "gm", "Vref", "RLED"))


def test_snap_parts_uses_each_series_and_leaves_the_rest():
    parts = {"R1": 10.3e3, "C1": 1.09e-9, "CTR": 1.3, "R2": 47.3e3, "C2": 3.0e-12, "gm": 1e-3}
    before = dict(parts)
    got = snap_parts(parts, "E96", "E12")
    assert list(got) == list(parts)
    assert got == {"R1": 10.2e3, "C1": 1.0e-9, "CTR": 1.3, "R2": 47.5e3, "C2": 3.3e-12, "gm": 1e-3}
    assert parts == before
    assert snap_parts(parts, "none", "E6") == {**parts, "C1": 1.0e-9, "C2": 3.3e-12}


def test_snap_parts_errors_name_the_field():
    with pytest.raises(DesignError, match=r"compensator\.parts\.R2"):
        snap_parts({"R1": 1e3, "R2": -5.0}, "E96", "E12")
    with pytest.raises(DesignError, match=r"compensator\.capacitor_series = E7"):
        snap_parts({"C1": 1e-9}, "E96", "E7")


@pytest.mark.parametrize(
    "parts, codes",
    [
        ({"C1": 4.7e-12}, ["capacitor-small"]),
        ({"C1": 10e-12}, []),
        ({"R1": 999.0}, ["resistor-range"]),
        ({"R1": 1e3, "R2": 1e6}, []),
        ({"R3": 1.0001e6}, ["resistor-range"]),
        ({"CTR": 0.5, "R1": 10e3, "C1": 1e-9}, []),
        ({"R1": 100.0, "C2": 1e-12, "C3": 1e-9}, ["resistor-range", "capacitor-small"]),
    ],
)
def test_part_warnings(parts, codes):
    # thresholds: common practice, no source
    found = part_warnings(parts)
    assert [f.code for f in found] == codes
    for f in found:
        assert f.severity == "warning"


def test_part_warning_messages_name_the_part_and_value():
    (small,) = part_warnings({"C3": 4.7e-12})
    assert "C3 = 4.7pF" in small.message and "10 pF" in small.message
    (big,) = part_warnings({"R2": 2.2e6})
    assert "R2 = 2.2MΩ" in big.message and "1 MΩ" in big.message
