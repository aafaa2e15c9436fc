"""ISO-8601 time stamps as loggers write them, to seconds from a reference, exactly.

Accepted forms (ISO 8601 extended format; the "T" may be a space, as RFC 3339 allows):

``2024-03-01T12:00:00``                   no zone (local time of the logger)
``2024-03-01T12:00:00.000123456``         fractional seconds, any number of digits
``2024-03-01T12:00:00,5``                 decimal comma in the seconds
``2024-03-01T12:00:00Z``                  UTC
``2024-03-01T12:00:00.25+01:00``          zone offset (also ``+0100`` and ``+01``)

Seconds are counted in whole numbers and the fraction kept apart, so a stamp a day after the
reference still resolves nanoseconds (a float of seconds since 1970 resolves only 0.2 us).
:func:`seconds_since_many` reads a column of stamps written alike (as a logger writes them)
with array arithmetic, giving the same floats as :func:`parse_iso_time` one by one.

References
----------
H. Hinnant, "chrono-Compatible Low-Level Date Algorithms" (days_from_civil), 2013,
https://howardhinnant.github.io/date_algorithms.html
"""

from __future__ import annotations

import datetime as dt
import re
from collections.abc import Sequence

import numpy as np

__all__ = ["IsoTime", "is_iso_time", "parse_iso_time", "seconds_since_many"]

_ISO = re.compile(
    r"^\s*(\d{4})-(\d{2})-(\d{2})[T ](\d{2}):(\d{2}):(\d{2})(?:[.,](\d+))?"
    r"(Z|[+-]\d{2}(?::?\d{2})?)?\s*$"
)
_EPOCH = dt.date(1970, 1, 1).toordinal()


class IsoTime:
    """A time stamp as whole seconds since 1970-01-01 (UTC when a zone was given) and a
    fraction in [0, 1)."""

    __slots__ = ("fraction", "seconds", "zoned")

    def __init__(self, seconds: int, fraction: float, zoned: bool) -> None:
        self.seconds = seconds
        self.fraction = fraction
        self.zoned = zoned

    def since(self, ref: IsoTime) -> float:
        """Seconds from ``ref`` to this stamp."""
        return float(self.seconds - ref.seconds) + (self.fraction - ref.fraction)


def parse_iso_time(text: str) -> IsoTime:
    """Read one ISO-8601 date and time.

    Raises
    ------
    ValueError
        Not one of the accepted forms, or no such date or time.

    Examples
    --------
    >>> a = parse_iso_time("2024-03-01T12:00:00Z")
    >>> parse_iso_time("2024-03-01T13:00:00.5+01:00").since(a)
    0.5
    """
    m = _ISO.match(text.strip().strip('"'))
    if m is None:
        raise ValueError(f"{text!r} is not an ISO-8601 date and time")
    year, month, day, hour, minute, second = (int(g) for g in m.groups()[:6])
    if hour > 23 or minute > 59 or second > 59:
        raise ValueError(f"{text!r}: no such time of day")
    days = dt.date(year, month, day).toordinal() - _EPOCH  # ValueError for no such date
    seconds = days * 86400 + hour * 3600 + minute * 60 + second
    digits = m.group(7)
    fraction = int(digits) / 10 ** len(digits) if digits else 0.0
    zone = m.group(8)
    if zone and zone != "Z":
        sign = -1 if zone[0] == "-" else 1
        body = zone[1:].replace(":", "")
        offset = int(body[:2]) * 3600 + (int(body[2:4]) * 60 if len(body) > 2 else 0)
        seconds -= sign * offset
    return IsoTime(seconds, fraction, zone is not None)


def is_iso_time(text: str) -> bool:
    """True when ``text`` is an accepted ISO-8601 date and time."""
    try:
        parse_iso_time(text)
    except ValueError:
        return False
    return True


_EXACT_DIGITS = 15
"""Longest fraction read with arrays: its integer is exact in float64, so the division by
10**digits rounds as Python's does."""


def seconds_since_many(texts: Sequence[str], ref: IsoTime) -> np.ndarray:
    """``parse_iso_time(t).since(ref)`` for every stamp, computed on arrays.

    The stamps must be written alike: the same length, and the same characters wherever the
    first has no digit (dates, times and zone offsets may differ). That is how loggers write
    them; a caller reads anything else one stamp at a time with :func:`parse_iso_time`.

    Raises
    ------
    ValueError
        Stamps not written alike, or one that is not a valid date and time.

    Examples
    --------
    >>> ref = parse_iso_time("2024-02-28T23:59:59.5Z")
    >>> seconds_since_many(["2024-02-28T23:59:59.75Z", "2024-02-29T00:00:00.25Z"], ref)
    array([0.25, 0.75])
    """
    cleaned = [text.strip().strip('"').strip() for text in texts]
    first = cleaned[0] if cleaned else ""
    m = _ISO.match(first)
    if m is None:
        raise ValueError(f"{first!r} is not an ISO-8601 date and time")
    width = len(first)
    chars = np.array(cleaned, dtype=f"<U{max(width, 1)}")
    if chars.dtype.itemsize != 4 * width or (np.char.str_len(chars) != width).any():
        raise ValueError("time stamps of different lengths")
    code = chars.view(np.uint32).reshape(len(cleaned), width).astype(np.int64) - ord("0")
    digit = np.array([c.isdigit() for c in first])
    if ((code[:, digit] < 0) | (code[:, digit] > 9)).any():
        raise ValueError("time stamps not written alike")
    if (code[:, ~digit] != code[0, ~digit]).any():
        raise ValueError("time stamps not written alike")

    def number(group: int) -> np.ndarray:
        lo, hi = m.span(group)
        return code[:, lo:hi] @ (10 ** np.arange(hi - lo - 1, -1, -1, dtype=np.int64))

    year, month, day, hour, minute, second = (number(g) for g in range(1, 7))
    leap = (year % 4 == 0) & ((year % 100 != 0) | (year % 400 == 0))
    month_days = np.array([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])
    good = (year >= 1) & (month >= 1) & (month <= 12) & (day >= 1) & (hour <= 23)
    good &= (minute <= 59) & (second <= 59)
    good &= day <= month_days[np.clip(month, 0, 12)] + (leap & (month == 2))
    if not good.all():
        raise ValueError(f"{cleaned[int(np.argmin(good))]!r}: no such date or time")
    seconds = _days_since_1970(year, month, day) * 86400 + hour * 3600 + minute * 60 + second
    fraction = np.zeros(len(cleaned))
    if m.group(7):
        places = len(m.group(7))
        if places > _EXACT_DIGITS:
            raise ValueError("more fractional digits than a float holds exactly")
        fraction = number(7).astype(np.float64) / float(10**places)
    zone = m.group(8)
    if zone and zone != "Z":
        lo = m.start(8)
        sign = -1 if zone[0] == "-" else 1
        hours = code[:, lo + 1] * 10 + code[:, lo + 2]
        rest = zone[3:].replace(":", "")
        at = lo + len(zone) - 2
        minutes = code[:, at] * 10 + code[:, at + 1] if rest else 0
        seconds = seconds - sign * (hours * 3600 + minutes * 60)
    return (seconds - ref.seconds).astype(np.float64) + (fraction - ref.fraction)


def _days_since_1970(year: np.ndarray, month: np.ndarray, day: np.ndarray) -> np.ndarray:
    """Days from 1970-01-01 of proleptic Gregorian dates (Hinnant's days_from_civil)."""
    y = year - (month <= 2)
    era = y // 400
    yoe = y - era * 400
    doy = (153 * np.where(month > 2, month - 3, month + 9) + 2) // 5 + day - 1
    doe = yoe * 365 + yoe // 4 - yoe // 100 + doy
    return era * 146097 + doe - 719468
