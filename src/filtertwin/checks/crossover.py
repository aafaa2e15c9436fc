"""Crossover check: how the ways of a 2- or 3-way crossover add up.

Every way filters the same input; the drivers' outputs add acoustically. With ideal drivers
at the same distance the sum is the complex sum of the ways' responses, polarity included.
This module takes the ways as responses (functions of frequency), so the same arithmetic
runs on a design's exact analog as-built model and on textbook prototypes in the tests.

References
----------
S. H. Linkwitz, "Active Crossover Networks for Noninteracting Drivers", J. Audio Eng. Soc.
24(1), 1976.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.optimize

from filtertwin.circuit.design import Design, Filter
from filtertwin.errors import UserInputError

__all__ = [
    "CrossoverCheck",
    "CrossoverPoint",
    "PolarityAdvice",
    "analyse_ways",
    "check_crossover",
    "crossover_frequency",
    "order_ways",
]

Response = Callable[[np.ndarray], np.ndarray]
"""Complex frequency response as a function of frequency in Hz."""

DEFAULT_BAND_HZ = (20.0, 20000.0)
DEFAULT_TOLERANCE_DB = 1.0
GRID_POINTS = 2400
SEARCH_SPAN = 10.0
"""Crossover frequencies are searched from band low / 10 to band high x 10."""
ADVICE_THRESHOLD_DB = 0.1
"""A polarity change is advised only when it improves the largest deviation this much."""
SMALLEST_REPORTED_DB = 0.001
"""A smaller improvement from the other polarity is not worth a word (numerical noise)."""
QUADRATURE_TOL_DEG = 5.0
"""Ways this close to 90 degrees apart at every crossover are in quadrature."""
FLOOR_DB = -300.0
POLARITY_WORDS = {1: "normal", -1: "inverted"}
_RANK = {"lowpass": 0, "bandpass": 1, "highpass": 2}


@dataclass(frozen=True)
class CrossoverPoint:
    """Where two adjacent ways have equal level.

    Attributes
    ----------
    lower, upper : str
        The ways' names.
    f_hz : float
    level_db : float
        Each way's level there, relative to the reference level.
    sum_db : float
        The sum of all ways there, relative to the reference level.
    phase_diff_deg : float
        Phase of the lower way minus the upper way, wrapped to (-180, 180].
    """

    lower: str
    upper: str
    f_hz: float
    level_db: float
    sum_db: float
    phase_diff_deg: float


@dataclass(frozen=True)
class PolarityAdvice:
    """The best polarity of every way for the flattest sum.

    Attributes
    ----------
    ways : tuple of str
    current, best : tuple of int
        +1 (normal) or -1 (inverted) per way.
    current_dev_db, best_dev_db : float
        Largest deviation of the sum from the reference level with each choice.
    improvement_db : float
        ``current_dev_db - best_dev_db``.
    invert : tuple of str
        Ways whose polarity should change (empty when the current choice is best, within
        0.1 dB).
    quadrature : bool
        The ways meet 90 degrees apart at every crossover (odd-order Butterworth ways): both
        polarities then sum to a flat magnitude (Linkwitz 1976).
    """

    ways: tuple[str, ...]
    current: tuple[int, ...]
    best: tuple[int, ...]
    current_dev_db: float
    best_dev_db: float
    improvement_db: float
    invert: tuple[str, ...]
    quadrature: bool = False

    def advice(self) -> str:
        """The advice in one sentence; any improvement is reported, however small."""
        note = (
            "; the ways meet 90 degrees apart, so both polarities sum flat (odd order)"
            if self.quadrature
            else ""
        )
        flatter = [n for n, a, b in zip(self.ways, self.current, self.best, strict=True) if a != b]
        if not self.invert and (not flatter or self.improvement_db < SMALLEST_REPORTED_DB):
            return f"keep the polarities as they are: no other choice gives a flatter sum{note}"
        if not self.invert:
            names = " and ".join(f"'{n}'" for n in flatter)
            return (
                f"keep the polarities, or invert {names} for a slightly flatter sum (largest "
                f"deviation {self.current_dev_db:.3f} -> {self.best_dev_db:.3f} dB){note}"
            )
        names = " and ".join(f"'{n}'" for n in self.invert)
        return (
            f"invert the polarity of {names}: the largest deviation drops from "
            f"{self.current_dev_db:.2f} dB to {self.best_dev_db:.2f} dB{note}"
        )

    def in_words(self, polarities: Sequence[int]) -> dict[str, str]:
        """Way name -> "normal" or "inverted"."""
        return {n: POLARITY_WORDS[p] for n, p in zip(self.ways, polarities, strict=True)}

    def to_dict(self) -> dict[str, Any]:
        return {
            "current": self.in_words(self.current),
            "best": self.in_words(self.best),
            "current_max_dev_db": self.current_dev_db,
            "best_max_dev_db": self.best_dev_db,
            "improvement_db": self.improvement_db,
            "invert": list(self.invert),
            "advice": self.advice(),
        }


@dataclass(frozen=True)
class CrossoverCheck:
    """Ways, their sum, crossover points and the verdict.

    Attributes
    ----------
    ways : tuple of str
        Ordered by frequency (low-pass way first, high-pass way last).
    f_hz : numpy.ndarray
        Frequency grid of ``responses`` and ``summed``: the band and one octave either side
        (for the figures), with the crossover frequencies included.
    responses : numpy.ndarray
        Complex response of each way, ``(ways, len(f_hz))``, polarity included.
    summed : numpy.ndarray
        Their complex sum.
    reference_db : float
        Level the sum is compared with (mean of the ways' passband gains in dB).
    band_hz : (float, float)
    max_dev_db, max_dev_at_hz : float
        Largest deviation of the sum from the reference level over the band, and where.
    tolerance_db : float
    crossovers : tuple of CrossoverPoint
    polarity : PolarityAdvice
    passed : bool
        ``max_dev_db <= tolerance_db``.
    """

    ways: tuple[str, ...]
    f_hz: np.ndarray
    responses: np.ndarray
    summed: np.ndarray
    reference_db: float
    band_hz: tuple[float, float]
    max_dev_db: float
    max_dev_at_hz: float
    tolerance_db: float
    crossovers: tuple[CrossoverPoint, ...]
    polarity: PolarityAdvice
    passed: bool

    @property
    def verdict(self) -> str:
        return "PASS" if self.passed else "FAIL"

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary (Hz, dB, degrees); the response arrays are left out."""
        return {
            "check": "crossover",
            "ways": list(self.ways),
            "crossovers": [
                {
                    "lower": c.lower,
                    "upper": c.upper,
                    "f_hz": c.f_hz,
                    "level_db": c.level_db,
                    "sum_db": c.sum_db,
                    "phase_diff_deg": c.phase_diff_deg,
                }
                for c in self.crossovers
            ],
            "sum": {
                "max_dev_db": self.max_dev_db,
                "at_hz": self.max_dev_at_hz,
                "band_hz": list(self.band_hz),
                "reference_db": self.reference_db,
                "tolerance_db": self.tolerance_db,
            },
            "polarity": self.polarity.to_dict(),
            "verdict": self.verdict,
            "pass": self.passed,
        }


def _db(h: np.ndarray) -> np.ndarray:
    return np.maximum(20 * np.log10(np.maximum(np.abs(h), 1e-300)), FLOOR_DB)


def crossover_frequency(lower: Response, upper: Response, lo_hz: float, hi_hz: float) -> float:
    """Frequency where two ways have equal magnitude, found numerically.

    Searches a log grid from ``lo_hz`` to ``hi_hz`` for sign changes of the level difference
    and refines the one where the two ways are loudest with Brent's method (on log f).

    Raises
    ------
    ValueError
        If the two magnitudes are never equal in the range.
    """
    grid = np.geomspace(lo_hz, hi_hz, GRID_POINTS)

    def diff(log_f: np.ndarray | float) -> np.ndarray:
        f = np.exp(np.atleast_1d(log_f))
        return _db(lower(f)) - _db(upper(f))

    d = diff(np.log(grid))
    idx = np.nonzero(np.sign(d[:-1]) * np.sign(d[1:]) <= 0)[0]
    if len(idx) == 0:
        raise ValueError("the magnitudes are never equal in the range searched")
    loudness = np.abs(lower(grid[idx])) + np.abs(upper(grid[idx]))
    i = int(idx[int(np.argmax(loudness))])
    a, b = math.log(grid[i]), math.log(grid[i + 1])
    if d[i] == 0:
        return float(grid[i])
    root = scipy.optimize.brentq(lambda v: float(diff(v)[0]), a, b, xtol=1e-14, rtol=1e-14)
    return float(math.exp(root))


def _max_dev(summed: np.ndarray, reference_db: float, f: np.ndarray) -> tuple[float, float]:
    dev = np.abs(_db(summed) - reference_db)
    i = int(np.argmax(dev))
    return float(dev[i]), float(f[i])


def analyse_ways(
    names: Sequence[str],
    responses: Sequence[Response],
    *,
    reference_db: float = 0.0,
    band_hz: tuple[float, float] = DEFAULT_BAND_HZ,
    tolerance_db: float = DEFAULT_TOLERANCE_DB,
    polarities: Sequence[int] | None = None,
) -> CrossoverCheck:
    """Sum, crossover points and polarity advice for ways ordered low to high.

    Parameters
    ----------
    names : sequence of str
        Way names, lowest way first.
    responses : sequence of callables
        Complex response of each way as a function of frequency in Hz, polarity included.
    reference_db : float
        The level a flat sum should have (dB).
    band_hz : (float, float)
        Band over which the sum is judged.
    tolerance_db : float
        Largest deviation that still passes.
    polarities : sequence of int, optional
        The current polarity (+1/-1) of each way, for reporting (default all +1).

    Returns
    -------
    CrossoverCheck

    Raises
    ------
    UserInputError
        Fewer than two ways, a bad band or tolerance, adjacent ways that never cross.

    References
    ----------
    S. H. Linkwitz, J. Audio Eng. Soc. 24(1), 1976.
    """
    if len(names) < 2:
        raise UserInputError(
            "a crossover needs at least two ways (filters); this design has "
            f"{len(names)}; add a filter per way to the design"
        )
    lo, hi = band_hz
    if not (0 < lo < hi and math.isfinite(hi)):
        raise UserInputError(f"band {lo:g} to {hi:g} Hz is not a range; give --band LO HI, LO < HI")
    if not (math.isfinite(tolerance_db) and tolerance_db > 0):
        raise UserInputError(f"tolerance {tolerance_db:g} dB must be positive; give --tolerance-db")
    current = tuple(polarities) if polarities is not None else (1,) * len(names)

    points = []
    for i in range(len(names) - 1):
        try:
            fc = crossover_frequency(
                responses[i], responses[i + 1], lo / SEARCH_SPAN, hi * SEARCH_SPAN
            )
        except ValueError:
            raise UserInputError(
                f"ways '{names[i]}' and '{names[i + 1]}' never reach equal level between "
                f"{lo / SEARCH_SPAN:g} and {hi * SEARCH_SPAN:g} Hz, so they do not cross over; "
                "check the corners of the filters"
            ) from None
        points.append(fc)

    band_grid = np.union1d(np.geomspace(lo, hi, GRID_POINTS), [p for p in points if lo <= p <= hi])
    h_band = np.array([r(band_grid) for r in responses])
    plot_grid = np.union1d(np.geomspace(lo / 2, hi * 2, GRID_POINTS), points)
    h_plot = np.array([r(plot_grid) for r in responses])

    signs = np.array(current, float)
    best, best_dev = current, math.inf
    for flips in itertools.product((1, -1), repeat=len(names) - 1):
        s = np.array((1, *flips), float)
        dev, _ = _max_dev((s[:, None] * h_band).sum(axis=0), reference_db, band_grid)
        if dev < best_dev - 1e-12:
            best, best_dev = tuple(int(v) for v in s * signs), dev
    cur_dev, cur_at = _max_dev(h_band.sum(axis=0), reference_db, band_grid)
    if cur_dev <= best_dev:
        best, best_dev = current, cur_dev
    invert: tuple[str, ...] = ()  # advised only when it helps by ADVICE_THRESHOLD_DB or more
    if cur_dev - best_dev >= ADVICE_THRESHOLD_DB:
        invert = tuple(n for n, a, b in zip(names, current, best, strict=True) if a != b)

    h_points = np.array([r(np.array(points)) for r in responses])  # (ways, crossovers)
    crossings = []
    for i, fc in enumerate(points):
        h_lo, h_hi = h_points[i, i], h_points[i + 1, i]
        total = h_points[:, i].sum()
        crossings.append(
            CrossoverPoint(
                names[i],
                names[i + 1],
                fc,
                float(_db(np.array([h_lo]))[0] - reference_db),
                float(_db(np.array([total]))[0] - reference_db),
                float(np.degrees(np.angle(h_lo / h_hi))),
            )
        )
    quadrature = all(abs(abs(c.phase_diff_deg) - 90.0) < QUADRATURE_TOL_DEG for c in crossings)
    advice = PolarityAdvice(
        tuple(names), current, best, cur_dev, best_dev, cur_dev - best_dev, invert, quadrature
    )
    return CrossoverCheck(
        ways=tuple(names),
        f_hz=plot_grid,
        responses=h_plot,
        summed=h_plot.sum(axis=0),
        reference_db=reference_db,
        band_hz=(float(lo), float(hi)),
        max_dev_db=cur_dev,
        max_dev_at_hz=cur_at,
        tolerance_db=float(tolerance_db),
        crossovers=tuple(crossings),
        polarity=advice,
        passed=bool(cur_dev <= tolerance_db),
    )


def _centre_hz(f: Filter) -> float:
    lo, hi = f.characteristic_hz()
    return math.sqrt(lo * hi)


def order_ways(filters: Sequence[Filter]) -> list[Filter]:
    """Ways ordered by frequency: low-pass ways, band-pass ways, high-pass ways, each by
    the geometric centre of their stage frequencies."""
    return sorted(filters, key=lambda f: (_RANK[f.response], _centre_hz(f)))


def check_crossover(
    design: Design,
    *,
    band_hz: tuple[float, float] = DEFAULT_BAND_HZ,
    tolerance_db: float = DEFAULT_TOLERANCE_DB,
    amplifier: bool = True,
) -> CrossoverCheck:
    """Check a design's filters as the ways of a crossover (exact analog as-built model).

    The reference level is the mean of the ways' passband gains in dB.

    Parameters
    ----------
    design : Design
    band_hz : (float, float)
        Band over which the sum must be flat (default 20 Hz to 20 kHz).
    tolerance_db : float
        Largest deviation of the sum that passes (default 1 dB).
    amplifier : bool
        Include the amplifier model (finite gain-bandwidth).

    Raises
    ------
    UserInputError
        A design with a single filter, a bad band or tolerance, ways that never cross.
    """
    if len(design.filters) < 2:
        raise UserInputError(
            f"{design.spec.source}: a crossover needs at least two filters (one per way), this "
            f"design has {len(design.filters)}; use a 2- or 3-way design"
        )
    ways = order_ways(design.filters)
    reference = float(np.mean([f.passband_db for f in ways]))

    def response_of(f: Filter) -> Response:
        return lambda f_hz: f.frequency_response(np.asarray(f_hz, float), amplifier)

    return analyse_ways(
        [f.name for f in ways],
        [response_of(f) for f in ways],
        reference_db=reference,
        band_hz=band_hz,
        tolerance_db=tolerance_db,
        polarities=[f.polarity for f in ways],
    )
