"""Tests of filtertwin.circuit.eseries against IEC 60063:2015 and the series' own geometric rule."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from filtertwin.circuit import eseries

# IEC 60063:2015 tables, from memory, written independently of the module's integer tables.
IEC_E3 = [1.0, 2.2, 4.7]
IEC_E6 = [1.0, 1.5, 2.2, 3.3, 4.7, 6.8]
IEC_E12 = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]
IEC_E24 = [
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
    3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
]  # fmt: skip
IEC_E48 = [
    1.00, 1.05, 1.10, 1.15, 1.21, 1.27, 1.33, 1.40, 1.47, 1.54, 1.62, 1.69,
    1.78, 1.87, 1.96, 2.05, 2.15, 2.26, 2.37, 2.49, 2.61, 2.74, 2.87, 3.01,
    3.16, 3.32, 3.48, 3.65, 3.83, 4.02, 4.22, 4.42, 4.64, 4.87, 5.11, 5.36,
    5.62, 5.90, 6.19, 6.49, 6.81, 7.15, 7.50, 7.87, 8.25, 8.66, 9.09, 9.53,
]  # fmt: skip
IEC_E96 = [
    1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30,
    1.33, 1.37, 1.40, 1.43, 1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74,
    1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10, 2.15, 2.21, 2.26, 2.32,
    2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
    3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12,
    4.22, 4.32, 4.42, 4.53, 4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49,
    5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65, 6.81, 6.98, 7.15, 7.32,
    7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76,
]  # fmt: skip
IEC_E192 = [
    1.00, 1.01, 1.02, 1.04, 1.05, 1.06, 1.07, 1.09, 1.10, 1.11, 1.13, 1.14,
    1.15, 1.17, 1.18, 1.20, 1.21, 1.23, 1.24, 1.26, 1.27, 1.29, 1.30, 1.32,
    1.33, 1.35, 1.37, 1.38, 1.40, 1.42, 1.43, 1.45, 1.47, 1.49, 1.50, 1.52,
    1.54, 1.56, 1.58, 1.60, 1.62, 1.64, 1.65, 1.67, 1.69, 1.72, 1.74, 1.76,
    1.78, 1.80, 1.82, 1.84, 1.87, 1.89, 1.91, 1.93, 1.96, 1.98, 2.00, 2.03,
    2.05, 2.08, 2.10, 2.13, 2.15, 2.18, 2.21, 2.23, 2.26, 2.29, 2.32, 2.34,
    2.37, 2.40, 2.43, 2.46, 2.49, 2.52, 2.55, 2.58, 2.61, 2.64, 2.67, 2.71,
    2.74, 2.77, 2.80, 2.84, 2.87, 2.91, 2.94, 2.98, 3.01, 3.05, 3.09, 3.12,
    3.16, 3.20, 3.24, 3.28, 3.32, 3.36, 3.40, 3.44, 3.48, 3.52, 3.57, 3.61,
    3.65, 3.70, 3.74, 3.79, 3.83, 3.88, 3.92, 3.97, 4.02, 4.07, 4.12, 4.17,
    4.22, 4.27, 4.32, 4.37, 4.42, 4.48, 4.53, 4.59, 4.64, 4.70, 4.75, 4.81,
    4.87, 4.93, 4.99, 5.05, 5.11, 5.17, 5.23, 5.30, 5.36, 5.42, 5.49, 5.56,
    5.62, 5.69, 5.76, 5.83, 5.90, 5.97, 6.04, 6.12, 6.19, 6.26, 6.34, 6.42,
    6.49, 6.57, 6.65, 6.73, 6.81, 6.90, 6.98, 7.06, 7.15, 7.23, 7.32, 7.41,
    7.50, 7.59, 7.68, 7.77, 7.87, 7.96, 8.06, 8.16, 8.25, 8.35, 8.45, 8.56,
    8.66, 8.76, 8.87, 8.98, 9.09, 9.20, 9.31, 9.42, 9.53, 9.65, 9.76, 9.88,
]  # fmt: skip

IEC_TABLES = {
    "E3": IEC_E3,
    "E6": IEC_E6,
    "E12": IEC_E12,
    "E24": IEC_E24,
    "E48": IEC_E48,
    "E96": IEC_E96,
    "E192": IEC_E192,
}


@pytest.mark.parametrize("name", eseries.SERIES_NAMES)
def test_mantissas_equal_the_published_table(name):
    # IEC 60063:2015 table, from memory
    assert eseries.mantissas(name).tolist() == IEC_TABLES[name]


@pytest.mark.parametrize("name", eseries.SERIES_NAMES)
def test_each_series_has_as_many_values_as_its_name_says(name):
    # IEC 60063:2015: series En has n values per decade
    values = eseries.mantissas(name)
    assert len(values) == int(name[1:])
    assert values.dtype == np.float64
    assert np.all(np.diff(values) > 0) and values[0] == 1.0 and values[-1] < 10.0


@pytest.mark.parametrize(
    ("smaller", "larger"),
    [("E3", "E6"), ("E6", "E12"), ("E12", "E24"), ("E48", "E96"), ("E96", "E192")],
)
def test_each_series_is_every_second_value_of_the_next(smaller, larger):
    # IEC 60063:2015: E(n) is every second value of E(2n)
    assert eseries.mantissas(smaller).tolist() == eseries.mantissas(larger)[::2].tolist()


@pytest.mark.parametrize("name", ["E48", "E96", "E192"])
def test_three_figure_series_follow_the_geometric_rule_except_one_e192_value(name):
    # IEC 60063:2015: three-figure values are round(10**(i/n), 2); the one published
    # exception is E192 index 185, 9.20 where the rule gives 9.19 (from memory)
    n = int(name[1:])
    values = eseries.mantissas(name)
    rule = np.array([round(10 ** (i / n), 2) for i in range(n)])
    off = np.flatnonzero(np.abs(values - rule) > 1e-9)
    if name == "E192":
        assert off.tolist() == [185]
        assert (values[185], rule[185]) == (9.20, 9.19)
    else:
        assert off.size == 0


def test_e24_departs_from_the_geometric_rule_at_eight_published_values():
    # IEC 60063:2015: these E24 values are not round(10**(i/24), 1) (from memory)
    values = eseries.mantissas("E24")
    rule = np.array([round(10 ** (i / 24), 1) for i in range(24)])
    departing = values[np.abs(values - rule) > 1e-9].tolist()
    assert departing == [2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2]


def test_unknown_series_name_is_rejected_with_the_valid_names():
    with pytest.raises(ValueError, match=r"one of E3, E6, E12, E24, E48, E96, E192 \(got 'E10'\)"):
        eseries.mantissas("E10")
    with pytest.raises(ValueError, match="got 'e12'"):
        eseries.nearest(1.0, "e12")


def test_values_in_range_cover_whole_decades_with_clean_floats():
    # IEC 60063:2015 E12 table: 1 nF .. 10 nF inclusive
    got = eseries.values_in_range("E12", 1e-9, 10e-9)
    expected = [float(f"{m}e-9") for m in IEC_E12] + [1e-8]
    assert got.tolist() == expected
    assert 4.7e-9 in got.tolist()  # the exact decimal-looking float, not 4.700000000000001e-9


def test_values_in_range_include_bounds_within_a_relative_tolerance():
    # IEC 60063:2015 E24 table: 2.2, 2.4, 2.7 kOhm; bounds computed with float noise
    low = 2.2e3 * (1 + 1e-12)
    high = 0.1 * 27e3 * (1 - 1e-12)
    assert eseries.values_in_range("E24", low, high).tolist() == [2200.0, 2400.0, 2700.0]


def test_values_in_range_spans_several_decades_in_e192():
    # IEC 60063:2015: 192 values per decade, so 10 ohm .. 10 kOhm holds 3 * 192 + 1
    got = eseries.values_in_range("E192", 10.0, 10e3)
    assert len(got) == 3 * 192 + 1
    assert got[0] == 10.0 and got[-1] == 10e3
    assert 92.0 in got.tolist()  # the published 9.20, decade 10


def test_values_in_range_is_empty_between_two_series_values():
    # IEC 60063:2015 E6 table: nothing between 4.7 and 6.8
    assert eseries.values_in_range("E6", 5.0, 6.0).size == 0


@pytest.mark.parametrize(
    ("low", "high", "match"),
    [
        (0.0, 1.0, "low must be a finite positive number"),
        (1.0, math.inf, "high must be a finite positive number"),
        (10.0, 1.0, "low must be <= high"),
    ],
)
def test_values_in_range_rejects_bad_bounds(low, high, match):
    with pytest.raises(ValueError, match=match):
        eseries.values_in_range("E12", low, high)


@pytest.mark.parametrize(
    ("value", "series", "expected"),
    [
        (4500.0, "E12", 4700.0),  # IEC 60063:2015 E12: 3.9, 4.7
        (4.2e-9, "E12", 3.9e-9),  # ratio 4.2/3.9 = 1.077 < 4.7/4.2 = 1.119
        (9.6e3, "E24", 10e3),  # crosses the decade: 9.1 .. 10
        (9.19, "E192", 9.20),  # IEC 60063:2015 E192: 9.09, 9.20, 9.31
        (0.0985, "E96", 0.0976),  # E96 9.76 .. 10.0, geometric midpoint 9.879
    ],
)
def test_nearest_picks_the_nearest_published_value_by_ratio(value, series, expected):
    assert eseries.nearest(value, series) == expected


def test_nearest_splits_a_step_at_its_geometric_midpoint():
    # IEC 60063:2015 E6: 4.7 and 6.8; the geometric midpoint is sqrt(4.7 * 6.8)
    middle = math.sqrt(4.7 * 6.8)
    assert eseries.nearest(middle * (1 - 1e-9), "E6") == 4.7
    assert eseries.nearest(middle * (1 + 1e-9), "E6") == 6.8


@pytest.mark.parametrize("bad", [0.0, -1.0, math.nan, math.inf])
def test_nearest_rejects_values_that_are_not_finite_and_positive(bad):
    with pytest.raises(ValueError, match="value must be a finite positive number"):
        eseries.nearest(bad, "E24")


@pytest.mark.parametrize(
    ("value", "series", "steps", "expected"),
    [
        (8200.0, "E12", 1, 10e3),  # IEC 60063:2015 E12: 8.2 -> 10 (next decade)
        (1000.0, "E24", -1, 910.0),  # E24: 10 -> 9.1 (previous decade)
        (4.7e-9, "E6", 6, 4.7e-8),  # six E6 steps make a decade
        (4.6e-9, "E6", 0, 4.7e-9),  # zero steps: the nearest value
        (1.0, "E96", -96 * 3, 1e-3),  # three decades down
        (9.09, "E192", 1, 9.20),  # E192's published 9.20
    ],
)
def test_step_moves_along_the_series_across_decades(value, series, steps, expected):
    assert eseries.step(value, series, steps) == expected


def test_step_requires_an_integer_count():
    with pytest.raises(TypeError, match="steps must be an integer"):
        eseries.step(1.0, "E12", 1.0)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("value", "series", "expected"),
    [
        (5000.0, "E6", (4700.0, 6800.0)),  # IEC 60063:2015 E6 table
        (4700.0, "E6", (4700.0, 4700.0)),  # a series value brackets itself
        (0.1 * 47e3, "E6", (4700.0, 4700.0)),  # ... even with float noise
        (9.5, "E24", (9.1, 10.0)),  # across the decade
        (9.195, "E192", (9.09, 9.20)),  # E192 9.20 (not the rule's 9.19)
    ],
)
def test_bracket_returns_the_neighbours_below_and_above(value, series, expected):
    assert eseries.bracket(value, series) == expected


@pytest.mark.parametrize(
    ("series", "expected"),
    [("E6", 0.20), ("E12", 0.10), ("E24", 0.05), ("E48", 0.02), ("E96", 0.01), ("E192", 0.005)],
)
def test_default_tolerance_follows_common_practice(series, expected):
    # common practice (no source)
    assert eseries.default_tolerance(series) == expected


@settings(max_examples=200, deadline=None)
@given(
    value=st.floats(min_value=1e-13, max_value=1e8, allow_nan=False, allow_infinity=False),
    series=st.sampled_from(eseries.SERIES_NAMES),
)
def test_nearest_and_bracket_agree_with_a_brute_force_search(value, series):
    # brute force over the IEC 60063:2015 table and the neighbouring decades
    decade = math.floor(math.log10(value))
    candidates = [
        float(f"{m:.2f}e{d}") for d in range(decade - 1, decade + 2) for m in IEC_TABLES[series]
    ]
    by_ratio = min(candidates, key=lambda c: (abs(math.log(c / value)), c))
    below, above = eseries.bracket(value, series)
    assert below <= value * (1 + 1e-9) and above >= value * (1 - 1e-9)
    assert below == max(c for c in candidates if c <= value * (1 + 1e-9))
    assert above == min(c for c in candidates if c >= value * (1 - 1e-9))
    assert eseries.nearest(value, series) == by_ratio


@settings(max_examples=100, deadline=None)
@given(
    value=st.floats(min_value=1e-12, max_value=1e7),
    series=st.sampled_from(eseries.SERIES_NAMES),
    steps=st.integers(min_value=-50, max_value=50),
)
def test_stepping_up_then_down_returns_to_the_nearest_value(value, series, steps):
    start = eseries.nearest(value, series)
    assert eseries.step(eseries.step(value, series, steps), series, -steps) == start
