"""IEC 60063 preferred number series (E3 to E192) for resistors and capacitors.

The tables are written out literally, as published, because the standard's values are not all
the rounded geometric sequence ``10**(i/n)``: eight E24 values (2.7, 3.0, 3.3, 3.6, 3.9, 4.3,
4.7, 8.2) and one E192 value (9.20) differ from it.

Values are kept internally as integers in hundredths of the decade mantissa (470 for 4.7) and
turned into floats through decimal text, so a returned 4.7 nF is exactly the float ``4.7e-9``
and not ``4.700000000000001e-09``.

References
----------
IEC 60063:2015, Preferred number series for resistors and capacitors.
"""

from __future__ import annotations

import math

import numpy as np

SERIES_NAMES = ("E3", "E6", "E12", "E24", "E48", "E96", "E192")

# Two significant figures, IEC 60063:2015. E3, E6 and E12 are every 8th, 4th and 2nd E24 value.
_E24 = (
    100, 110, 120, 130, 150, 160, 180, 200, 220, 240, 270, 300,
    330, 360, 390, 430, 470, 510, 560, 620, 680, 750, 820, 910,
)  # fmt: skip
_E12 = _E24[::2]
_E6 = _E24[::4]
_E3 = _E24[::8]

# Three significant figures, IEC 60063:2015. E48 and E96 are every 4th and 2nd E192 value.
_E192 = (
    100, 101, 102, 104, 105, 106, 107, 109, 110, 111, 113, 114,
    115, 117, 118, 120, 121, 123, 124, 126, 127, 129, 130, 132,
    133, 135, 137, 138, 140, 142, 143, 145, 147, 149, 150, 152,
    154, 156, 158, 160, 162, 164, 165, 167, 169, 172, 174, 176,
    178, 180, 182, 184, 187, 189, 191, 193, 196, 198, 200, 203,
    205, 208, 210, 213, 215, 218, 221, 223, 226, 229, 232, 234,
    237, 240, 243, 246, 249, 252, 255, 258, 261, 264, 267, 271,
    274, 277, 280, 284, 287, 291, 294, 298, 301, 305, 309, 312,
    316, 320, 324, 328, 332, 336, 340, 344, 348, 352, 357, 361,
    365, 370, 374, 379, 383, 388, 392, 397, 402, 407, 412, 417,
    422, 427, 432, 437, 442, 448, 453, 459, 464, 470, 475, 481,
    487, 493, 499, 505, 511, 517, 523, 530, 536, 542, 549, 556,
    562, 569, 576, 583, 590, 597, 604, 612, 619, 626, 634, 642,
    649, 657, 665, 673, 681, 690, 698, 706, 715, 723, 732, 741,
    750, 759, 768, 777, 787, 796, 806, 816, 825, 835, 845, 856,
    866, 876, 887, 898, 909, 920, 931, 942, 953, 965, 976, 988,
)  # fmt: skip
_E96 = _E192[::2]
_E48 = _E192[::4]

_TABLES: dict[str, tuple[int, ...]] = {
    "E3": _E3,
    "E6": _E6,
    "E12": _E12,
    "E24": _E24,
    "E48": _E48,
    "E96": _E96,
    "E192": _E192,
}

# Common practice (no source): the tolerance parts of each series are usually sold with.
_DEFAULT_TOLERANCE = {
    "E3": 0.20,
    "E6": 0.20,
    "E12": 0.10,
    "E24": 0.05,
    "E48": 0.02,
    "E96": 0.01,
    "E192": 0.005,
}

_REL_TOL = 1e-9


def _table(series: str) -> tuple[int, ...]:
    try:
        return _TABLES[series]
    except (KeyError, TypeError):
        valid = ", ".join(SERIES_NAMES)
        raise ValueError(f"series must be one of {valid} (got {series!r})") from None


def _check_positive(name: str, value: float) -> float:
    value = float(value)
    if not math.isfinite(value) or value <= 0.0:
        raise ValueError(f"{name} must be a finite positive number (got {value!r})")
    return value


def _value_at(series: tuple[int, ...], index: int) -> float:
    """Value at position `index` of the endless ladder ..., 9.1, 10, 11, ... (index 0 = 1.0)."""
    decade, position = divmod(index, len(series))
    return float(f"{series[position]}e{decade - 2}")


def _index_below(series: tuple[int, ...], value: float) -> int:
    """Largest ladder index whose value is <= value (within the relative tolerance)."""
    n = len(series)
    guess = math.floor(math.log10(value) * n)
    index = guess + 1
    while _value_at(series, index) > value * (1.0 + _REL_TOL):
        index -= 1
    while _value_at(series, index + 1) <= value * (1.0 + _REL_TOL):
        index += 1
    return index


def _nearest_index(series: tuple[int, ...], value: float) -> int:
    below = _index_below(series, value)
    low, high = _value_at(series, below), _value_at(series, below + 1)
    # Nearest by ratio; a tie goes to the lower value.
    return below if value / low <= high / value else below + 1


def mantissas(series: str) -> np.ndarray:
    """Values of one IEC 60063 series within one decade.

    Parameters
    ----------
    series : str
        One of ``SERIES_NAMES`` ("E3", "E6", "E12", "E24", "E48", "E96", "E192").

    Returns
    -------
    numpy.ndarray
        Float values in [1, 10), ascending; 3, 6, 12, 24, 48, 96 or 192 of them.

    Raises
    ------
    ValueError
        If `series` is not one of ``SERIES_NAMES``.

    References
    ----------
    IEC 60063:2015, Preferred number series for resistors and capacitors.

    Examples
    --------
    >>> mantissas("E6").tolist()
    [1.0, 1.5, 2.2, 3.3, 4.7, 6.8]
    """
    table = _table(series)
    return np.array([_value_at(table, i) for i in range(len(table))])


def values_in_range(series: str, low: float, high: float) -> np.ndarray:
    """Every value of a series, over all decades, with ``low <= value <= high``.

    Parameters
    ----------
    series : str
        One of ``SERIES_NAMES``.
    low, high : float
        Inclusive bounds, finite and positive, ``low <= high``. A series value within a
        relative 1e-9 of a bound counts as inside.

    Returns
    -------
    numpy.ndarray
        Ascending float values, each the float nearest its three-figure decimal value
        (4.7e-9, not 4.700000000000001e-9). Empty when no value lies in the range.

    Raises
    ------
    ValueError
        If `series` is unknown, a bound is not finite and positive, or ``low > high``.

    Examples
    --------
    >>> values_in_range("E12", 3e3, 1e4).tolist()
    [3300.0, 3900.0, 4700.0, 5600.0, 6800.0, 8200.0, 10000.0]
    """
    table = _table(series)
    low = _check_positive("low", low)
    high = _check_positive("high", high)
    if low > high:
        raise ValueError(f"low must be <= high (got low={low!r}, high={high!r})")
    first = _index_below(table, low * (1.0 - 2 * _REL_TOL))
    last = _index_below(table, high)
    values = [_value_at(table, i) for i in range(first, last + 1)]
    return np.array([v for v in values if v >= low * (1.0 - _REL_TOL)], dtype=float)


def nearest(value: float, series: str) -> float:
    """The series value nearest to `value`, by ratio (the series is geometric).

    Parameters
    ----------
    value : float
        Finite positive value in any unit (ohm, F).
    series : str
        One of ``SERIES_NAMES``.

    Returns
    -------
    float
        The nearest series value; when `value` lies exactly midway in ratio between two
        values, the lower one.

    Raises
    ------
    ValueError
        If `series` is unknown or `value` is not finite and positive.

    Examples
    --------
    >>> nearest(4500.0, "E12")
    4700.0
    """
    table = _table(series)
    value = _check_positive("value", value)
    return _value_at(table, _nearest_index(table, value))


def step(value: float, series: str, steps: int) -> float:
    """Move `steps` positions up (positive) or down (negative) the series from `value`.

    The move starts at the series value nearest to `value` and crosses decades, so one
    step up from 8.2 kOhm in E12 is 10 kOhm.

    Parameters
    ----------
    value : float
        Finite positive starting value.
    series : str
        One of ``SERIES_NAMES``.
    steps : int
        Number of positions to move; 0 returns the nearest value.

    Returns
    -------
    float
        The series value `steps` positions away from the nearest value.

    Raises
    ------
    ValueError
        If `series` is unknown or `value` is not finite and positive.
    TypeError
        If `steps` is not an integer.

    Examples
    --------
    >>> step(8200.0, "E12", 1)
    10000.0
    >>> step(1000.0, "E24", -1)
    910.0
    """
    table = _table(series)
    value = _check_positive("value", value)
    if isinstance(steps, bool) or not isinstance(steps, int | np.integer):
        raise TypeError(f"steps must be an integer (got {steps!r})")
    return _value_at(table, _nearest_index(table, value) + int(steps))


def bracket(value: float, series: str) -> tuple[float, float]:
    """The series values just below-or-equal and just above-or-equal to `value`.

    Parameters
    ----------
    value : float
        Finite positive value.
    series : str
        One of ``SERIES_NAMES``.

    Returns
    -------
    tuple of float
        ``(below, above)`` with ``below <= value <= above``; both equal `value` when it is a
        series value (within a relative 1e-9).

    Raises
    ------
    ValueError
        If `series` is unknown or `value` is not finite and positive.

    Examples
    --------
    >>> bracket(5000.0, "E6")
    (4700.0, 6800.0)
    """
    table = _table(series)
    value = _check_positive("value", value)
    below = _index_below(table, value)
    low = _value_at(table, below)
    if low >= value * (1.0 - _REL_TOL):
        return low, low
    return low, _value_at(table, below + 1)


def default_tolerance(series: str) -> float:
    """The part tolerance commonly sold with a series, as a fraction (0.05 for 5 %).

    Common practice (no source): E3 and E6 20 %, E12 10 %, E24 5 %, E48 2 %, E96 1 %,
    E192 0.5 %.

    Parameters
    ----------
    series : str
        One of ``SERIES_NAMES``.

    Returns
    -------
    float
        Relative tolerance.

    Raises
    ------
    ValueError
        If `series` is unknown.

    Examples
    --------
    >>> default_tolerance("E96")
    0.01
    """
    _table(series)
    return _DEFAULT_TOLERANCE[series]
