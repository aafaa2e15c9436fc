"""Resampling in blocks: oversampling a twin by powers of two, and rational rate changes.

Oversampling (:class:`Upsampler`, :class:`Downsampler`) runs a cascade of 2x stages, each a
Kaiser-windowed half-band FIR (:func:`stage_taps`) designed so that the band from 0 to 20 kHz
at 44.1 kHz (:data:`PASS_FRACTION` of the input rate at any rate) stays flat and every image
or alias that would land in it is rejected by :data:`REJECTION_DB`. The stages run as
polyphase filters in compiled loops over arrays made at construction, so ``process``
allocates nothing and can run in an audio callback. Only the outputs kept are computed, the
zero taps of a half-band filter are skipped, equal taps of a symmetric one share a multiply,
and a block goes through all stages a chunk (:data:`CHUNK_FRAMES`) at a time, so its samples
stay in the cache from stage to stage; the same objects serve render, the
anti-alias check and the live stream. ``phase="linear"`` (symmetric FIRs; their delay,
:func:`delay_frames`, is a whole number of input frames and is taken out by the caller) or
``"causal"`` (minimum-phase FIRs with the same magnitude: nothing comes out before an input,
as in an analog circuit).

:class:`StreamResampler` changes the rate by any ratio ``up / down`` (a recording at another
rate than the stream) with the FIR of :func:`scipy.signal.resample_poly`, computed by
:func:`scipy.signal.upfirdn` one block at a time: the last input samples are kept between
blocks, so block edges leave no trace. It is causal: the output lags by half the filter.

References
----------
scipy.signal.resample_poly and scipy.signal.upfirdn (the rational filter and arithmetic);
R. E. Crochiere, L. R. Rabiner, *Multirate Digital Signal Processing*, 1983, ch. 3 and 5
(polyphase structure, multistage decimation and interpolation); P. P. Vaidyanathan,
*Multirate Systems and Filter Banks*, 1993, 4.6 (half-band filters).
"""

from __future__ import annotations

import functools
import math
from fractions import Fraction
from typing import Any, NamedTuple

import numba
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


# --- oversampling by powers of two: a cascade of half-band stages ----------------------

PHASES = ("linear", "causal")
"""Resampling filter phase: ``"linear"`` (symmetric FIRs, their delay removed so outputs line
up with the input) or ``"causal"`` (minimum-phase FIRs: nothing comes out before an input
does, as in an analog circuit; the output lags by a few samples and is not shifted back)."""
PASS_FRACTION = 20000.0 / 44100.0
"""Top of the flat passband as a fraction of the input rate: 20 kHz at 44.1 kHz (0.4535)."""
REJECTION_DB = 150.0
"""Design stopband rejection of every stage (Kaiser); deeper than a 24-bit ADC's ideal
dynamic range, 6.02 * 24 + 1.76 = 146.2 dB, the deepest the anti-alias check asks for."""
TILE = 256
"""Outputs computed together, tap by tap (they and their inputs stay in the L1 cache)."""
CHUNK_FRAMES = 512
"""Input-rate frames taken through all stages of a cascade at a time (their samples at
every rate stay in the cache between stages); blocks of any length are cut into these."""


@functools.lru_cache(maxsize=16)
def stage_taps(stage: int, phase: str = "linear") -> np.ndarray:
    """The FIR of one 2x stage, running at ``2**stage`` times the input rate.

    Stage 1 (input rate to twice it) keeps 0 to :data:`PASS_FRACTION` of the input rate and
    rejects from ``1 - PASS_FRACTION`` on, where the first image of that band begins; stage
    ``s`` rejects from ``2**(s-1) - PASS_FRACTION``. Each is a Kaiser-windowed sinc cut at
    a quarter of its own rate (a half-band filter: every second tap but the centre is zero),
    its length and window from Kaiser's formulas for :data:`REJECTION_DB`. ``"causal"``
    turns it into the minimum-phase filter of the same magnitude response.

    Parameters
    ----------
    stage : int
        1 for the stage next to the input rate.
    phase : {"linear", "causal"}

    Returns
    -------
    numpy.ndarray
        Taps with unit gain at DC.

    References
    ----------
    J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window function",
    Proc. IEEE ISCAS 1974 (``scipy.signal.kaiserord``, ``firwin``); P. P. Vaidyanathan,
    *Multirate Systems and Filter Banks*, 1993, 4.6 (half-band filters);
    ``scipy.signal.minimum_phase`` (homomorphic method, full magnitude with ``half=False``).
    """
    if phase not in PHASES:
        raise ValueError(f"phase must be one of {PHASES}, got {phase!r}")
    nyquist = 2.0**stage / 2  # in units of the input rate
    stop = 2.0 ** (stage - 1) - PASS_FRACTION
    numtaps, beta = signal.kaiserord(REJECTION_DB, (stop - PASS_FRACTION) / nyquist)
    numtaps = 4 * (-(-(numtaps - 3) // 4)) + 3  # 4k + 3: a half-band's centre tap is odd
    while True:  # Kaiser's length formula is an estimate: lengthen until the target is met
        h = _half_band(numtaps, beta)
        if rejection_db(h, stop / nyquist) >= REJECTION_DB:
            break
        numtaps += 4
    if phase == "causal":
        n_fft = 2 ** int(math.ceil(math.log2(64 * numtaps)))
        h = signal.minimum_phase(h, method="homomorphic", n_fft=n_fft, half=False)
        h /= h.sum()
    h.flags.writeable = False
    return h


def _half_band(numtaps: int, beta: float) -> np.ndarray:
    h = signal.firwin(numtaps, 0.5, window=("kaiser", beta))
    centre = numtaps // 2
    h[centre % 2 :: 2] = 0.0  # the sinc's zeros, exactly
    h[centre] = 0.5
    h = 0.5 * (h + h[::-1])  # exactly symmetric, so each pair of equal taps shares a multiply
    return h / h.sum()


def rejection_db(taps: np.ndarray, stop: float) -> float:
    """Smallest attenuation (dB, positive) of an FIR from ``stop`` (a fraction of its
    Nyquist frequency) to Nyquist, on a dense grid (``scipy.signal.freqz``)."""
    w, h = signal.freqz(taps, worN=1 << 15)
    worst = np.max(np.abs(h[w >= stop * math.pi]))
    return float(-20 * math.log10(max(worst, 1e-300)))


def _stages(factor: int) -> int:
    stages = int(round(math.log2(factor)))
    if factor < 2 or 2**stages != factor:
        raise ValueError(f"factor must be a power of two >= 2, got {factor}")
    return stages


class _StagePlan(NamedTuple):
    """One 2x stage ready to run: its buffer (lanes, [even/odd,] history then new samples),
    the history length, and the polyphase taps of :func:`_polyphase`."""

    buf: np.ndarray
    hist: int
    taps: np.ndarray
    lengths: np.ndarray
    offsets: np.ndarray
    mirrored: np.ndarray


def _polyphase(h: np.ndarray, gain: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Both phases of ``h`` (times ``gain``), zeros at either end trimmed, reversed for a
    forward dot product: ``taps[k, :lengths[k]]``, the delay ``offsets[k]`` (in samples
    of the lower rate) of the phase's first non-zero tap, and ``mirrored[k]``: the phase is
    symmetric with an even number of taps (:func:`_mirrored_taps_into` can run it)."""
    phases = [h[k::2] * gain for k in range(2)]
    width = max(len(p) for p in phases)
    taps = np.zeros((2, width))
    lengths = np.zeros(2, np.int64)
    offsets = np.zeros(2, np.int64)
    mirrored = np.zeros(2, np.bool_)
    for k, p in enumerate(phases):
        nz = np.flatnonzero(p)
        first, last = int(nz[0]), int(nz[-1])
        kept = p[first : last + 1]
        lengths[k] = len(kept)
        offsets[k] = first
        taps[k, : lengths[k]] = kept[::-1]
        mirrored[k] = len(kept) % 2 == 0 and np.array_equal(kept, kept[::-1])
    return taps, lengths, offsets, mirrored


class _Plans:
    """The plans of a cascade's stages, in the order they run, as the compiled cascade
    loops take them: tuples of arrays, and per-stage figures stacked."""

    def __init__(self, plans: list[_StagePlan]) -> None:
        self.bufs = tuple(p.buf for p in plans)
        self.taps = tuple(p.taps for p in plans)
        self.hists = np.array([p.hist for p in plans], np.int64)
        self.lengths = np.stack([p.lengths for p in plans])
        self.offsets = np.stack([p.offsets for p in plans])
        self.mirrored = np.stack([p.mirrored for p in plans])
        self.arrays = (self.bufs, self.hists, self.taps, self.lengths, self.offsets, self.mirrored)
        """What the compiled cascade loops take, in their order."""

    def reset(self) -> None:
        """Zero every stage's history."""
        for buf in self.bufs:
            buf.fill(0.0)


def _check_length(frames: int, max_frames: int) -> None:
    if frames > max_frames:
        raise ValueError(f"block of {frames} frames is longer than max_frames {max_frames}")


def _stage_plan(h: np.ndarray, gain: float, lanes: int, frames: int, down: bool) -> _StagePlan:
    """The plan of one stage with FIR ``h`` for blocks of up to ``frames`` input samples:
    up (``lanes`` rows of low-rate samples) or down (``lanes`` pairs of rows, even and odd
    high-rate samples; the odd phase reaches one sample further back)."""
    taps, lengths, offsets, mirrored = _polyphase(h, gain)
    reach = offsets + lengths - 1 + (np.arange(2) if down else 0)
    hist = int(np.max(reach))
    shape = (lanes, 2, hist + frames // 2) if down else (lanes, hist + frames)
    return _StagePlan(np.zeros(shape), hist, taps, lengths, offsets, mirrored)


@numba.njit(cache=True, fastmath=True, nogil=True)
def _taps_into(part, row, start, taps, length):  # pragma: no cover
    """``part[i] += sum_t taps[t] row[start + t + i]``, four taps per pass over ``part``
    (fewer loads and stores per multiply-add); slices keep every index non-negative, so
    the inner loops vectorise."""
    span = part.shape[0]
    t = 0
    while t + 4 <= length:
        g0, g1, g2, g3 = taps[t], taps[t + 1], taps[t + 2], taps[t + 3]
        s0 = row[start + t : start + t + span]
        s1 = row[start + t + 1 : start + t + 1 + span]
        s2 = row[start + t + 2 : start + t + 2 + span]
        s3 = row[start + t + 3 : start + t + 3 + span]
        for i in range(span):
            part[i] += g0 * s0[i] + g1 * s1[i] + g2 * s2[i] + g3 * s3[i]
        t += 4
    while t < length:
        g = taps[t]
        seg = row[start + t : start + t + span]
        for i in range(span):
            part[i] += g * seg[i]
        t += 1


@numba.njit(cache=True, fastmath=True, nogil=True)
def _mirrored_taps_into(part, row, start, taps, length):  # pragma: no cover
    """As :func:`_taps_into` for symmetric ``taps`` (``taps[t] == taps[length - 1 - t]``,
    ``length`` even, as the long phase of a linear-phase half-band filter): the two samples
    that meet equal taps are added first, so one multiply serves two taps."""
    span = part.shape[0]
    last = start + length - 1
    half = length // 2
    t = 0
    while t + 8 <= half:
        g0, g1, g2, g3 = taps[t], taps[t + 1], taps[t + 2], taps[t + 3]
        g4, g5, g6, g7 = taps[t + 4], taps[t + 5], taps[t + 6], taps[t + 7]
        a = row[start + t : start + t + span + 7]
        b = row[last - t - 7 : last - t + span]
        for i in range(span):
            part[i] += (
                (g0 * (a[i] + b[i + 7]) + g1 * (a[i + 1] + b[i + 6]))
                + (g2 * (a[i + 2] + b[i + 5]) + g3 * (a[i + 3] + b[i + 4]))
            ) + (
                (g4 * (a[i + 4] + b[i + 3]) + g5 * (a[i + 5] + b[i + 2]))
                + (g6 * (a[i + 6] + b[i + 1]) + g7 * (a[i + 7] + b[i]))
            )
        t += 8
    while t < half:
        g = taps[t]
        a = row[start + t : start + t + span]
        b = row[last - t : last - t + span]
        for i in range(span):
            part[i] += g * (a[i] + b[i])
        t += 1


@numba.njit(cache=True, fastmath=True, nogil=True)
def _phase_into(part, row, start, taps, length, mirrored):  # pragma: no cover
    if mirrored:
        _mirrored_taps_into(part, row, start, taps, length)
    else:
        _taps_into(part, row, start, taps, length)


@numba.njit(cache=True, fastmath=True, nogil=True)
def _up_stage(
    buf, hist, n, taps, lengths, offsets, mirrored, acc, out, out_start
):  # pragma: no cover
    """``buf[:, hist:hist+n]`` (lanes, low rate, history before it) -> ``out[:, out_start:
    out_start+2n]``: ``y[2i+k] = sum_j g_k[j] x[i - j]``; then keep the history.

    Tap by tap over all outputs of a phase (``acc``), so the inner loop runs over
    contiguous samples with no dependency between iterations; a phase of one tap (the
    centre of a half-band filter) is written straight to ``out``. ``out`` may be a strided
    view (the caller's ``(frames, channels)`` array, transposed)."""
    lanes = buf.shape[0]
    for lane in range(lanes):
        row = buf[lane]
        target = out[lane]
        for k in range(2):
            length = lengths[k]
            base = hist - offsets[k] - length + 1
            if length == 1:
                g = taps[k, 0]
                for i in range(n):
                    target[out_start + 2 * i + k] = g * row[base + i]
                continue
            a = acc[k]
            for lo in range(0, n, TILE):
                hi = min(n, lo + TILE)
                for i in range(lo, hi):
                    a[i] = 0.0
                _phase_into(a[lo:hi], row, base + lo, taps[k], length, mirrored[k])
                for i in range(lo, hi):  # while the tile is in the cache
                    target[out_start + 2 * i + k] = a[i]
        for j in range(hist):
            row[j] = row[n + j]


@numba.njit(cache=True, fastmath=True, nogil=True)
def _down_stage(
    buf, hist, n, taps, lengths, offsets, mirrored, out, out_start, pairs, pairs_start
):  # pragma: no cover
    """``buf[:, 0]`` even and ``buf[:, 1]`` odd input samples (``hist`` of history, then
    ``n`` new of each) -> ``y[i] = sum_j h[j] x[2i - j]`` into ``out[:, out_start:]``:
    the even taps meet even samples at ``i - m``, the odd ones odd samples at ``i - m - 1``.
    Tap by tap over all outputs, as in :func:`_up_stage`. With ``pairs_start >= 0`` each
    tile, while in the cache, is also split into the next stage's even and odd rows,
    ``pairs[:, 0/1, pairs_start:]`` (``out_start``, ``n`` and :data:`TILE` even)."""
    lanes = buf.shape[0]
    single = 1 if lengths[1] == 1 else (0 if lengths[0] == 1 else -1)  # a centre-tap phase
    for lane in range(lanes):
        y = out[lane]
        for lo in range(out_start, out_start + n, TILE):
            hi = min(out_start + n, lo + TILE)
            span = hi - lo
            part = y[lo:hi]
            if single >= 0:  # the centre tap sets the outputs, the other phase adds to them
                g = taps[single, 0]
                seg = buf[lane, single, hist - offsets[single] - single - out_start + lo :]
                for i in range(span):
                    part[i] = g * seg[i]
            else:
                for i in range(span):
                    part[i] = 0.0
            for k in range(2):
                if k == single:
                    continue
                length = lengths[k]
                base = hist - offsets[k] - k - length + 1 - out_start
                _phase_into(part, buf[lane, k], base + lo, taps[k], length, mirrored[k])
            if pairs_start >= 0:
                even, odd = pairs[lane, 0], pairs[lane, 1]
                first = pairs_start + (lo - out_start) // 2
                for j in range(span // 2):
                    even[first + j] = part[2 * j]
                    odd[first + j] = part[2 * j + 1]
        for k in range(2):
            row = buf[lane, k]
            for j in range(hist):
                row[j] = row[n + j]


@numba.njit(cache=True, nogil=True)
def _frames_to_lanes(x, buf, start):  # pragma: no cover
    """``x`` (frames, channels) -> ``buf[channel, start + frame]``."""
    for f in range(x.shape[0]):
        for c in range(x.shape[1]):
            buf[c, start + f] = x[f, c]


@numba.njit(cache=True, nogil=True)
def _chains_to_pairs(x, frames, buf, start, skip):  # pragma: no cover
    """``x`` (chains, frames, channels) -> ``buf[lane, even/odd, start + i]``, lane =
    chain * channels + channel; with ``skip`` leading frames left out (a delay)."""
    chains, _, channels = x.shape
    pairs = (frames - skip) // 2
    for a in range(chains):
        if channels == 2:  # stereo: one pass reads each frame pair once, in memory order
            src = x[a]
            e0, o0 = buf[2 * a, 0, start : start + pairs], buf[2 * a, 1, start : start + pairs]
            e1 = buf[2 * a + 1, 0, start : start + pairs]
            o1 = buf[2 * a + 1, 1, start : start + pairs]
            for i in range(pairs):
                f = skip + 2 * i
                e0[i] = src[f, 0]
                e1[i] = src[f, 1]
                o0[i] = src[f + 1, 0]
                o1[i] = src[f + 1, 1]
            continue
        for c in range(channels):  # one lane at a time: its rows are written in order
            lane = a * channels + c
            even, odd = buf[lane, 0], buf[lane, 1]
            for i in range(pairs):
                even[start + i] = x[a, skip + 2 * i, c]
                odd[start + i] = x[a, skip + 2 * i + 1, c]


@numba.njit(cache=True, nogil=True)
def _lanes_to_chains(y, start, frames, channels, out):  # pragma: no cover
    """``y[chain * channels + channel, start + f]`` -> ``out[chain, f, channel]``."""
    for a in range(out.shape[0]):
        for c in range(channels):
            for f in range(frames):
                out[a, f, c] = y[a * channels + c, start + f]


@numba.njit(cache=True, nogil=True)
def _up_cascade(
    block, bufs, hists, taps, lengths, offsets, mirrored, acc, out, chunk
):  # pragma: no cover
    """Every stage of an up cascade over ``block`` (frames, channels) into ``out``,
    ``chunk`` input frames at a time, so that each chunk's samples stay in the cache from
    the first stage to the last."""
    stages = len(bufs)
    frames = block.shape[0]
    factor = 2**stages
    for lo in range(0, frames, chunk):
        n = min(chunk, frames - lo)
        _frames_to_lanes(block[lo : lo + n], bufs[0], hists[0])
        for s in range(stages - 1):
            t, g, o, m = taps[s], lengths[s], offsets[s], mirrored[s]
            _up_stage(bufs[s], hists[s], n, t, g, o, m, acc, bufs[s + 1], hists[s + 1])
            n *= 2
        s = stages - 1  # the last stage writes the output frames
        t, g, o, m = taps[s], lengths[s], offsets[s], mirrored[s]
        _up_stage(bufs[s], hists[s], n, t, g, o, m, acc, out[lo * factor :].T, 0)


@numba.njit(cache=True, nogil=True)
def _down_cascade(
    block, bufs, hists, taps, lengths, offsets, mirrored, ys, out, chunk
):  # pragma: no cover
    """Every stage of a down cascade over ``block`` (chains, frames, channels) into ``out``,
    ``chunk`` high-rate frames at a time (as :func:`_up_cascade`)."""
    stages = len(bufs)
    frames = block.shape[1]
    channels = block.shape[2]
    factor = 2**stages
    for lo in range(0, frames, chunk):
        n = min(chunk, frames - lo)
        _chains_to_pairs(block, lo + n, bufs[0], hists[0], lo)
        for s in range(stages):
            n //= 2
            t, g, o, m = taps[s], lengths[s], offsets[s], mirrored[s]
            last = s + 1 == stages
            pairs, start = (bufs[0], -1) if last else (bufs[s + 1], hists[s + 1])
            _down_stage(bufs[s], hists[s], n, t, g, o, m, ys[s], 0, pairs, start)
        _lanes_to_chains(ys[stages - 1], 0, n, channels, out[:, lo // factor :])


class _Cascade:
    """The stage filters of one factor and phase, and their delays (shared by up and down)."""

    def __init__(self, factor: int, phase: str) -> None:
        self.factor = factor
        self.phase = phase
        self.stages = _stages(factor)
        self.taps = [stage_taps(s, phase) for s in range(1, self.stages + 1)]

    def delay_high(self) -> int:
        """Delay of the up cascade (= of the down cascade) in samples of the high rate."""
        if self.phase == "causal":
            return 0
        return sum((len(h) - 1) // 2 * 2 ** (self.stages - s) for s, h in enumerate(self.taps, 1))

    def pad_high(self) -> int:
        """Zero taps put in front of the highest-rate down stage so that the delay of up and
        down together is a whole number of input frames."""
        return -2 * self.delay_high() % self.factor

    def delay_frames(self) -> int:
        """Input frames by which the up- then down-sampled signal lags (0 when causal)."""
        return (2 * self.delay_high() + self.pad_high()) // self.factor


class Upsampler:
    """Raise the rate of ``(frames, channels)`` blocks by a power of two, keeping state.

    Every stage doubles the rate with its half-band FIR (:func:`stage_taps`) in polyphase
    form, in compiled loops over arrays made here: :meth:`process` allocates nothing, so it
    may run inside an audio callback. Any block sizes give the same output.

    Parameters
    ----------
    factor : int
        2, 4, 8 or 16.
    channels : int
        Channels of every block.
    max_frames : int
        Largest block (input frames).
    phase : {"linear", "causal"}
    dtype : numpy dtype
        Of the output (the runner's): float64 or float32.

    Examples
    --------
    >>> up = Upsampler(4, channels=1, max_frames=8)
    >>> up.process(np.ones((8, 1))).shape
    (32, 1)
    """

    def __init__(
        self,
        factor: int,
        channels: int,
        max_frames: int,
        phase: str = "linear",
        dtype: Any = np.float64,
    ) -> None:
        self.cascade = _Cascade(factor, phase)
        self.factor = factor
        self.channels = channels
        self.max_frames = max_frames
        self._chunk = min(max_frames, CHUNK_FRAMES)
        n = self._chunk
        plans = []
        for h in self.cascade.taps:
            plans.append(_stage_plan(h, 2.0, channels, n, down=False))
            n *= 2
        self._plans = _Plans(plans)
        self._acc = np.zeros((2, n // 2))
        self._out = np.zeros((max_frames * factor, channels), dtype=dtype)

    def process(self, block: np.ndarray) -> np.ndarray:
        """``(frames, channels)`` -> ``(frames * factor, channels)``, a view of an array
        that the next call overwrites."""
        n = block.shape[0]
        _check_length(n, self.max_frames)
        block = np.ascontiguousarray(block)  # see "One compiled layout" below
        _up_cascade(block, *self._plans.arrays, self._acc, self._out, self._chunk)
        return self._out[: n * self.factor]

    def reset(self) -> None:
        """Forget the history (silence before the next block)."""
        self._plans.reset()


# One compiled layout: blocks reach the compiled cascades contiguous. numba compiles one
# version of a kernel per array layout and holds the GIL while it does; a short last block
# (a loop's end in the live read-ahead, a file's end in render) is often a non-contiguous
# view, and a second layout compiled mid-stream stalls the read-ahead for about a second.
# ``np.ascontiguousarray`` copies only such a block; full blocks pass through as they are.


class Downsampler:
    """Lower the rate of every chain's output by a power of two, keeping state.

    Takes ``(chains, frames, channels)`` blocks (a runner's output) whose length is a
    multiple of the factor and returns ``(chains, frames // factor, channels)``. Linear
    phase: the up and down cascades' delay together (:attr:`delay_frames` input frames) is
    taken out here: the output of the first call starts with that many frames of the
    past; :class:`filtertwin.digital.render.TwinStream` drops them. Allocates nothing in
    :meth:`process`.

    Parameters
    ----------
    factor : int
    chains, channels : int
    max_frames : int
        Largest block (high-rate frames).
    phase : {"linear", "causal"}
    dtype : numpy dtype
        Of the output.
    """

    def __init__(
        self,
        factor: int,
        chains: int,
        channels: int,
        max_frames: int,
        phase: str = "linear",
        dtype: Any = np.float64,
    ) -> None:
        self.cascade = _Cascade(factor, phase)
        self.factor = factor
        self.chains = chains
        self.channels = channels
        if max_frames % factor:
            raise ValueError(f"max_frames {max_frames} must be a multiple of {factor}")
        lanes = chains * channels
        self.max_frames = max_frames
        self._chunk = min(max_frames, CHUNK_FRAMES * factor)
        n = self._chunk
        pad = np.zeros(self.cascade.pad_high())
        plans = []
        # the highest-rate stage first
        for s, h in enumerate(reversed(self.cascade.taps)):
            h = np.concatenate([pad, h]) if s == 0 else h
            plans.append(_stage_plan(h, 1.0, lanes, n, down=True))
            n //= 2
        self._plans = _Plans(plans)
        self._y = tuple(np.zeros((lanes, self._chunk >> (s + 1))) for s in range(len(plans)))
        self._out = np.zeros((chains, max_frames // factor, channels), dtype=dtype)

    def process(self, block: np.ndarray) -> np.ndarray:
        """``(chains, frames, channels)`` -> ``(chains, frames // factor, channels)``, a view
        of an array that the next call overwrites."""
        n = block.shape[1]
        if n % self.factor:
            raise ValueError(f"block of {n} frames is not a multiple of {self.factor}")
        _check_length(n, self.max_frames)
        block = np.ascontiguousarray(block)  # see "One compiled layout" above
        _down_cascade(block, *self._plans.arrays, self._y, self._out, self._chunk)
        return self._out[:, : n // self.factor]

    def reset(self) -> None:
        """Forget the history."""
        self._plans.reset()


def delay_frames(factor: int, phase: str = "linear") -> int:
    """Input frames by which a signal up- then down-sampled by :class:`Upsampler` and
    :class:`Downsampler` lags (0 for ``"causal"``, whose delay is not taken out)."""
    return _Cascade(factor, phase).delay_frames()


def dc_delay_s(factor: int, rate_hz: float, phase: str = "linear") -> float:
    """Group delay at 0 Hz of up and down together, seconds, after the delay render takes
    out (0 for linear phase; the latency of the causal filters)."""
    if phase == "linear":
        return 0.0
    cascade = _Cascade(factor, phase)
    total = 0.0
    for s, taps in enumerate(cascade.taps, 1):
        total += 2 * float(np.dot(np.arange(len(taps)), taps) / taps.sum()) / (rate_hz * 2**s)
    return total


def response(factor: int, f_hz: np.ndarray, rate_hz: float, phase: str = "linear") -> np.ndarray:
    """Complex response of the up and the down cascade together at ``f_hz`` (Hz), with
    ``rate_hz`` the input rate; linear phase: their delay taken out (as render does)."""
    f = np.asarray(f_hz, float)
    h = np.ones(f.shape, complex)
    cascade = _Cascade(factor, phase)
    for s, taps in enumerate(cascade.taps, 1):
        hs = signal.freqz(taps, worN=f, fs=rate_hz * 2**s)[1]
        h *= hs * hs
    delay_s = 2 * cascade.delay_high() / (rate_hz * factor)
    return h * np.exp(2j * math.pi * f * delay_s)
