"""Integrated loudness after ITU-R BS.1770-4, used to level-match the candidates.

Steps of the standard (Annex 1):

1. K-weighting of every channel: a high-shelf "pre-filter" (about +4 dB above 2 kHz),
   then the "RLB" high-pass (about 38 Hz), both biquads.
2. Mean square of the K-weighted signal over gating blocks of 400 ms that overlap by 75 %
   (a new block every 100 ms); a block's loudness is
   ``-0.691 + 10 log10(sum_i G_i z_i)`` with channel weights ``G_i`` (1.0 for left, right
   and centre, 1.41 for the surround channels).
3. Absolute gate: blocks at or below -70 LKFS are dropped; relative gate: blocks at or
   below (loudness of the remaining blocks - 10 LU) are dropped; the integrated loudness
   is the loudness of the mean power of the blocks left.

Other sample rates. The standard gives the two filters' coefficients for 48 kHz only. For
another rate, :func:`kweighting_sos` turns each 48 kHz biquad back into the analog
second-order section whose bilinear transform it is (substituting
``z = (1 + s/2fs) / (1 - s/2fs)``), writes that section as a corner frequency, a Q and
three normalised numerator coefficients, and transforms it to the new rate with the corner
prewarped (the corner frequency, Q and shelf gain of the digital filter are kept, as when
a biquad is specified by corner, Q and gain). At 48 kHz this returns the standard's
coefficients (to rounding); at 44.1 kHz and 96 kHz the response stays within 0.1 dB of the
48 kHz one up to 16 kHz.

For rates where 100 ms is not a whole number of samples the step is rounded to the
nearest sample and a block is four steps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from filtertwin.errors import UserInputError

STANDARD_RATE_HZ = 48000.0
# ITU-R BS.1770-4, Annex 1, Table 1 (pre-filter) and Table 2 (RLB filter), 48 kHz
PRE_FILTER_48K = (
    (1.53512485958697, -2.69169618940638, 1.19839281085285),
    (1.0, -1.69065929318241, 0.73248077421585),
)
RLB_FILTER_48K = (
    (1.0, -2.0, 1.0),
    (1.0, -1.99004745483398, 0.99007225036621),
)
ABSOLUTE_GATE_LKFS = -70.0
RELATIVE_GATE_LU = -10.0
OFFSET_DB = -0.691
BLOCK_S = 0.4
STEP_S = 0.1
FEED_FRAMES = 4096
""":func:`integrated_loudness` feeds the meter in pieces this long, so that no single call
into compiled code keeps a running audio thread waiting for the interpreter lock."""


@dataclass(frozen=True)
class AnalogSection:
    """A second-order analog section in normalised form.

    ``H(s) = (c2 p^2 + c1 p + c0) / (p^2 + p/q + 1)`` with ``p = s / w0`` and ``w0`` the
    analog corner of the section before prewarping at ``f0_hz`` (the digital corner).
    """

    f0_hz: float
    q: float
    c2: float
    c1: float
    c0: float


def analog_section(b: np.ndarray, a: np.ndarray, rate_hz: float) -> AnalogSection:
    """The analog section whose bilinear transform at ``rate_hz`` is the biquad ``b, a``.

    Parameters
    ----------
    b, a : array_like
        Numerator and denominator of the biquad (3 values each, ``a[0] == 1``).
    rate_hz : float
        Its sample rate.

    Returns
    -------
    AnalogSection
        Corner (digital, in Hz), Q and normalised numerator.

    References
    ----------
    Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., section 7.2.2
    (bilinear transformation).
    """
    b0, b1, b2 = (float(v) for v in b)
    a0, a1, a2 = (float(v) / float(a[0]) for v in a)
    k = 2.0 * rate_hz
    # coefficients of s^2, s, 1 after z = (1 + s/k) / (1 - s/k), times (1 - s/k)^2
    num = ((b0 - b1 + b2) / k**2, 2.0 * (b0 - b2) / k, b0 + b1 + b2)
    den = ((a0 - a1 + a2) / k**2, 2.0 * (a0 - a2) / k, a0 + a1 + a2)
    w0 = math.sqrt(den[2] / den[0])
    q = w0 * den[0] / den[1]
    f0_hz = rate_hz / math.pi * math.atan(w0 / k)
    return AnalogSection(
        f0_hz=f0_hz,
        q=q,
        c2=num[0] * w0**2 / den[2],
        c1=num[1] * w0 / den[2],
        c0=num[2] / den[2],
    )


def digital_section(section: AnalogSection, rate_hz: float) -> np.ndarray:
    """Bilinear transform of ``section`` at ``rate_hz``, corner prewarped: one SOS row."""
    if not section.f0_hz < rate_hz / 2:
        raise UserInputError(
            f"sample rate {rate_hz:g} Hz is too low for a section at {section.f0_hz:.0f} Hz"
        )
    kk = math.tan(math.pi * section.f0_hz / rate_hz)
    c2, c1, c0, q = section.c2, section.c1, section.c0, section.q
    b = (c2 + c1 * kk + c0 * kk**2, 2.0 * (c0 * kk**2 - c2), c2 - c1 * kk + c0 * kk**2)
    a = (1.0 + kk / q + kk**2, 2.0 * (kk**2 - 1.0), 1.0 - kk / q + kk**2)
    return np.array([*b, *a]) / a[0]


def kweighting_sos(rate_hz: float) -> np.ndarray:
    """K-weighting filter (pre-filter, then RLB high-pass) as a (2, 6) SOS array.

    Parameters
    ----------
    rate_hz : float
        Sample rate; 48 kHz gives the standard's coefficients, other rates are derived as
        the module docstring describes.

    Returns
    -------
    numpy.ndarray
        Rows ``[b0, b1, b2, 1, a1, a2]``.

    Raises
    ------
    UserInputError
        If the rate is below 8 kHz.

    References
    ----------
    ITU-R BS.1770-4 (10/2015), Annex 1, Tables 1 and 2.
    """
    if not rate_hz >= 8000.0:
        raise UserInputError(f"loudness needs a sample rate of at least 8 kHz, got {rate_hz} Hz")
    rows = []
    for b, a in (PRE_FILTER_48K, RLB_FILTER_48K):
        analog = analog_section(np.array(b), np.array(a), STANDARD_RATE_HZ)
        rows.append(digital_section(analog, rate_hz))
    return np.array(rows)


class LoudnessMeter:
    """Integrated loudness of a signal fed in blocks of any length.

    Parameters
    ----------
    rate_hz : float
        Sample rate.
    channels : int
        Number of channels.
    channel_weights : sequence of float, optional
        Weight ``G_i`` per channel; default 1.0 each (left, right, centre in BS.1770-4;
        use 1.41 for surround channels and leave out the LFE channel).
    """

    def __init__(
        self, rate_hz: float, channels: int, channel_weights: tuple[float, ...] | None = None
    ) -> None:
        weights = (1.0,) * channels if channel_weights is None else tuple(channel_weights)
        if len(weights) != channels:
            raise ValueError(f"need {channels} channel weights, got {len(weights)}")
        self.rate_hz = float(rate_hz)
        self.channels = channels
        self._sos = kweighting_sos(rate_hz)
        self._zi = np.zeros((self._sos.shape[0], 2, channels))
        self._weights = np.array(weights)
        self.step_frames = round(STEP_S * rate_hz)
        self._partial_energy = 0.0
        self._partial_frames = 0
        self._step_energies: list[float] = []

    def feed(self, samples: np.ndarray) -> None:
        """Add the next ``(frames, channels)`` samples."""
        samples = np.asarray(samples, dtype=np.float64)
        if samples.ndim != 2 or samples.shape[1] != self.channels:
            raise ValueError(
                f"samples must have shape (frames, {self.channels}), got {samples.shape}"
            )
        if len(samples) == 0:
            return
        weighted, self._zi = signal.sosfilt(self._sos, samples, axis=0, zi=self._zi)
        power = (weighted**2) @ self._weights  # per frame, channels weighted and summed
        position = 0
        while position < len(power):
            take = min(self.step_frames - self._partial_frames, len(power) - position)
            self._partial_energy += float(power[position : position + take].sum())
            self._partial_frames += take
            position += take
            if self._partial_frames == self.step_frames:
                self._step_energies.append(self._partial_energy)
                self._partial_energy = 0.0
                self._partial_frames = 0

    def block_powers(self) -> np.ndarray:
        """Weighted mean square of every complete 400 ms gating block so far."""
        steps = np.array(self._step_energies)
        if len(steps) < 4:
            return np.zeros(0)
        sums = steps[:-3] + steps[1:-2] + steps[2:-1] + steps[3:]
        return sums / (4 * self.step_frames)

    def integrated_lkfs(self) -> float:
        """Gated integrated loudness in LKFS; ``-inf`` when every block is gated out.

        Raises
        ------
        UserInputError
            If less than one 400 ms block has been fed.
        """
        powers = self.block_powers()
        if len(powers) == 0:
            raise UserInputError(
                "loudness needs at least 0.4 s of audio (one gating block); use a longer recording"
            )
        with np.errstate(divide="ignore"):
            block_lkfs = OFFSET_DB + 10.0 * np.log10(powers)
        kept = powers[block_lkfs > ABSOLUTE_GATE_LKFS]
        if len(kept) == 0:
            return -math.inf
        relative_gate = OFFSET_DB + 10.0 * math.log10(kept.mean()) + RELATIVE_GATE_LU
        kept = powers[(block_lkfs > ABSOLUTE_GATE_LKFS) & (block_lkfs > relative_gate)]
        return OFFSET_DB + 10.0 * math.log10(kept.mean())


def integrated_loudness(
    samples: np.ndarray, rate_hz: float, channel_weights: tuple[float, ...] | None = None
) -> float:
    """Integrated loudness of a whole signal, in LKFS (ITU-R BS.1770-4).

    Parameters
    ----------
    samples : numpy.ndarray
        ``(frames,)`` or ``(frames, channels)`` samples, full scale 1.0.
    rate_hz : float
        Sample rate.
    channel_weights : tuple of float, optional
        Weight per channel (default 1.0 each).

    Returns
    -------
    float
        Loudness in LKFS; ``-inf`` for silence.

    Raises
    ------
    UserInputError
        If the signal is shorter than 0.4 s or the rate below 8 kHz.

    References
    ----------
    ITU-R BS.1770-4 (10/2015), Annex 1.

    Examples
    --------
    >>> t = np.arange(48000 * 2) / 48000
    >>> left = np.sin(2 * np.pi * 997 * t)
    >>> round(integrated_loudness(np.stack([left, 0 * left], axis=1), 48000), 2)
    -3.01
    """
    frames = np.asarray(samples)
    if frames.ndim == 1:
        frames = frames[:, None]
    meter = LoudnessMeter(rate_hz, frames.shape[1], channel_weights)
    for start in range(0, len(frames), FEED_FRAMES):
        meter.feed(frames[start : start + FEED_FRAMES])
    return meter.integrated_lkfs()


def matching_gain(loudness_lkfs: float, reference_lkfs: float) -> float:
    """Linear gain that brings a signal of ``loudness_lkfs`` to ``reference_lkfs``.

    Silence (``-inf``) gets gain 1.0: there is nothing to match.
    """
    if not math.isfinite(loudness_lkfs) or not math.isfinite(reference_lkfs):
        return 1.0
    return float(10.0 ** ((reference_lkfs - loudness_lkfs) / 20.0))
