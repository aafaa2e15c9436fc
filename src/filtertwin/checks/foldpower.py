"""Power that an ADC folds into its band, measured from a recording's spectrum.

The spectrum is a Welch average whose resolution and window are chosen from the recording
and the check (:func:`plan_spectrum`): segments long enough for a bin well under a
hundredth of the band (as long as the recording allows at least four half-overlapping
segments), and a Kaiser window whose highest sidelobe lies below the dynamic range the check
must see, so that window leakage from strong in-band content does not pass for aliases.

Distinct tones above the ADC's Nyquist frequency are found as peaks, their frequency refined
between bins by a parabola through the logarithm of the three highest bins (the Kaiser main
lobe is close to a Gaussian, for which this is exact), and their power summed over the main
lobe less the local noise floor. The power folding into the band is the sum of the tones
whose refined alias lies in the band plus the noise in the folding bins, the tones' own bins
replaced by the local floor: it can never be below its largest component.

References
----------
P. D. Welch, IEEE Trans. Audio Electroacoust. AU-15, 1967 (the averaged periodogram).
J. F. Kaiser, R. W. Schafer, "On the use of the I0-sinh window for spectrum analysis", IEEE
Trans. ASSP 28(1), 1980 (beta for a given sidelobe level; main-lobe width).
A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed., 4.2 (aliasing).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.ndimage
import scipy.signal

__all__ = [
    "FoldedPower",
    "SpectrumPlan",
    "Tone",
    "alias_frequency",
    "find_tones",
    "folded_power",
    "fold_mask",
    "kaiser_beta",
    "plan_spectrum",
    "spectrum",
]

BINS_PER_BAND = 200
"""Wanted bins across the band of interest (a bin well under a hundredth of it)."""
MIN_SEGMENTS = 4
"""At least this many half-overlapping segments are averaged (noise would look like tones)."""
MIN_SEGMENT_FRAMES = 64
MAX_SEGMENT_FRAMES = 2**21
MIN_SIDELOBE_DB = 60.0
MAX_SIDELOBE_DB = 220.0
PEAK_PROMINENCE_DB = 10.0
"""A tone stands this far above its surroundings ..."""
PEAK_ABOVE_FLOOR_DB = 15.0
"""... and this far above the local noise floor (median over about 100 bins)."""
FLOOR_LOBES = 12
"""The local floor is the median over this many main-lobe widths (at least 101 bins)."""


def alias_frequency(f_hz: np.ndarray | float, adc_rate_hz: float) -> np.ndarray:
    """Where a sampler at ``adc_rate_hz`` puts frequency ``f_hz``: ``|f - k fs|`` in [0, fs/2].

    References
    ----------
    A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed., 4.2.

    Examples
    --------
    >>> float(alias_frequency(6700.0, 8000.0)), float(alias_frequency(13100.0, 8000.0))
    (1300.0, 2900.0)
    """
    r = np.mod(np.abs(np.asarray(f_hz, float)), adc_rate_hz)
    return np.minimum(r, adc_rate_hz - r)


def fold_mask(f_hz: np.ndarray, adc_rate_hz: float, band_hz: float) -> np.ndarray:
    """True where a frequency is above the ADC's Nyquist frequency and folds into the band."""
    f = np.asarray(f_hz, float)
    return (f > adc_rate_hz / 2) & (alias_frequency(f, adc_rate_hz) <= band_hz)


def kaiser_beta(sidelobe_db: float) -> float:
    """Kaiser window beta whose highest sidelobe is ``sidelobe_db`` below the main lobe.

    ``0.12438 (A + 6.3)``, given for 60 to 120 dB and found within 2 dB of the numerical
    window spectrum up to 200 dB (see the tests).

    References
    ----------
    J. F. Kaiser, R. W. Schafer, IEEE Trans. ASSP 28(1), 1980, eq. (13).
    """
    return 0.12438 * (sidelobe_db + 6.3)


@dataclass(frozen=True)
class SpectrumPlan:
    """How a spectrum is estimated.

    Attributes
    ----------
    segment_frames : int
        Welch segment length (50 % overlap).
    bin_hz : float
        Bin spacing, ``rate / segment_frames``.
    sidelobe_db : float
        The window's highest sidelobe below its main lobe (the dynamic range it can show).
    beta : float
        Kaiser window parameter.
    lobe_bins : int
        Half-width of the main lobe in bins (to its first null, rounded up).
    limited_by_length : bool
        The recording was too short for the wanted resolution.
    """

    segment_frames: int
    bin_hz: float
    sidelobe_db: float
    beta: float
    lobe_bins: int
    limited_by_length: bool

    def to_dict(self) -> dict[str, float | int | bool | str]:
        return {
            "segment_frames": self.segment_frames,
            "bin_hz": self.bin_hz,
            "window": "kaiser",
            "kaiser_beta": self.beta,
            "sidelobe_db": self.sidelobe_db,
            "limited_by_length": self.limited_by_length,
        }


def plan_spectrum(
    frames: int, rate_hz: float, band_hz: float, dynamic_range_db: float
) -> SpectrumPlan:
    """Resolution and window for a recording.

    Parameters
    ----------
    frames : int
        Length of the recording.
    rate_hz : float
        Its rate.
    band_hz : float
        Top of the band of interest: the bin aims at ``band_hz / 200``.
    dynamic_range_db : float
        How far below the strongest content the spectrum must see (window sidelobes).

    Examples
    --------
    >>> p = plan_spectrum(6000, 100.0, 5.0, 150.0)
    >>> p.segment_frames, round(p.bin_hz, 4), round(p.beta, 2)
    (2400, 0.0417, 19.44)
    """
    want = math.ceil(rate_hz / (band_hz / BINS_PER_BAND))
    most = (2 * frames) // (MIN_SEGMENTS + 1)
    n = int(min(want, most, MAX_SEGMENT_FRAMES))
    n = max(min(n, frames), min(MIN_SEGMENT_FRAMES, frames))
    sidelobe = float(min(max(dynamic_range_db, MIN_SIDELOBE_DB), MAX_SIDELOBE_DB))
    beta = kaiser_beta(sidelobe)
    lobe = math.ceil(math.sqrt(1 + (beta / math.pi) ** 2))
    return SpectrumPlan(n, rate_hz / n, sidelobe, beta, lobe, bool(most < want))


def spectrum(
    samples: np.ndarray, rate_hz: float, plan: SpectrumPlan
) -> tuple[np.ndarray, np.ndarray]:
    """One-sided Welch PSD (unit^2/Hz, mean removed per segment) with the plan's window.

    ``sum(p) * df`` is the signal's variance (Parseval).

    References
    ----------
    P. D. Welch 1967; ``scipy.signal.welch``.
    """
    n = min(plan.segment_frames, len(samples))
    return scipy.signal.welch(
        samples, fs=rate_hz, window=("kaiser", plan.beta), nperseg=n, noverlap=n // 2
    )


@dataclass(frozen=True)
class Tone:
    """A distinct component found in a spectrum.

    Attributes
    ----------
    f_hz : float
        Frequency refined between bins.
    bin : int
        The highest bin.
    power : float
        Power in unit^2 (main lobe less the local floor).
    lobe : slice
        The bins of its main lobe.
    """

    f_hz: float
    bin: int
    power: float
    lobe: slice


def local_floor(p: np.ndarray, plan: SpectrumPlan) -> np.ndarray:
    """Median of the PSD around every bin (over about 12 main-lobe widths)."""
    size = max(101, 2 * FLOOR_LOBES * plan.lobe_bins + 1)
    return np.exp(scipy.ndimage.median_filter(np.log(np.maximum(p, 1e-300)), size=size,
                                              mode="nearest"))  # fmt: skip


def _refine(p: np.ndarray, i: int) -> float:
    """Offset in bins of the true peak from bin ``i``: parabola through log p at i-1, i, i+1."""
    if i == 0 or i == len(p) - 1:
        return 0.0
    a, b, c = np.log(np.maximum(p[i - 1 : i + 2], 1e-300))
    den = a - 2 * b + c
    return 0.0 if den >= 0 else float(np.clip(0.5 * (a - c) / den, -0.5, 0.5))


def lobe_power(p: np.ndarray, floor: np.ndarray, lobe: slice, df: float) -> float:
    """Power in a main lobe less the floor under it (0 when the floor is all there is)."""
    return float(max((p[lobe] - floor[lobe]).sum(), 0.0) * df)


def find_tones(
    f: np.ndarray, p: np.ndarray, plan: SpectrumPlan, above_hz: float
) -> tuple[tuple[Tone, ...], np.ndarray]:
    """Distinct tones above ``above_hz``, strongest first, and the local floor.

    A tone is a peak at least 10 dB prominent and 15 dB above the local floor; its
    frequency is refined between bins (:func:`_refine`), its power summed over its main lobe
    less the floor.
    """
    df = float(f[1] - f[0])
    floor = local_floor(p, plan)
    level = 10 * np.log10(np.maximum(p, 1e-300))
    peaks, _ = scipy.signal.find_peaks(level, prominence=PEAK_PROMINENCE_DB,
                                       distance=2 * plan.lobe_bins + 1)  # fmt: skip
    keep = (f[peaks] > above_hz) & (
        level[peaks] - 10 * np.log10(floor[peaks]) >= PEAK_ABOVE_FLOOR_DB
    )
    tones = []
    for i in peaks[keep]:
        lobe = slice(max(i - plan.lobe_bins, 0), i + plan.lobe_bins + 1)
        tones.append(Tone(float(f[i] + _refine(p, int(i)) * df), int(i),
                          lobe_power(p, floor, lobe, df), lobe))  # fmt: skip
    tones.sort(key=lambda t: -t.power)
    return tuple(tones), floor


@dataclass(frozen=True)
class FoldedPower:
    """Power folding into the band, in unit^2.

    Attributes
    ----------
    total : float
        Tones whose refined alias is in the band plus the noise in the folding bins.
    tones : float
        The tones' part of it.
    """

    total: float
    tones: float


def folded_power(
    f: np.ndarray,
    p: np.ndarray,
    floor: np.ndarray,
    tones: tuple[Tone, ...],
    tone_powers: list[float],
    adc_rate_hz: float,
    band_hz: float,
) -> FoldedPower:
    """Power of ``p`` folding into the band, with the tones counted once each.

    Parameters
    ----------
    f, p : numpy.ndarray
        The spectrum (``p`` in unit^2/Hz).
    floor : numpy.ndarray
        Its local floor (:func:`local_floor`), which stands in for the bins of the tones.
    tones : tuple of Tone
        Tones found (their lobes are where they sit).
    tone_powers : list of float
        Power of each tone in ``p`` (its own measurement may differ from ``tone.power``
        when ``p`` is another spectrum, e.g. after the filter).
    adc_rate_hz, band_hz : float
    """
    df = float(f[1] - f[0])
    filled = p.copy()
    in_band = 0.0
    for tone, power in zip(tones, tone_powers, strict=True):
        filled[tone.lobe] = floor[tone.lobe]
        if alias_frequency(tone.f_hz, adc_rate_hz) <= band_hz:
            in_band += power
    noise = float(filled[fold_mask(f, adc_rate_hz, band_hz)].sum() * df)
    return FoldedPower(noise + in_band, in_band)
