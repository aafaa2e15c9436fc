"""ISO-8601 time stamps as loggers write them, to seconds from a reference, exactly.

Accepted forms (ISO 8601 extended format; the "T" may be a space, as RFC 3339 allows):

``2024-03-01T12:00:00``                   no zone (local time of the logger)
``2024-03-01T12:00:00.000123456``         fractional seconds, any number of digits
``2024-03-01T12:00:00,5``                 decimal comma in the seconds
``2024-03-01T12:00:00Z``                  UTC
``2024-03-01T12:00:00.25+01:00``          zone offset (also ``+0100`` and ``+01``)

Seconds are counted in whole numbers and the fraction kept apart, so a stamp a day after the
reference still resolves nanoseconds (a float of seconds since 1970 resolves only 0.2 us).
"""

from __future__ import annotations

import datetime as dt
import re

__all__ = ["IsoTime", "is_iso_time", "parse_iso_time"]

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
