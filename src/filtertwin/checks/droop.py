"""What an anti-alias filter does to the band it is meant to pass.

A filter that meets its stopband requirement by eating the band of interest has not solved
anything: the check reports the analog as-built model's gain, phase and group delay at the
band edge and the largest droop over the band (the largest departure from the passband gain:
a loss, or the rise of a peaking response such as an even-order Chebyshev), and fails when
the droop exceeds a limit or the band reaches beyond the filter's passband.

The default limit, :data:`DEFAULT_MAX_DROOP_DB` (3 dB), is the conventional edge of a
passband (half power, where a Butterworth or Bessel filter's corner is defined): a band
whose edge is more than 3 dB down lies beyond the filter's corner. An instrument with an
amplitude-accuracy specification sets its own, e.g. 0.1 dB.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from filtertwin.checks.tolerance import passband_edges_hz
from filtertwin.circuit.design import Filter
from filtertwin.errors import UserInputError

__all__ = ["DEFAULT_MAX_DROOP_DB", "Droop", "band_within_droop", "passband_droop"]

DEFAULT_MAX_DROOP_DB = 3.0
GRID_POINTS = 2000


@dataclass(frozen=True)
class Droop:
    """The band of interest as the analog as-built model passes it.

    Attributes
    ----------
    band_hz : float
        Top of the band of interest.
    edge_gain_db, edge_phase_deg, edge_delay_s : float
        Gain (dB re passband gain), phase (degrees, unwrapped from low frequency) and group
        delay at the band edge.
    max_droop_db : float
        Largest departure from the passband gain over the band (dB, >= 0): a loss, or a
        rise where the response peaks (Chebyshev ripple of even order).
    max_droop_at_hz : float
        Where it is.
    limit_db : float
        The largest droop allowed.
    passband_edge_hz : float
        The filter's passband edge (its corner, or its -3 dB point for given parts).
    within_passband : bool
        The band ends at or below the passband edge.
    """

    band_hz: float
    edge_gain_db: float
    edge_phase_deg: float
    edge_delay_s: float
    max_droop_db: float
    max_droop_at_hz: float
    limit_db: float
    passband_edge_hz: float
    within_passband: bool

    @property
    def passed(self) -> bool:
        return self.within_passband and self.max_droop_db <= self.limit_db

    def reason(self) -> str:
        """Why the band fails ("" when it passes)."""
        if not self.within_passband:
            return (
                f"the band (to {self.band_hz:.5g} Hz) reaches beyond the filter's passband "
                f"edge {self.passband_edge_hz:.5g} Hz"
            )
        if self.max_droop_db > self.limit_db:
            return (
                f"the band departs {self.max_droop_db:.2f} dB from the passband gain (at "
                f"{self.max_droop_at_hz:.5g} Hz), "
                f"more than the {self.limit_db:g} dB allowed (--max-droop)"
            )
        return ""

    def to_dict(self) -> dict[str, Any]:
        return {
            "band_hz": self.band_hz,
            "edge_gain_db": self.edge_gain_db,
            "edge_phase_deg": self.edge_phase_deg,
            "edge_group_delay_s": self.edge_delay_s,
            "max_droop_db": self.max_droop_db,
            "max_droop_at_hz": self.max_droop_at_hz,
            "max_droop_limit_db": self.limit_db,
            "passband_edge_hz": self.passband_edge_hz,
            "within_passband": self.within_passband,
            "pass": self.passed,
        }


def _band_grid(lo_hz: float, hi_hz: float) -> np.ndarray:
    start = lo_hz if lo_hz > 0 else hi_hz * 1e-4
    return np.union1d(
        np.geomspace(start, hi_hz, GRID_POINTS), np.linspace(start, hi_hz, GRID_POINTS)
    )


def _gain_db(filt: Filter, f_hz: np.ndarray) -> np.ndarray:
    h = filt.frequency_response(f_hz)
    return 20 * np.log10(np.maximum(np.abs(h), 1e-300) / abs(filt.passband_gain))


def passband_droop(filt: Filter, band_hz: float, limit_db: float = DEFAULT_MAX_DROOP_DB) -> Droop:
    """Droop of the analog as-built model over ``[passband start, band_hz]``.

    Raises
    ------
    UserInputError
        A limit that is not a positive number of dB.
    """
    if not (math.isfinite(limit_db) and limit_db > 0):
        raise UserInputError(f"droop limit {limit_db:g} dB must be positive; give --max-droop 3")
    lo, hi = passband_edges_hz(filt)
    grid = _band_grid(lo, band_hz)
    loss = np.abs(_gain_db(filt, grid))
    i = int(np.argmax(loss))
    edge = np.array([band_hz])
    h = filt.frequency_response(grid)
    phase = np.degrees(np.unwrap(np.angle(h * np.sign(filt.passband_gain))))
    return Droop(
        band_hz=float(band_hz),
        edge_gain_db=float(_gain_db(filt, edge)[0]),
        edge_phase_deg=float(phase[-1]),
        edge_delay_s=float(filt.group_delay_s(edge)[0]),
        max_droop_db=float(loss[i]),
        max_droop_at_hz=float(grid[i]),
        limit_db=float(limit_db),
        passband_edge_hz=float(hi),
        within_passband=bool(band_hz <= hi * (1 + 1e-9)),
    )


def band_within_droop(filt: Filter, limit_db: float, cap_hz: float) -> float:
    """Highest frequency up to which the model droops no more than ``limit_db``, at most the
    passband edge and ``cap_hz`` (the default band of interest)."""
    lo, hi = passband_edges_hz(filt)
    top = min(hi, cap_hz)
    grid = _band_grid(lo, top)
    loss = np.abs(_gain_db(filt, grid))
    start = int(np.argmin(loss))
    over = np.nonzero(loss[start:] > limit_db)[0]
    if not len(over):
        return float(top)
    return float(grid[start + max(int(over[0]) - 1, 0)])
