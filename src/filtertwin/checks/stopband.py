"""A digital twin that is right in the stopband where an anti-alias check measures it.

The bilinear transform squeezes the whole analog frequency axis below the twin's Nyquist
frequency, so deep in the stopband a twin at the recording's rate attenuates far more than
the circuit (a 6th-order Butterworth low-pass at 40 kHz, 13.6 kHz: 28 dB too much). What
an anti-alias check measures there is the folded power, so the twin must follow the analog
model over every frequency that folds into the band, down to the level the check needs:
the required attenuation plus :data:`MARGIN_DB`, or the model's own floor where that is
higher (both included automatically: every frequency where the model or the twin is above
that level is compared).

:func:`plan_oversampling` tries 1, 2, 4 ... :data:`MAX_FACTOR` times the recording's rate,
each with the interpolating FIR it runs between (:func:`resampling_taps`; its response is
part of the comparison), and keeps the first that stays within :data:`TOLERANCE_DB`; when
none does it says so and keeps the closest. :func:`run` filters a recording that way.

References
----------
A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed., 7.1.2 (bilinear
transform, frequency warping), 4.2 (aliasing), 4.6 (changing the rate by an integer factor).
J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window function", Proc.
IEEE ISCAS 1974 (the window of the interpolating FIR).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.signal

from filtertwin.checks.foldpower import fold_mask
from filtertwin.circuit.design import Design, Filter
from filtertwin.digital import twin as twin_mod

__all__ = ["StopbandPlan", "fold_grid", "plan_oversampling", "resampling_taps", "run"]

MARGIN_DB = 10.0
"""The twin must be right this far below the required attenuation."""
TOLERANCE_DB = 1.0
"""Largest twin-vs-model difference allowed there (dB)."""
MAX_FACTOR = 32
FACTORS = (1, 2, 4, 8, 16, 32)
ZERO_CROSSINGS = (16, 48, 96)
"""Lengths tried for the interpolating FIR (zero crossings each side of its centre)."""
FIR_BETA = 12.0
"""Kaiser beta of the interpolating FIR: about 120 dB stopband (Kaiser 1974)."""
GRID_POINTS = 400
"""Frequencies per folding interval."""
TOP_FRACTION = 0.95
"""The comparison stops at this fraction of the recording's Nyquist frequency: no
interpolating FIR is flat to its cut-off, and the recorder's own anti-alias filter makes the
top of the recording's band no measure of the circuit anyway."""


def fold_grid(rate_hz: float, adc_rate_hz: float, band_hz: float) -> np.ndarray:
    """Frequencies below the recording's Nyquist frequency that fold into the band.

    The intervals ``[k fs - band, k fs + band]`` (k >= 1) above the ADC's Nyquist frequency,
    ``GRID_POINTS`` each, up to :data:`TOP_FRACTION` of the recording's Nyquist frequency,
    plus the band of interest itself.
    """
    top = TOP_FRACTION * rate_hz / 2
    parts = [np.linspace(band_hz / GRID_POINTS, band_hz, GRID_POINTS)]
    k = 1
    while k * adc_rate_hz - band_hz < top:
        lo = max(k * adc_rate_hz - band_hz, adc_rate_hz / 2)
        hi = min(k * adc_rate_hz + band_hz, top)
        if hi > lo:
            parts.append(np.linspace(lo, hi, GRID_POINTS))
        k += 1
    return np.concatenate(parts)


def resampling_taps(factor: int, zero_crossings: int) -> np.ndarray:
    """Interpolating FIR for ``factor`` times the rate: Kaiser-windowed sinc, cut-off at the
    low rate's Nyquist frequency, gain ``factor`` (Oppenheim & Schafer 4.6)."""
    n = 2 * zero_crossings * factor + 1
    return scipy.signal.firwin(n, 1.0 / factor, window=("kaiser", FIR_BETA)) * factor


def _fir_gain(taps: np.ndarray, f_hz: np.ndarray, rate_hz: float, factor: int) -> np.ndarray:
    """|H(f)| of a linear-phase FIR at ``rate_hz`` (delay removed), divided by ``factor``."""
    _, h = scipy.signal.freqz(taps, worN=f_hz, fs=rate_hz)
    return np.abs(h) / factor


@dataclass(frozen=True)
class StopbandPlan:
    """The oversampling an anti-alias check runs its twin at, and how right it is.

    Attributes
    ----------
    factor : int
        Oversampling factor.
    zero_crossings : int
        Length of the interpolating FIR (0 at 1x).
    sos : numpy.ndarray
        The twin's sections at ``factor`` times the recording's rate.
    level_db : float
        The twin is compared wherever the model or the twin is above ``-level_db`` dB re
        passband (required attenuation plus the margin).
    stopband_db : float
        Largest |twin - model| in dB over the folding frequencies, where compared.
    stopband_at_hz : float
        Where that is.
    passband_db, passband_deg : float
        Largest magnitude and phase difference over the band of interest.
    reached : bool
        ``stopband_db`` is within :data:`TOLERANCE_DB`.
    largest_factor : int
        The largest factor tried.
    """

    factor: int
    zero_crossings: int
    sos: np.ndarray
    level_db: float
    stopband_db: float
    stopband_at_hz: float
    passband_db: float
    passband_deg: float
    reached: bool
    largest_factor: int = MAX_FACTOR

    def to_dict(self) -> dict[str, Any]:
        return {
            "oversampling": self.factor,
            "resampler_zero_crossings": self.zero_crossings,
            "stopband": {
                "max_deviation_db": self.stopband_db,
                "at_hz": self.stopband_at_hz,
                "down_to_db": -self.level_db,
                "tolerance_db": TOLERANCE_DB,
                "within": self.reached,
                "largest_factor_tried": self.largest_factor,
            },
            "passband": {
                "max_deviation_db": self.passband_db,
                "max_deviation_deg": self.passband_deg,
            },
        }

    def describe(self) -> str:
        """One line for the check's text."""
        where = (
            f"stopband within {self.stopband_db:.2f} dB of the analog model down to "
            f"-{self.level_db:.0f} dB"
            if self.reached
            else f"NO factor up to {self.largest_factor}x keeps the stopband within "
            f"{TOLERANCE_DB:g} dB down to -{self.level_db:.0f} dB: off by "
            f"{self.stopband_db:.1f} dB at {self.stopband_at_hz:.5g} Hz, so 'with filter' "
            "figures there are not the circuit's"
        )
        return (
            f"twin at {self.factor}x: {where}; band of interest within "
            f"{self.passband_db:.3f} dB / {self.passband_deg:.2f} deg"
        )


def twin_response(
    sos: np.ndarray, taps: np.ndarray | None, f_hz: np.ndarray, rate_hz: float, factor: int
) -> np.ndarray:
    """Complex response of the twin at ``factor`` x ``rate_hz`` between its two FIRs."""
    run_rate = rate_hz * factor
    _, h = scipy.signal.sosfreqz(sos, worN=f_hz, fs=run_rate)
    if taps is not None:
        h = h * _fir_gain(taps, f_hz, run_rate, factor) ** 2
    return h


def _deviations(
    filt: Filter, h_twin: np.ndarray, h_model: np.ndarray, level_db: float
) -> tuple[np.ndarray, np.ndarray]:
    """|twin - model| in dB, and where it counts (either above ``-level_db`` re passband)."""
    ref = abs(filt.passband_gain)
    g_t = 20 * np.log10(np.maximum(np.abs(h_twin), 1e-300) / ref)
    g_m = 20 * np.log10(np.maximum(np.abs(h_model), 1e-300) / ref)
    return np.abs(g_t - g_m), (g_t >= -level_db) | (g_m >= -level_db)


def plan_oversampling(
    design: Design,
    filt: Filter,
    rate_hz: float,
    adc_rate_hz: float,
    band_hz: float,
    required_db: float,
    *,
    factors: tuple[int, ...] = FACTORS,
) -> StopbandPlan:
    """The smallest oversampling whose twin follows the model over the folding frequencies.

    Parameters
    ----------
    design, filt : Design, Filter
        The anti-alias filter.
    rate_hz, adc_rate_hz, band_hz : float
        The recording's rate, the ADC's rate and the top of the band of interest.
    required_db : float
        The attenuation the check requires; the twin is compared down to it plus
        :data:`MARGIN_DB`.
    factors : tuple of int
        Factors tried, in order.

    Returns
    -------
    StopbandPlan
        The first factor within :data:`TOLERANCE_DB`, else the closest (``reached`` False).
    """
    level = required_db + MARGIN_DB
    grid = fold_grid(rate_hz, adc_rate_hz, band_hz)
    folding = fold_mask(grid, adc_rate_hz, band_hz)
    inside = grid <= band_hz
    use_amp = design.amplifier is not None
    h_model = filt.frequency_response(grid, use_amp)
    best: StopbandPlan | None = None
    nyquist = rate_hz / 2
    for factor in factors:
        if max(s.built.f0_hz for s in filt.stages) >= nyquist * factor:
            continue
        twin = twin_mod.build_twin(design, rate_hz, oversampling=factor, filters=[filt.name],
                                   band_hz=(band_hz / GRID_POINTS, band_hz))  # fmt: skip
        sos = twin.filters[0].sos
        for zc in ZERO_CROSSINGS if factor > 1 else (0,):
            taps = resampling_taps(factor, zc) if factor > 1 else None
            h = twin_response(sos, taps, grid, rate_hz, factor)
            dev, counts = _deviations(filt, h, h_model, level)
            sel = folding & counts
            i = int(np.argmax(np.where(sel, dev, -1.0))) if sel.any() else 0
            worst = float(dev[i]) if sel.any() else 0.0
            ratio = h[inside] / h_model[inside]
            plan = StopbandPlan(
                factor=factor,
                zero_crossings=zc,
                sos=sos,
                level_db=level,
                stopband_db=worst,
                stopband_at_hz=float(grid[i]) if sel.any() else math.nan,
                passband_db=float(np.max(np.abs(20 * np.log10(np.abs(ratio))))),
                passband_deg=float(np.max(np.abs(np.degrees(np.angle(ratio))))),
                reached=worst <= TOLERANCE_DB,
                largest_factor=max(factors),
            )
            if plan.reached:
                return plan
            if best is None or plan.stopband_db < best.stopband_db:
                best = plan
    if best is None:
        raise ValueError("no oversampling factor puts the filter's stages below Nyquist")
    return best


def run(plan: StopbandPlan, samples: np.ndarray) -> np.ndarray:
    """Filter a 1-D recording with the planned twin; same length and rate as ``samples``.

    Oversampled: zero-stuffed and interpolated by the plan's FIR, filtered, filtered again
    by the same FIR and every ``factor``-th sample kept, the FIR's delay removed.
    """
    x = np.asarray(samples, float)
    if plan.factor == 1:
        return scipy.signal.sosfilt(plan.sos, x)
    factor = plan.factor
    taps = resampling_taps(factor, plan.zero_crossings)
    delay = (len(taps) - 1) // 2
    up = scipy.signal.upfirdn(taps, x, factor)[delay : delay + len(x) * factor]
    y = scipy.signal.sosfilt(plan.sos, up)
    skip = delay // factor
    return np.asarray(scipy.signal.upfirdn(taps / factor, y, 1, factor)[skip : skip + len(x)])
