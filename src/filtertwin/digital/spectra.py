"""Power spectral density of long signals, accumulated block by block (Welch's method).

:class:`WelchAccumulator` takes a signal in blocks of any size and keeps only the samples of
the segment in progress, so its memory does not grow with the signal. Its result equals
``scipy.signal.welch`` of the whole signal with the same segment length, overlap and window
(one-sided density, constant detrend, mean of the segment periodograms): segments start at
0, step, 2 step ... and trailing samples that do not fill a segment are left out, as there.

References
----------
P. D. Welch, "The use of fast Fourier transform for the estimation of power spectra: a method
based on time averaging over short, modified periodograms", IEEE Trans. Audio Electroacoust.
AU-15(2), 1967.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft
import scipy.signal

__all__ = ["Spectrum", "WelchAccumulator", "segment_frames"]

MIN_SEGMENT_FRAMES = 16


@dataclass(frozen=True)
class Spectrum:
    """A one-sided power spectral density estimate.

    Attributes
    ----------
    f_hz : numpy.ndarray
        Frequencies in Hz, ``(n_freq,)``, from 0 to the Nyquist frequency.
    psd : numpy.ndarray
        Density in (signal unit)^2 / Hz, ``(n_freq, channels)``; zeros when no segment was
        complete.
    segments : int
        Segments averaged.
    rate_hz : float
        Sample rate in Hz.
    """

    f_hz: np.ndarray
    psd: np.ndarray
    segments: int
    rate_hz: float

    @property
    def resolution_hz(self) -> float:
        """Spacing of the frequency bins in Hz."""
        return float(self.f_hz[1] - self.f_hz[0])

    def channel_mean(self) -> np.ndarray:
        """Mean density over the channels, ``(n_freq,)``: the power of the average channel."""
        return self.psd.mean(axis=1)

    def variance(self) -> np.ndarray:
        """Integral of the density over frequency per channel (Parseval: the variance)."""
        return self.psd.sum(axis=0) * self.resolution_hz


def segment_frames(rate_hz: float, frames: int, resolution_hz: float | None = None) -> int:
    """A power-of-two segment length for a spectrum of a ``frames`` long signal.

    Parameters
    ----------
    rate_hz : float
        Sample rate in Hz.
    frames : int
        Length of the signal in frames.
    resolution_hz : float, optional
        Wanted bin spacing in Hz; default ``rate_hz / 8192`` (5.9 Hz at 48 kHz).

    Returns
    -------
    int
        The largest power of two not above ``rate_hz / resolution_hz`` that still fits
        at least two 50 %-overlapping segments into the signal (at least 16).
    """
    wanted = rate_hz / (resolution_hz or rate_hz / 8192)
    n = 2 ** max(int(math.floor(math.log2(max(wanted, 1.0)))), 0)
    while n > MIN_SEGMENT_FRAMES and 3 * n // 2 > frames:
        n //= 2
    return max(n, MIN_SEGMENT_FRAMES)


class WelchAccumulator:
    """Welch PSD estimate of a signal given in blocks (one-sided, density scaling).

    Parameters
    ----------
    rate_hz : float
        Sample rate in Hz.
    channels : int
        Channels per frame.
    nperseg : int
        Segment length in frames.
    noverlap : int, optional
        Overlap of consecutive segments in frames; default ``nperseg // 2``.
    window : str or tuple
        Window name for ``scipy.signal.get_window`` (default ``"hann"``, periodic).

    Raises
    ------
    ValueError
        If ``nperseg`` < 2, ``noverlap`` is not in ``[0, nperseg)`` or ``channels`` < 1.

    References
    ----------
    P. D. Welch, IEEE Trans. Audio Electroacoust. AU-15, 1967; ``scipy.signal.welch``.

    Examples
    --------
    >>> acc = WelchAccumulator(48000.0, 2, 1024)
    >>> for block in blocks:  # doctest: +SKIP
    ...     acc.update(block)
    >>> spectrum = acc.result()  # doctest: +SKIP
    """

    def __init__(
        self,
        rate_hz: float,
        channels: int,
        nperseg: int,
        noverlap: int | None = None,
        window: str | tuple[str, float] = "hann",
    ) -> None:
        noverlap = nperseg // 2 if noverlap is None else int(noverlap)
        if nperseg < 2 or not 0 <= noverlap < nperseg or channels < 1:
            raise ValueError(
                f"need nperseg >= 2, 0 <= noverlap < nperseg and channels >= 1"
                f" (got nperseg={nperseg}, noverlap={noverlap}, channels={channels})"
            )
        self.rate_hz = float(rate_hz)
        self.channels = int(channels)
        self.nperseg = int(nperseg)
        self.step = self.nperseg - noverlap
        self._window = scipy.signal.get_window(window, self.nperseg)
        self._window_spectrum = scipy.fft.rfft(self._window)
        self._sum = np.zeros((self.channels, self.nperseg // 2 + 1))
        self._segments = 0
        self._pending = np.zeros((self.channels, 0))

    def update(self, block: np.ndarray) -> None:
        """Add the next frames, shape ``(frames, channels)``; any number of frames."""
        block = np.asarray(block, dtype=np.float64).reshape(len(block), self.channels)
        data = np.concatenate([self._pending, block.T], axis=1)  # (channels, frames), contiguous
        frames = data.shape[1]
        count = 0 if frames < self.nperseg else (frames - self.nperseg) // self.step + 1
        if count:
            windows = np.lib.stride_tricks.sliding_window_view(data, self.nperseg, axis=1)
            segments = windows[:, :: self.step][:, :count]  # (channels, count, nperseg)
            spectra = scipy.fft.rfft(segments * self._window, axis=2)
            # constant detrend in the frequency domain: rfft(w (x - m)) = rfft(w x) - m rfft(w)
            spectra -= segments.mean(axis=2)[:, :, None] * self._window_spectrum
            self._sum += (spectra.real**2 + spectra.imag**2).sum(axis=1)
            self._segments += count
        self._pending = data[:, count * self.step :].copy()

    def result(self) -> Spectrum:
        """The density averaged over the complete segments so far."""
        scale = 1.0 / (self.rate_hz * float(np.sum(self._window**2)))
        psd = self._sum.T * (scale / max(self._segments, 1))
        psd[1:] *= 2.0
        if self.nperseg % 2 == 0:
            psd[-1] /= 2.0  # the Nyquist bin has no negative-frequency twin
        f_hz = scipy.fft.rfftfreq(self.nperseg, 1.0 / self.rate_hz)
        return Spectrum(f_hz, psd, self._segments, self.rate_hz)
