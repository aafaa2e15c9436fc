"""A stateful polyphase resampler for streaming blocks (rate times ``up / down``).

It uses the same low-pass FIR as :func:`scipy.signal.resample_poly` with its defaults (a
Kaiser-windowed sinc, beta 5, ``10 * max(up, down)`` taps each side of the centre, cut-off
at the lower of the two Nyquist frequencies) and computes the same samples as
:func:`scipy.signal.upfirdn` with that filter, one block at a time: the last input samples
are kept between blocks, so block edges leave no trace and any block sizes give the same
output. Unlike ``resample_poly`` it is causal: the output lags by half the filter, ``10 *
max(up, down) / up`` input samples.

References
----------
scipy.signal.resample_poly and scipy.signal.upfirdn (the filter and the arithmetic);
R. E. Crochiere, L. R. Rabiner, *Multirate Digital Signal Processing*, 1983, ch. 3
(polyphase structure).
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
from scipy import signal

from filtertwin.errors import UserInputError

MAX_FACTOR = 1000


def ratio(from_hz: float, to_hz: float) -> tuple[int, int]:
    """``(up, down)`` with ``to_hz / from_hz = up / down`` in lowest terms.

    Rates are rounded to whole hertz first.

    Raises
    ------
    UserInputError
        If a rate is below 1 Hz or the ratio needs factors above 1000.
    """
    a, b = round(from_hz), round(to_hz)
    if a < 1 or b < 1:
        raise UserInputError(f"cannot resample from {from_hz:g} Hz to {to_hz:g} Hz")
    fraction = Fraction(b, a)
    up, down = fraction.numerator, fraction.denominator
    if max(up, down) > MAX_FACTOR:
        raise UserInputError(
            f"resampling {a} Hz to {b} Hz needs the factors {up}/{down}; use a stream rate "
            f"closer to a simple multiple of the recording's rate (--rate)"
        )
    return up, down


def design_filter(up: int, down: int) -> np.ndarray:
    """The FIR :func:`scipy.signal.resample_poly` uses by default for ``up/down``."""
    max_rate = max(up, down)
    half_len = 10 * max_rate
    return signal.firwin(2 * half_len + 1, 1.0 / max_rate, window=("kaiser", 5.0)) * up


class StreamResampler:
    """Resample ``(frames, channels)`` blocks by ``up / down``, keeping state between them.

    Each block is computed by :func:`scipy.signal.upfirdn` on the kept history plus the block
    (the filter is causal: the output lags by :attr:`lag_frames`).

    Parameters
    ----------
    up, down : int
        The rate changes by ``up / down`` (lowest terms not required).
    channels : int
        Channels of every block.
    taps : numpy.ndarray, optional
        Another FIR at the rate ``up`` times the input's (for ``up/down`` in lowest terms),
        e.g. an interpolator that leaves the aliases in (:mod:`filtertwin.live.capture`);
        default: :func:`design_filter`.

    Examples
    --------
    >>> r = StreamResampler(3, 2, channels=1)
    >>> r.process(np.ones((4, 1))).shape  # 4 samples in, 6 out
    (6, 1)
    """

    def __init__(self, up: int, down: int, channels: int, taps: np.ndarray | None = None) -> None:
        if up < 1 or down < 1 or channels < 1:
            raise ValueError(f"up, down and channels must be >= 1, got {up}, {down}, {channels}")
        g = math.gcd(up, down)
        if taps is not None and g != 1:
            raise ValueError(f"with taps given, up/down must be in lowest terms, got {up}/{down}")
        self.up, self.down = up // g, down // g
        self.channels = channels
        self.taps = design_filter(self.up, self.down) if taps is None else np.asarray(taps, float)
        # inputs each output needs besides the newest; the kept history starts at an absolute
        # input index that is a multiple of `down`, so upfirdn's output grid lines up with ours
        self._keep = -(-len(self.taps) // self.up) - 1
        start = -(-self._keep // self.down) * self.down
        self._history = np.zeros((start, channels))
        self._frames_in = 0
        self._frames_out = 0

    @property
    def lag_frames(self) -> float:
        """How many input frames the output lags (the centre of a symmetric filter)."""
        return (len(self.taps) - 1) / 2 / self.up

    def process(self, block: np.ndarray) -> np.ndarray:
        """Resample the next block.

        Parameters
        ----------
        block : numpy.ndarray
            ``(frames, channels)`` samples (frames may be 0).

        Returns
        -------
        numpy.ndarray
            float64 ``(m, channels)``: every output sample whose inputs have all arrived.
        """
        block = np.asarray(block, dtype=np.float64)
        if block.ndim != 2 or block.shape[1] != self.channels:
            raise ValueError(f"block must have shape (frames, {self.channels}), got {block.shape}")
        joined = np.concatenate([self._history, block])
        first_in = self._frames_in - len(self._history)  # absolute index of joined[0]
        total = self._frames_in + len(block)
        end = (total * self.up - 1) // self.down + 1 if total else 0
        if end == self._frames_out:
            out = np.zeros((0, self.channels))
        else:
            y = signal.upfirdn(self.taps, joined, self.up, self.down, axis=0)
            first_out = first_in * self.up // self.down
            out = y[self._frames_out - first_out : end - first_out]
        cut = (total - self._keep) // self.down * self.down
        self._history = joined[cut - first_in :].copy()
        self._frames_in = total
        self._frames_out = end
        return out
