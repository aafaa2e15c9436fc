"""Reading and writing component values: IEC 60062 letter code and SI prefixes.

Accepted text (all give the same kind of float, in the base unit):

* plain numbers: ``4700``, ``1e3``, ``0.47``;
* SI prefix with an optional unit: ``4.7k``, ``2.2nF``, ``47kohm``, ``47 kΩ``, ``1.5 MHz``;
* the IEC 60062 letter code, where the prefix letter stands for the decimal point:
  ``4k7`` (4700), ``2n2`` (2.2e-9), ``1M5``, ``3m3``, ``R47`` (0.47 ohm), ``4R7`` (4.7 ohm),
  ``47R`` (47 ohm), ``4F7`` (4.7 F).

Prefix letters: p n u µ μ m k K M G (``K`` is read as kilo, as resistor values are often
written). ``R`` marks ohms and ``F`` farads. Units: F, ohm (also ohms, Ω), Hz, V, A, s.

References
----------
IEC 60062:2016, Marking codes for resistors and capacitors (letter code for values).
BIPM, The International System of Units (SI brochure), 9th ed., 2019 (prefixes).
"""

from __future__ import annotations

import math
import numbers
import re
from decimal import Decimal

_PREFIX_EXPONENT = {
    "p": -12,
    "n": -9,
    "u": -6,
    "\u00b5": -6,  # MICRO SIGN
    "\u03bc": -6,  # GREEK SMALL LETTER MU
    "m": -3,
    "k": 3,
    "K": 3,
    "M": 6,
    "G": 9,
}
# Letters that mark the decimal point in the IEC 60062 code and imply a unit.
_UNIT_MARKERS = {"R": "ohm", "F": "F"}

_UNIT_SPELLINGS = {
    "F": "F",
    "ohm": "ohm",
    "ohms": "ohm",
    "Ohm": "ohm",
    "Ohms": "ohm",
    "\u03a9": "ohm",  # GREEK CAPITAL LETTER OMEGA
    "\u2126": "ohm",  # OHM SIGN
    "Hz": "Hz",
    "V": "V",
    "A": "A",
    "s": "s",
}
UNITS = ("F", "ohm", "Hz", "V", "A", "s")
# Unit letters in the wrong case that can only mean one thing ("kHZ", "OHM", "v"). A lone
# "f", "a" or "S" could be a prefix (femto, atto) or another unit (siemens): "f" and "a" are
# read as farad and ampere only after a prefix ("10 nf", "2 ma"); "mf" stays refused, since
# old drawings write "mf" for microfarads. Prefixes keep their case: "m" and "M" differ.
_UNIT_ANY_CASE = {"hz": "Hz", "ohm": "ohm", "ohms": "ohm", "v": "V"}
_UNIT_AFTER_PREFIX = {"f": "F", "a": "A"}

_PREFIXES = "".join(_PREFIX_EXPONENT)
_NUMBER = r"(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_DECIMAL_FORM = re.compile(
    rf"(?P<sign>[+-]?)(?P<number>{_NUMBER})\s*(?P<letter>[{_PREFIXES}R]?)\s*(?P<unit>[^\d\s.+-]*)"
)
_CODE_FORM = re.compile(
    rf"(?P<sign>[+-]?)(?P<whole>\d*)(?P<letter>[{_PREFIXES}RF])(?P<fraction>\d+)\s*(?P<unit>[^\d\s.+-]*)"
)
_TWO_MARKERS = re.compile(rf"[+-]?[\d.]*[{_PREFIXES}RF][\d.]*\s*[^\d\s.+-]*")

_ACCEPTED = "write e.g. 4700, 4.7k, 4k7, 2n2, R47, 4R7, 2.2nF, 47kohm or 1.5 MHz"
_EXAMPLES = {
    "F": "write e.g. 2n2, 2.2nF, 100n or 1u",
    "ohm": "write e.g. 4k7, 4.7k, 47kohm or 4700",
    "Hz": "write e.g. 1.5 kHz, 1k5, 48k or 48000",
    "V": "write e.g. 2 V, 500 mV or 0.5",
    "A": "write e.g. 1 mA or 0.001",
    "s": "write e.g. 0.5, 500 ms or 2 s",
}


class ValueTextError(ValueError):
    """Text that is not a value: ``problem`` says what is wrong, ``fix`` the one way to write
    it; ``str()`` joins them. A caller with a better example replaces ``fix``."""

    def __init__(self, problem: str, fix: str = _ACCEPTED) -> None:
        super().__init__(f"{problem}; {fix}")
        self.problem = problem
        self.fix = fix


# Letter-code prefixes by decimal exponent, per kind of part.
_CODE_LETTERS = {
    "R": {0: "R", 3: "k", 6: "M", 9: "G"},
    "C": {-12: "p", -9: "n", -6: "u", -3: "m", 0: "F"},
}
_SI_LETTERS = {-12: "p", -9: "n", -6: "\u00b5", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}


def _unit_of(spelling: str, text: str, prefixed: bool) -> str:
    if spelling in _UNIT_SPELLINGS:
        return _UNIT_SPELLINGS[spelling]
    folded = spelling.lower()
    if folded in _UNIT_ANY_CASE:
        return _UNIT_ANY_CASE[folded]
    if prefixed and folded in _UNIT_AFTER_PREFIX and not text.rstrip().lower().endswith("mf"):
        return _UNIT_AFTER_PREFIX[folded]
    if not prefixed and folded in _UNIT_AFTER_PREFIX:
        unit = _UNIT_AFTER_PREFIX[folded]
        raise ValueTextError(
            f"cannot read {text!r} as a value: a lone {spelling!r} could be a prefix "
            f"({'femto' if folded == 'f' else 'atto'}) rather than {unit}",
            f"write {unit} for {'farads' if unit == 'F' else 'amperes'}",
        )
    head = spelling[:1]
    if head and head not in _PREFIX_EXPONENT and head.lower() in _PREFIX_EXPONENT:
        raise ValueTextError(
            f"cannot read {text!r} as a value: {head!r} is not a prefix (prefixes keep their "
            "case: m milli, M mega)",
            f"write {head.lower()}{spelling[1:]}",
        )
    if text.rstrip().lower().endswith("mf"):
        raise ValueTextError(
            f"cannot read {text!r} as a value: 'mf' could mean millifarads or (on old "
            "drawings) microfarads",
            "write mF for millifarads or uF for microfarads",
        )
    raise ValueTextError(
        f"cannot read {text!r} as a value: unknown suffix {spelling!r} (units: {', '.join(UNITS)})"
    )


def _parse_text(text: str) -> tuple[float, str | None]:
    """Value in the base unit and the unit the text names (None when it names none)."""
    stripped = text.strip()
    if not stripped:
        raise ValueTextError(f"cannot read {text!r} as a value: it is empty")
    code = _CODE_FORM.fullmatch(stripped)
    decimal = _DECIMAL_FORM.fullmatch(stripped)
    if code is not None:
        digits = f"{code['whole'] or '0'}.{code['fraction']}"
        letter, sign, spelling = code["letter"], code["sign"], code["unit"]
    elif decimal is not None:
        digits = decimal["number"]
        letter, sign, spelling = decimal["letter"], decimal["sign"], decimal["unit"]
    elif _TWO_MARKERS.fullmatch(stripped) and "." in stripped:
        raise ValueTextError(
            f"cannot read {text!r} as a value: it has two decimal markers "
            "(a point and a code letter)"
        )
    else:
        raise ValueTextError(f"cannot read {text!r} as a value: not a number")
    # Decimal keeps 4.7 * 1e-9 the float nearest 4.7e-9 (a float product may be 1 ulp off).
    value = float(Decimal(digits).scaleb(_PREFIX_EXPONENT.get(letter, 0)))
    implied = _UNIT_MARKERS.get(letter)
    named = _unit_of(spelling, text, letter in _PREFIX_EXPONENT) if spelling else None
    if implied is not None and named is not None and named != implied:
        raise ValueTextError(
            f"cannot read {text!r} as a value: the letter {letter!r} means {implied} "
            f"but the unit is {named}"
        )
    return (-value if sign == "-" else value), named or implied


def parse_quantity(
    text_or_number: str | float, unit: str | None = None, *, allow_negative: bool = False
) -> float:
    """Read a component value or other quantity written by a person.

    Parameters
    ----------
    text_or_number : str or real number
        A number, or text in one of the forms of this module's description: plain
        (``"4700"``, ``"1e3"``), SI prefix with optional unit (``"4.7k"``, ``"2.2nF"``,
        ``"47 kΩ"``, ``"1.5 MHz"``), or IEC 60062 letter code (``"4k7"``, ``"2n2"``,
        ``"R47"``, ``"4R7"``).
    unit : str, optional
        The expected unit, one of ``UNITS`` ("F", "ohm", "Hz", "V", "A", "s"). A unit
        written in the text, or implied by the letters R (ohm) and F (farad), must match it.
        Text without a unit is always accepted.
    allow_negative : bool, default False
        Accept values below zero.

    Returns
    -------
    float
        The value in the base unit (ohm, F, Hz, V, A, s): ``"4k7"`` gives 4700.0.

    Raises
    ------
    ValueError
        With the text and the accepted forms, for empty text, text that is not a number,
        two decimal markers (``"4k7.1"``), an unknown suffix, a unit other than `unit`,
        a negative value without `allow_negative`, NaN or infinity; also for an unknown
        `unit`. The message does not say where the text came from: the caller adds that.
    TypeError
        If `text_or_number` is neither text nor a real number (``True`` is not a number).

    References
    ----------
    IEC 60062:2016, letter code for resistance and capacitance values.

    Examples
    --------
    >>> parse_quantity("4k7", "ohm")
    4700.0
    >>> parse_quantity("2.2nF", "F")
    2.2e-09
    """
    if unit is not None and unit not in UNITS:
        raise ValueError(f"unit must be one of {', '.join(UNITS)} or None (got {unit!r})")
    if isinstance(text_or_number, str):
        try:
            value, named = _parse_text(text_or_number)
        except ValueTextError as exc:
            if unit is None or exc.fix != _ACCEPTED:
                raise
            raise ValueTextError(exc.problem, _EXAMPLES[unit]) from None
    elif isinstance(text_or_number, numbers.Real) and not isinstance(text_or_number, bool):
        value, named = float(text_or_number), None
    else:
        raise TypeError(
            f"a value must be text or a number (got {type(text_or_number).__name__} "
            f"{text_or_number!r})"
        )
    if not math.isfinite(value):
        raise ValueTextError(
            f"cannot read {text_or_number!r} as a value: it is not finite",
            _EXAMPLES.get(unit or "", _ACCEPTED),
        )
    if unit is not None and named is not None and named != unit:
        raise ValueTextError(
            f"cannot read {text_or_number!r} as a value in {unit}: it is written in {named}",
            f"write it in {unit} or without a unit",
        )
    if value < 0.0 and not allow_negative:
        raise ValueTextError(
            f"cannot read {text_or_number!r} as a value: it is negative",
            "write a value of zero or more",
        )
    return value + 0.0  # no negative zero


def _three_figures(value: float) -> tuple[str, int]:
    """Three significant digits of a positive value and the decimal exponent of the first."""
    mantissa, exponent = f"{value:.2e}".split("e")
    return mantissa.replace(".", ""), int(exponent)


def format_letter_code(value: float, unit_kind: str) -> str:
    """Write a resistance or capacitance in the IEC 60062 letter code, 3 significant figures.

    Parameters
    ----------
    value : float
        Finite positive value in ohm (``unit_kind="R"``) or F (``unit_kind="C"``).
    unit_kind : {"R", "C"}
        "R" for resistors (letters R, k, M, G) and "C" for capacitors (p, n, u, m, F).

    Returns
    -------
    str
        The code with trailing zeros dropped: 4700 -> "4k7", 4.7 -> "4R7", 0.47 -> "R47",
        47 -> "47R", 12100 -> "12k1", 2.2e-9 -> "2n2", 100e-12 -> "100p", 1e-6 -> "1u".
        Values beyond the letters grow digits ("1000G"); values below them get leading
        zeros ("R047", "p47").

    Raises
    ------
    ValueError
        If `value` is not finite and positive or `unit_kind` is not "R" or "C".

    References
    ----------
    IEC 60062:2016, letter code for resistance and capacitance values. The standard writes
    the kilo-ohm letter as "K"; the SI lower-case "k" is written here, and both are read.

    Examples
    --------
    >>> format_letter_code(4700.0, "R"), format_letter_code(2.2e-9, "C")
    ('4k7', '2n2')
    """
    if unit_kind not in _CODE_LETTERS:
        raise ValueError(f'unit_kind must be "R" or "C" (got {unit_kind!r})')
    if not (math.isfinite(value) and value > 0.0):
        raise ValueError(f"value must be a finite positive number (got {value!r})")
    digits, exponent = _three_figures(value)
    letters = _CODE_LETTERS[unit_kind]
    at_or_below = [e for e in letters if e <= exponent]
    prefix_exponent = max(at_or_below) if at_or_below else min(letters)
    whole_count = exponent - prefix_exponent + 1  # digits before the marker
    if whole_count <= 0:
        whole, fraction = "", "0" * -whole_count + digits
    else:
        padded = digits.ljust(whole_count, "0")
        whole, fraction = padded[:whole_count], padded[whole_count:]
    return f"{whole}{letters[prefix_exponent]}{fraction.rstrip('0')}"


def format_si(value: float, unit: str, digits: int = 4) -> str:
    """Write a value with an SI prefix and a fixed number of significant digits.

    Parameters
    ----------
    value : float
        The value in the base unit; NaN and infinity are written as such.
    unit : str
        Unit text appended after the prefix ("Hz", "F", "ohm", "V"); may be empty.
    digits : int, default 4
        Significant digits shown, at least 1.

    Returns
    -------
    str
        For example "1.234 kHz", "10.00 nF", "-250.0 mV", "0 Hz". Prefixes run from p to
        G (micro as µ); values outside that range get more digits ("1500 GHz").

    Raises
    ------
    ValueError
        If `digits` is below 1.

    Examples
    --------
    >>> format_si(1234.0, "Hz"), format_si(10e-9, "F"), format_si(0.0, "Hz")
    ('1.234 kHz', '10.00 nF', '0 Hz')
    """
    if isinstance(digits, bool) or not isinstance(digits, int) or digits < 1:
        raise ValueError(f"digits must be an integer >= 1 (got {digits!r})")
    if value == 0.0 or not math.isfinite(value):
        number = "0" if value == 0.0 else str(value)
        return f"{number} {unit}".rstrip()
    mantissa, exponent_text = f"{abs(value):.{digits - 1}e}".split("e")
    exponent = int(exponent_text)
    prefix_exponent = min(max(3 * math.floor(exponent / 3), -12), 9)
    decimals = max(0, digits - 1 - (exponent - prefix_exponent))
    scaled = float(mantissa) * 10.0 ** (exponent - prefix_exponent)
    sign = "-" if value < 0 else ""
    return f"{sign}{scaled:.{decimals}f} {_SI_LETTERS[prefix_exponent]}{unit}".rstrip()
