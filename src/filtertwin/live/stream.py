"""The real-time part of ``filtertwin listen``: the audio callback and what feeds it.

:class:`StreamCore` holds everything the audio callback touches, made before the stream
opens. Per block the callback only copies, multiplies and adds into those arrays:

1. the input block: from the read-ahead ring (a recording) or from ``indata`` (live input);
2. every chain's output: the :class:`~filtertwin.digital.engine.CascadeRunner` filters the block
   (raised and lowered around it by :class:`Oversampling` when the twins run oversampled;
   a part edit's :class:`~filtertwin.live.chains.ChainBlend` runs beside it), or, when the
   read-ahead thread already filtered it, the ring carries the outputs;
   with the circuit noise on, a :class:`~filtertwin.live.hiss.NoiseAdder` adds each chain's
   own noise to its output;
3. one :class:`~filtertwin.live.mixer.SelectionMixer` per output pair (crossfades), each
   writing straight into its two output columns (a mono input into both);
4. :class:`~filtertwin.live.safety.OutputSafety` on the whole output, last;
5. peak meters (falling at ``METER_FALL_DB_PER_S``), the preview window's
   :class:`~filtertwin.live.tap.SignalTap` when there is one, counters and the callback's
   own time.

The control thread reads meters and counters and changes the mix with :meth:`request`,
swaps chains with the runner's ``set_chain``, or replaces :attr:`StreamCore.runner` whole
(one attribute store, taken up at the next block).

:class:`Feeder` is the read-ahead thread: it reads a recording in a loop with
:class:`~filtertwin.live.looping.LoopReader` (the whole file, or a region, with jumps) into a
bounded :class:`~filtertwin.live.ring.BlockRing`.
For a recording at another rate than the stream, a :class:`PreFilter` runs the twin at
the recording's own rate in that thread and resamples every chain's output and the dry
input to the stream rate; with an :class:`~filtertwin.live.capture.AdcCapture` it also
adds what an ideal ADC would capture of each of them (more sources in the ring).
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numba
import numpy as np

from filtertwin.digital.engine import CascadeRunner
from filtertwin.digital.resample import Downsampler, StreamResampler, Upsampler, delay_frames
from filtertwin.files.recordinginfo import RecordingInfo
from filtertwin.live.chains import ChainBlend
from filtertwin.live.looping import LoopReader
from filtertwin.live.mixer import SelectionMixer
from filtertwin.live.ring import BlockRing
from filtertwin.live.safety import OutputSafety

if TYPE_CHECKING:
    from filtertwin.live.capture import AdcCapture
    from filtertwin.live.hiss import NoiseAdder
    from filtertwin.live.tap import SignalTap

BLOCKS, XRUNS, STARVED_FRAMES, ODD_BLOCKS = 0, 1, 2, 3
"""Indices into :attr:`StreamCore.counters`."""
CPU_HISTORY = 4096
"""Callback times kept (the most recent blocks)."""
METER_FALL_DB_PER_S = 20.0


@numba.njit(cache=True)
def _meter_kernel(
    chains: np.ndarray, dry: np.ndarray, out: np.ndarray, meters: np.ndarray, fall: float
) -> None:
    """Peak of every chain, the dry input and the output; held peaks fall by ``fall``."""
    n_chains, frames, channels = chains.shape
    for k in range(n_chains):
        peak = 0.0
        for f in range(frames):
            for c in range(channels):
                a = abs(np.float64(chains[k, f, c]))
                if a > peak:
                    peak = a
        meters[k] = max(peak, meters[k] * fall)
    peak = 0.0
    for f in range(frames):
        for c in range(channels):
            a = abs(np.float64(dry[f, c]))
            if a > peak:
                peak = a
    meters[n_chains] = max(peak, meters[n_chains] * fall)
    peak = 0.0
    for f in range(out.shape[0]):
        for c in range(out.shape[1]):
            a = abs(np.float64(out[f, c]))
            if a > peak:
                peak = a
    meters[n_chains + 1] = max(peak, meters[n_chains + 1] * fall)


@numba.njit(cache=True)
def _delay_kernel(block: np.ndarray, line: np.ndarray, position: int) -> int:
    """Delay ``block`` in place by ``len(line)`` frames (a ring of the last frames)."""
    n = line.shape[0]
    if n == 0:
        return position
    p = position
    for f in range(block.shape[0]):
        for c in range(block.shape[1]):
            held = line[p, c]
            line[p, c] = block[f, c]
            block[f, c] = held
        p += 1
        if p == n:
            p = 0
    return p


@dataclass(eq=False)
class Oversampling:
    """The resamplers around an oversampled runner, and the dry input's matching delay.

    The runner runs at ``factor`` times the stream's rate: each block is raised by ``up``,
    filtered, and every chain lowered by ``down`` (:mod:`filtertwin.digital.resample`, the filters
    render uses; compiled, allocation-free). With linear-phase filters the chains come out
    :func:`~filtertwin.digital.resample.delay_frames` late, so the dry input (bypass and meters) is
    delayed as much to stay in step; causal filters' outputs are not shifted.

    Parameters
    ----------
    factor : int
    chains, channels, block_frames : int
        Of the runner and the blocks (frames at the stream's rate).
    phase : {"linear", "causal"}
    dtype : numpy dtype
        The runner's.
    """

    factor: int
    chains: int
    channels: int
    block_frames: int
    phase: str = "linear"
    dtype: Any = np.float32
    up: Upsampler = field(init=False)
    down: Downsampler = field(init=False)
    delay_frames: int = field(init=False)

    def __post_init__(self) -> None:
        n, f = self.block_frames, self.factor
        self.up = Upsampler(f, self.channels, n, self.phase, self.dtype)
        self.down = Downsampler(f, self.chains, self.channels, n * f, self.phase, self.dtype)
        self.delay_frames = delay_frames(f, self.phase)
        self._line = np.zeros((self.delay_frames, self.channels), dtype=self.dtype)
        self._position = 0

    def process(
        self, runner: CascadeRunner, dry: np.ndarray, blend: ChainBlend | None = None
    ) -> np.ndarray:
        """Every chain's output for ``dry`` ``(frames, channels)``, which is delayed in place
        to line up with it; a part edit's :class:`~filtertwin.live.chains.ChainBlend` runs
        at the runner's rate, between up and down. Allocates nothing."""
        high_in = self.up.process(dry)
        high = runner.process(high_in)
        if blend is not None:
            blend.process(high_in, high)
        # a loop's short last block leaves ``high`` a non-contiguous view; the
        # downsampler hands its kernel a contiguous copy ("One compiled layout" in resample.py)
        chains = self.down.process(high)
        self._position = _delay_kernel(dry, self._line, self._position)
        return chains


class StreamCore:
    """The audio callback and its preallocated arrays.

    Parameters
    ----------
    n_chains : int
        Chains (candidate ways) the mixer sees.
    channels : int
        Channels of the input and of each chain (1 or 2); mono is duplicated on output.
    block_frames : int
        Frames per callback.
    rate_hz : float
        Stream rate.
    runner : CascadeRunner or None
        float32 runner filtering in the callback; None when the ring carries the chains'
        outputs (filtered in the read-ahead thread).
    ring : BlockRing or None
        Source of input (and, without runner, chain outputs); None for live input.
    safety : OutputSafety
        Ramp and ceiling, applied to the whole output.
    pairs : int
        Output channel pairs (1: stereo mix; more: one per way).
    fade_s : float
        Crossfade time of a switch.
    captures : int
        ADC capture sources the ring carries after the chains (``n_chains + 1`` or 0; see
        :func:`filtertwin.live.capture.source_gains`); the mixer sees them as more chains.
    oversampling : Oversampling, optional
        When the runner runs at a multiple of the stream rate (its ``max_frames`` is
        ``block_frames`` times the factor).
    noise : NoiseAdder, optional
        Adds every chain's circuit noise to its output before the mixer (``noise on``).
    """

    def __init__(
        self,
        *,
        n_chains: int,
        channels: int,
        block_frames: int,
        rate_hz: float,
        runner: CascadeRunner | None,
        ring: BlockRing | None,
        safety: OutputSafety,
        pairs: int = 1,
        fade_s: float = 0.03,
        captures: int = 0,
        oversampling: Oversampling | None = None,
        noise: NoiseAdder | None = None,
    ) -> None:
        if channels not in (1, 2):
            raise ValueError(f"channels must be 1 or 2, got {channels}")
        if runner is None and ring is None:
            raise ValueError("without a runner the ring must carry the chains' outputs")
        if captures and runner is not None:
            raise ValueError("capture sources come from the ring: give no runner with them")
        self.n_chains = n_chains
        mixed = n_chains + captures
        self.dry_meter = mixed
        """Index of the dry input's peak in :attr:`meters` (the output's is the next)."""
        self.channels = channels
        self.block_frames = block_frames
        self.rate_hz = rate_hz
        self.runner = runner
        self.oversampling = oversampling
        self.ring = ring
        self.safety = safety
        self.noise = noise
        self.out_channels = 2 * pairs
        n_sources = 1 if runner is not None else mixed + 1
        self.sources = np.zeros((n_sources, block_frames, channels), dtype=np.float32)
        self.dry = self.sources[n_sources - 1]
        self._ring_chains = self.sources[:mixed]
        self.mixers = [SelectionMixer(mixed, rate_hz, fade_s) for _ in range(pairs)]
        self._mixer_columns = [(mixer, 2 * p) for p, mixer in enumerate(self.mixers)]
        self.meters = np.zeros(mixed + 2)
        self._fall = 10.0 ** (-METER_FALL_DB_PER_S * block_frames / rate_hz / 20.0)
        self.counters = np.zeros(4, dtype=np.int64)
        self.cpu_s = np.zeros(CPU_HISTORY)
        self.blend: ChainBlend | None = None
        """A chain being crossfaded to new sections (see ``chains.BlendedSwap``)."""
        self._clock = time.perf_counter
        self.tap: SignalTap | None = None
        """Where the preview window's spectrum copies from (set before the stream starts)."""

    @property
    def period_s(self) -> float:
        """Duration of one block."""
        return self.block_frames / self.rate_hz

    def request(self, gains_per_pair: list[np.ndarray]) -> None:
        """Crossfade every output pair to its new source gains (from the control thread)."""
        for mixer, gains in zip(self.mixers, gains_per_pair, strict=True):
            mixer.request(gains)

    def blocks_done(self) -> int:
        """Callbacks completed so far."""
        return int(self.counters[BLOCKS])

    def callback(
        self, indata: np.ndarray, outdata: np.ndarray, frames: int, time_info: Any, status: Any
    ) -> None:
        """sounddevice callback of a duplex stream (live input)."""
        self.process(indata, outdata, bool(status))

    def output_callback(
        self, outdata: np.ndarray, frames: int, time_info: Any, status: Any
    ) -> None:
        """sounddevice callback of an output stream (a recording)."""
        self.process(None, outdata, bool(status))

    def process(self, indata: np.ndarray | None, outdata: np.ndarray, xrun: bool) -> None:
        """Fill ``outdata`` (frames, out_channels) float32 for one block. Allocates no arrays.

        Parameters
        ----------
        indata : numpy.ndarray or None
            Live input ``(frames, channels)``, or None to read the ring.
        outdata : numpy.ndarray
            The block to fill.
        xrun : bool
            True when the stream reported a status flag for this block.
        """
        started = self._clock()
        counters = self.counters
        if xrun:
            counters[XRUNS] += 1
        if outdata.shape[0] != self.block_frames:
            outdata.fill(0.0)
            counters[ODD_BLOCKS] += 1
            return
        if indata is None:
            got = self.ring.read_into(self.sources)  # type: ignore[union-attr]
            counters[STARVED_FRAMES] += self.block_frames - got
        else:
            np.copyto(self.dry, indata)
        runner = self.runner
        if runner is None:
            chains = self._ring_chains
        elif self.oversampling is None:
            chains = runner.process(self.dry)
            if self.blend is not None:
                self.blend.process(self.dry, chains)
        else:
            chains = self.oversampling.process(runner, self.dry, self.blend)
        if self.noise is not None:
            chains = self.noise.add(chains)
        for mixer, column in self._mixer_columns:
            mixer.process(chains, self.dry, outdata, column, 2)
        self.safety.process(outdata)
        _meter_kernel(chains, self.dry, outdata, self.meters, self._fall)
        if self.tap is not None:
            self.tap.write(self.dry, outdata)
        done = counters[BLOCKS]
        self.cpu_s[done % CPU_HISTORY] = self._clock() - started
        counters[BLOCKS] = done + 1

    def prime(self) -> None:
        """Run the callback path once on silence, compiling every kernel signature it uses.

        Counters, meters and the safety ramp are left as they were.
        """
        saved = (self.counters.copy(), self.meters.copy(), self.cpu_s.copy())
        safety, self.safety = self.safety, OutputSafety(self.rate_hz)  # its ramp stays put
        out = np.zeros((self.block_frames, self.out_channels), dtype=np.float32)
        indata = np.zeros((self.block_frames, self.channels), dtype=np.float32)
        ring_positions = None if self.ring is None else self.ring.positions.copy()
        self.process(indata if self.ring is None else None, out, False)
        if self.ring is not None and ring_positions is not None:
            self.ring.positions[:] = ring_positions
        self.counters[:], self.meters[:], self.cpu_s[:] = saved
        self.safety = safety


def warm_up() -> None:
    """Compile the meter kernel now, before a stream starts."""
    block = np.zeros((2, 2), dtype=np.float32)
    _meter_kernel(np.zeros((1, 2, 2), dtype=np.float32), block, block, np.zeros(3), 0.5)


class PreFilter:
    """Filter at the recording's rate and resample to the stream rate (read-ahead thread).

    Parameters
    ----------
    runner : CascadeRunner
        float64 runner at the recording's rate (replaceable: :attr:`runner`).
    resampler : StreamResampler or None
        For ``(n_chains + 1) * channels`` channels: every chain's output and the dry input;
        None when the recording is at the stream's rate.
    capture : AdcCapture, optional
        For as many channels: adds what the ADC captures of each (``--adc-rate``).
    oversampling : Oversampling, optional
        When the runner runs at a multiple of the recording's rate.
    """

    def __init__(
        self,
        runner: CascadeRunner,
        resampler: StreamResampler | None,
        capture: AdcCapture | None = None,
        oversampling: Oversampling | None = None,
    ) -> None:
        self.runner = runner
        self.resampler = resampler
        self.capture = capture
        self.oversampling = oversampling
        self.blocks = 0
        self.blend: ChainBlend | None = None

    def blocks_done(self) -> int:
        """Blocks filtered so far."""
        return self.blocks

    def __call__(self, block: np.ndarray) -> np.ndarray:
        """``(frames, channels)`` float64 at the recording rate -> ``(sources, m, channels)``
        float32 at the stream rate: the chains, then (with a capture) the capture of each
        chain and of the dry input, and the dry input last."""
        frames, channels = block.shape
        if self.oversampling is None:
            chains = self.runner.process(block)
            if self.blend is not None:
                self.blend.process(block, chains)
        else:
            block = block.copy()  # delayed in place to line up with the chains
            chains = self.oversampling.process(self.runner, block, self.blend)
        joined = np.concatenate([chains, block[np.newaxis]])
        flat = joined.transpose(1, 0, 2).reshape(frames, -1)
        out = flat if self.resampler is None else self.resampler.process(flat)
        if self.capture is not None:
            out, captured = self.capture.process(out, flat)
            split = len(chains) * channels
            out = np.concatenate([out[:, :split], captured, out[:, split:]], axis=1)
        self.blocks += 1
        return np.ascontiguousarray(
            out.reshape(len(out), -1, channels).transpose(1, 0, 2), dtype=np.float32
        )


class Feeder:
    """Read-ahead thread: a recording, looped, into a ring (optionally pre-filtered).

    Parameters
    ----------
    info : RecordingInfo
        The recording.
    ring : BlockRing
        Where the blocks go.
    chunk_frames : int
        Frames read (at the recording's rate) per step.
    channels : int
        Channels written (the recording's channels, at most 2).
    prefilter : callable, optional
        ``(frames, channels)`` float64 -> ``(sources, m, channels)`` float32; default: the
        block itself as one source.
    """

    def __init__(
        self,
        info: RecordingInfo,
        ring: BlockRing,
        chunk_frames: int,
        channels: int,
        prefilter: Callable[[np.ndarray], np.ndarray] | None = None,
    ) -> None:
        self.info = info
        self.ring = ring
        self.chunk_frames = chunk_frames
        self.channels = channels
        self.prefilter = prefilter
        self.error: BaseException | None = None
        self.reader = LoopReader(info, chunk_frames, channels)
        """What is read: the whole recording, or a region, with jumps (``reader.request``)."""
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="filtertwin-read-ahead", daemon=True)
        # wait a small part of the time the full ring lasts before looking for room again
        self._poll_s = min(0.01, ring.capacity_frames / info.rate_hz / 8)

    def _blocks(self) -> Any:
        yield from self.reader.blocks()

    @property
    def loops(self) -> int:
        """Times the loop came round to its start."""
        return self.reader.loops

    def _prepare(self, block: np.ndarray) -> np.ndarray:
        if self.prefilter is None:
            return np.ascontiguousarray(block[np.newaxis], dtype=np.float32)
        return self.prefilter(np.ascontiguousarray(block))

    def _run(self) -> None:
        try:
            for block in self._blocks():
                data = self._prepare(block)
                offset = 0
                while offset < data.shape[1]:
                    if self._stop.is_set():
                        return
                    written = self.ring.write(data, offset)
                    offset += written
                    if offset < data.shape[1]:
                        time.sleep(self._poll_s)
        except BaseException as error:  # handed to the control thread, which reports it
            self.error = error

    def start(self, fill_timeout_s: float = 10.0) -> None:
        """Start the thread and wait until the ring is full (or the timeout, or an error)."""
        self._thread.start()
        deadline = time.monotonic() + fill_timeout_s
        while self.ring.room_frames > 0 and self.error is None and time.monotonic() < deadline:
            time.sleep(0.002)

    def stop(self) -> None:
        """Stop the thread (safe to call twice, or before start)."""
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join()
