"""What the numbers in a recording are, and levels in dBFS of the ADC and the sensor's unit.

A recording holds one of four kinds of number (``RECORDED_AS``):

``fraction``  fractions of the ADC's full scale (float WAV/FLAC, normalised captures): 1.0
              is full scale;
``counts``    raw ADC counts: full scale is 2^(bits - 1) counts;
``volts``     the sensor's output voltage: full scale is the ADC's full-scale voltage;
``sensor``    the sensor's own unit (g, m/s, Pa...): full scale is the full-scale voltage
              divided by the sensitivity.

A sensitivity (``"100 mV/g"``, ``"10 V/(m/s)"``) and the full-scale voltage turn any of them
into the sensor's unit. A level in dBFS is that of a sine: 0 dBFS is a full-scale sine, so a
power P gives 10 log10(2 P / FS^2).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from filtertwin.circuit import units
from filtertwin.errors import UserInputError

__all__ = [
    "RECORDED_AS",
    "Calibration",
    "Sensitivity",
    "looks_like_counts",
    "make_calibration",
    "parse_sensitivity",
]

RECORDED_AS = ("fraction", "counts", "volts", "sensor")
COUNTS_ABOVE = 2.0
"""Whole-number data whose peak is above this is taken for raw ADC counts, not fractions."""

_SENSITIVITY = re.compile(r"^\s*(?P<volts>[-+0-9.eE]+\s*[a-zA-Zµ]*?V)\s*/\s*(?P<unit>.+?)\s*$")


@dataclass(frozen=True)
class Sensitivity:
    """A sensor's output per unit of what it measures (``volts_per_unit`` V per ``unit``)."""

    volts_per_unit: float
    unit: str


def parse_sensitivity(text: str) -> Sensitivity:
    """Read a sensitivity written as VOLTAGE/UNIT: ``"100 mV/g"``, ``"10 V/(m/s)"``.

    Examples
    --------
    >>> parse_sensitivity("100 mV/g")
    Sensitivity(volts_per_unit=0.1, unit='g')
    >>> parse_sensitivity("10 V/(m/s)").unit
    'm/s'
    """
    match = _SENSITIVITY.match(text)
    if match is None:
        raise UserInputError(
            f"sensitivity {text!r} is not VOLTAGE/UNIT; write it as e.g. '100 mV/g' or '10 V/(m/s)'"
        )
    try:
        volts = units.parse_quantity(match["volts"].replace(" ", ""), "V")
    except ValueError as exc:
        raise UserInputError(f"sensitivity {text!r}: {exc}") from None
    unit = match["unit"]
    if unit.startswith("(") and unit.endswith(")"):
        unit = unit[1:-1].strip()
    if not (math.isfinite(volts) and volts > 0) or not unit:
        raise UserInputError(
            f"sensitivity {text!r} must be a positive voltage per unit; e.g. '100 mV/g'"
        )
    return Sensitivity(volts, unit)


@dataclass(frozen=True)
class Calibration:
    """How a recording's numbers map to dBFS and to the sensor's unit.

    Attributes
    ----------
    recorded_as : str
        One of :data:`RECORDED_AS`.
    full_scale : float
        Full scale (peak) in the recording's own numbers.
    to_unit : float or None
        Factor from the recording's numbers to the sensor's unit; None when unknown.
    unit : str
        The sensor's unit (``"FS"`` when only dBFS is known).
    guessed_counts : bool
        The data were recognised as raw counts (not declared).
    """

    recorded_as: str
    full_scale: float
    to_unit: float | None
    unit: str
    guessed_counts: bool = False

    def dbfs(self, power: float) -> float:
        """Level in dBFS of a power (recording's unit squared): 10 log10(2 P / FS^2)."""
        return 10 * math.log10(max(2 * power / self.full_scale**2, 1e-30))

    def peak_in_unit(self, power: float) -> float | None:
        """Peak amplitude sqrt(2 P) of a sine of that power in the sensor's unit."""
        return None if self.to_unit is None else math.sqrt(2 * power) * self.to_unit

    def describe(self) -> str:
        """One line: what the numbers are and what full scale is."""
        what = {
            "fraction": "fractions of full scale",
            "counts": "raw ADC counts",
            "volts": "volts",
            "sensor": f"the sensor's unit ({self.unit})",
        }[self.recorded_as]
        unit = f"; levels also in {self.unit}" if self.to_unit is not None else ""
        return f"values are {what}, full scale {self.full_scale:g}{unit}"


def make_calibration(
    recorded_as: str,
    *,
    bits: int,
    full_scale_v: float | None,
    sensitivity: Sensitivity | None,
    guessed: bool = False,
) -> Calibration:
    """The calibration for one kind of number.

    Parameters
    ----------
    recorded_as : str
        One of :data:`RECORDED_AS`.
    bits : int
        ADC resolution (full scale of counts is 2^(bits - 1)).
    full_scale_v : float or None
        The ADC's full-scale voltage (peak).
    sensitivity : Sensitivity or None
    guessed : bool
        ``recorded_as`` is "counts" because the data looked like counts.

    Raises
    ------
    UserInputError
        Volts without a full-scale voltage; the sensor's unit without both.
    """
    v = full_scale_v
    s = sensitivity
    unit = s.unit if s is not None else "FS"
    if recorded_as == "fraction":
        to_unit = v / s.volts_per_unit if v is not None and s is not None else None
        return Calibration("fraction", 1.0, to_unit, unit)
    if recorded_as == "counts":
        fs = float(2 ** (bits - 1))
        to_unit = v / fs / s.volts_per_unit if v is not None and s is not None else None
        return Calibration("counts", fs, to_unit, unit, guessed)
    if v is None:
        raise UserInputError(
            f"values recorded as {recorded_as} need the ADC's full-scale voltage; give "
            "--full-scale, e.g. '2.4 V'"
        )
    if recorded_as == "volts":
        return Calibration("volts", v, None if s is None else 1 / s.volts_per_unit, unit)
    if s is None:
        raise UserInputError(
            "values recorded in the sensor's unit need its sensitivity; give --sensitivity, "
            "e.g. '100 mV/g'"
        )
    return Calibration("sensor", v / s.volts_per_unit, 1.0, unit)


def looks_like_counts(block: np.ndarray) -> float | None:
    """The peak of whole-number data far above 1.0 (raw ADC counts), else None."""
    peak = float(np.max(np.abs(block))) if block.size else 0.0
    if peak > COUNTS_ABOVE and np.array_equal(block, np.round(block)):
        return peak
    return None
