"""Short-time aliased power: what an ideal ADC folds into the band, one short window at a time.

A window of ``frames`` samples (Hann, mean removed) is transformed once; the bins above the
ADC's Nyquist frequency whose alias ``|f - k fs|`` lands inside the band of interest
(Oppenheim & Schafer 4.2) hold the power that would fold. The strongest such bin, refined by
a parabola through the log powers of it and its neighbours, gives the event's frequency.
:class:`EventKeeper` and :class:`PooledSeries` keep the worst events and the power over time
in memory that does not grow with the length of the file.

References
----------
A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed., section 4.2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from filtertwin.checks.alias import alias_frequency

__all__ = ["WINDOW_S", "EventKeeper", "PooledSeries", "WindowPlan", "plan_windows"]

WINDOW_S = 0.1
"""Wanted window length in seconds; the window is the power of two of frames nearest it."""
SERIES_POINTS = 512
"""The power over time is kept at 512 to 1024 points (each the worst of its windows)."""


@dataclass(frozen=True)
class WindowPlan:
    """One window length and the bins that fold into the band.

    Attributes
    ----------
    rate_hz, adc_rate_hz, band_hz : float
    frames : int
        Samples per window (a power of two).
    f_hz : numpy.ndarray
        Bin frequencies of the one-sided spectrum.
    folds : numpy.ndarray
        Bool mask: above the ADC's Nyquist frequency and landing inside the band.
    in_band : numpy.ndarray
        Bool mask: 0 < f <= band.
    """

    rate_hz: float
    adc_rate_hz: float
    band_hz: float
    frames: int
    f_hz: np.ndarray
    folds: np.ndarray
    in_band: np.ndarray
    taper: np.ndarray
    scale: float

    @property
    def seconds(self) -> float:
        return self.frames / self.rate_hz

    def powers(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Folding power, in-band power (unit^2) and the strongest folding frequency (Hz) of
        consecutive windows, all transformed at once (one call per block, not per window).

        Parameters
        ----------
        x : numpy.ndarray
            ``(windows, frames, channels)``.

        Returns
        -------
        fold, in_band, source_hz : numpy.ndarray
            ``(windows, channels)``. A sine of amplitude A wholly in the folding bins gives
            ``fold`` = A^2 / 2.
        """
        rows = np.ascontiguousarray(x.transpose(0, 2, 1))  # (windows, channels, frames)
        y = (rows - rows.mean(axis=2, keepdims=True)) * self.taper
        p = np.abs(np.fft.rfft(y, axis=2)) ** 2 * self.scale
        fold = p[..., self.folds].sum(axis=2)
        in_band = p[..., self.in_band].sum(axis=2)
        k = np.where(self.folds, p, -1.0).argmax(axis=2)
        return fold, in_band, self._refine(p, k)

    def _refine(self, p: np.ndarray, k: np.ndarray) -> np.ndarray:
        """The strongest bins ``k`` moved by a parabola through the log powers of each and its
        neighbours (at most half a bin; bins at the ends or beside a zero stay put)."""
        df = float(self.f_hz[1] - self.f_hz[0])
        inner = np.clip(k, 1, p.shape[2] - 2)[..., np.newaxis]
        a, b, c = (np.take_along_axis(p, inner + d, axis=2)[..., 0] for d in (-1, 0, 1))
        usable = (k == inner[..., 0]) & (np.minimum(np.minimum(a, b), c) > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            la, lb, lc = (np.log(np.where(usable, v, 1.0)) for v in (a, b, c))
            den = la - 2 * lb + lc
            shift = np.where(usable & (den < 0), 0.5 * (la - lc) / den, 0.0)
        return self.f_hz[k] + np.clip(shift, -0.5, 0.5) * df


def plan_windows(rate_hz: float, adc_rate_hz: float, band_hz: float) -> WindowPlan:
    """The window (power of two nearest :data:`WINDOW_S`) and its folding bins.

    Examples
    --------
    >>> plan = plan_windows(51200.0, 8000.0, 2000.0)
    >>> plan.frames, float(plan.f_hz[1])
    (4096, 12.5)
    """
    frames = 2 ** max(6, round(math.log2(rate_hz * WINDOW_S)))
    f = np.fft.rfftfreq(frames, 1 / rate_hz)
    folds = (f > adc_rate_hz / 2) & (alias_frequency(f, adc_rate_hz) <= band_hz)
    in_band = (f > 0) & (f <= band_hz)
    taper = np.hanning(frames + 1)[:-1]  # periodic Hann
    scale = 2.0 / (frames * float(np.sum(taper**2)))
    return WindowPlan(rate_hz, adc_rate_hz, band_hz, frames, f, folds, in_band, taper, scale)


@dataclass(frozen=True)
class Event:
    """One window's folding power (unit^2) at ``time_s`` (window centre) and its strongest
    frequency ``source_hz``."""

    time_s: float
    power: float
    source_hz: float


class EventKeeper:
    """The ``count`` strongest windows, no two closer than ``gap_s`` (the stronger stays)."""

    def __init__(self, count: int, gap_s: float) -> None:
        self.count = count
        self.gap_s = gap_s
        self.events: list[Event] = []

    def offer(self, event: Event) -> None:
        kept = self.events
        if len(kept) >= self.count and event.power <= kept[-1].power:
            return
        near = [e for e in kept if abs(e.time_s - event.time_s) < self.gap_s]
        if any(e.power >= event.power for e in near):
            return
        kept = [e for e in kept if e not in near] + [event]
        kept.sort(key=lambda e: (-e.power, e.time_s))
        self.events = kept[: self.count]


class PooledSeries:
    """A value per window kept at :data:`SERIES_POINTS` to twice that many points: when full,
    neighbours are pooled pairwise (their maximum) and each point covers twice the windows."""

    def __init__(self, window_s: float) -> None:
        self.window_s = window_s
        self.group = 1
        self.points: list[np.ndarray] = []
        self._pending: np.ndarray | None = None
        self._in_pending = 0

    def add(self, value: np.ndarray) -> None:
        v = np.asarray(value, float)
        self._pending = v if self._pending is None else np.maximum(self._pending, v)
        self._in_pending += 1
        if self._in_pending == self.group:
            self.points.append(self._pending)
            self._pending, self._in_pending = None, 0
            if len(self.points) >= 2 * SERIES_POINTS:
                pairs = zip(self.points[0::2], self.points[1::2], strict=True)
                self.points = [np.maximum(a, b) for a, b in pairs]
                self.group *= 2

    @property
    def step_s(self) -> float:
        """Seconds covered by each point."""
        return self.group * self.window_s

    def values(self) -> np.ndarray:
        """``(points, channels)``; a last, partly filled point included."""
        pts = self.points + ([self._pending] if self._pending is not None else [])
        return np.array(pts) if pts else np.zeros((0, 0))
