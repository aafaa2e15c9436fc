"""The circuit's own noise in a live stream (``noise on|off``, key ``n``, ``--circuit-noise``).

Every chain (a candidate's way) gets the noise its built board adds at its output: the
density :func:`filtertwin.circuit.noise.filter_noise` computes from the node equations, made into a
signal by :class:`filtertwin.circuit.noise.CircuitNoiseSource` (the same shaping FIR as
``render --circuit-noise``), in full-scale units at the stream's rate.

Nothing of it is computed in the audio callback. :class:`NoiseFeeder` is a thread of its own
that builds the sources (a few tenths of a second per filter) when the noise is first asked
for, then keeps a
:class:`~filtertwin.live.ring.BlockRing` of every chain's noise full, and rebuilds one
candidate's source after a part or corner edit (the new density is heard once the ring has
played out, about a third of a second). :class:`NoiseAdder`, called by the callback, reads
the ring and adds each chain's noise to that chain's output before the mixer, so the noise
gets the chain's own gain: level matching, solo and mute, ways out, output level and
ceiling. Switching fades the noise in or out along a straight line over the crossfade time.
"""

from __future__ import annotations

import threading
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numba
import numpy as np

from filtertwin.circuit.design import Design
from filtertwin.live.ring import BlockRing

if TYPE_CHECKING:
    from filtertwin.circuit.noise import CircuitNoiseSource

CHUNK_FRAMES = 8192
"""Frames of noise made per step of the thread (the shaping FIR is long: big steps)."""
RING_CHUNKS = 2
READY_TIMEOUT_S = 30.0
_GAIN, _TARGET, _STEP = 0, 1, 2


@numba.njit(cache=True)
def _add_kernel(
    chains: np.ndarray,
    buffer: np.ndarray,
    positions: np.ndarray,
    out: np.ndarray,
    with_noise: int,
    state: np.ndarray,
    starved: np.ndarray,
) -> None:
    """``out = chains`` plus, for the first ``with_noise`` chains, ``gain`` times the next
    frames of noise ``k`` (``k - n`` for a capture) in the ring ``buffer`` (nothing where
    the ring has none: counted in ``starved``); the gain moves to its target by a fixed
    step per frame."""
    sources, frames, channels = chains.shape
    n, capacity, _ = buffer.shape
    got = min(frames, positions[0] - positions[1])
    row = positions[1] % capacity
    gain, target, step = state[_GAIN], state[_TARGET], state[_STEP]
    for f in range(frames):
        if gain < target:
            gain = min(target, gain + step)
        elif gain > target:
            gain = max(target, gain - step)
        heard = gain if f < got else 0.0
        for k in range(sources):
            noise = k if k < n else k - n
            for c in range(channels):
                value = np.float64(chains[k, f, c])
                if k < with_noise:
                    value += heard * np.float64(buffer[noise, row, c])
                out[k, f, c] = value
        row += 1
        if row == capacity:
            row = 0
    state[_GAIN] = gain
    positions[1] += got
    starved[0] += frames - got


class NoiseAdder:
    """Adds every chain's noise from a ring to the chains' outputs (in the audio callback).

    Parameters
    ----------
    ring : BlockRing
        ``n_chains`` noise signals (filled by a :class:`NoiseFeeder`).
    sources : int
        Sources the callback hands over: the chains, and with an ADC capture the capture of
        every chain and of the dry input after them.
    block_frames : int
    rate_hz : float
    fade_s : float
        Time the noise takes to fade in or out.

    Notes
    -----
    With the ADC capture, each chain's capture gets the same noise as the chain (not sampled
    by the ADC: the noise is only heard, its aliases are not modelled).
    """

    def __init__(
        self, ring: BlockRing, sources: int, block_frames: int, rate_hz: float, fade_s: float
    ) -> None:
        n_chains, _, channels = ring.buffer.shape
        self.ring = ring
        self._buffer, self._positions = ring.buffer, ring.positions
        self.with_noise = n_chains if sources == n_chains else 2 * n_chains
        self.out = np.zeros((sources, block_frames, channels), dtype=np.float32)
        self.state = np.array([0.0, 0.0, 1.0 / max(1, round(fade_s * rate_hz))])
        self.starved_frames = np.zeros(1, dtype=np.int64)

    @property
    def on(self) -> bool:
        """True when the noise is on (or fading in)."""
        return bool(self.state[_TARGET] > 0.0)

    def switch(self, on: bool) -> None:
        """Fade the noise in or out from the next block (control thread)."""
        self.state[_TARGET] = 1.0 if on else 0.0

    def add(self, chains: np.ndarray) -> np.ndarray:
        """The chains with their noise, or ``chains`` itself while the noise is off.

        Allocates nothing: safe in an audio callback.
        """
        state = self.state
        if state[_GAIN] == 0.0 and state[_TARGET] == 0.0:
            return chains
        out = self.out
        _add_kernel(
            chains, self._buffer, self._positions, out, self.with_noise, state, self.starved_frames
        )  # fmt: skip
        return out


class NoiseFeeder:
    """A thread that makes every chain's circuit noise and keeps a ring of it full.

    Parameters
    ----------
    designs : sequence of Design
        Each candidate's design; its filters are its chains, in order.
    rate_hz : float
        Stream rate.
    channels : int
        Channels of each chain (each channel its own, independent noise).
    ring : BlockRing
        ``sum(len(d.filters))`` sources.
    seed : int
        Seed of the first candidate's noise; every source built after it (the other
        candidates, then each edit) takes the next one.
    """

    def __init__(
        self,
        designs: Sequence[Design],
        rate_hz: float,
        channels: int,
        ring: BlockRing,
        seed: int = 1,
    ) -> None:
        self.designs = list(designs)
        self.rate_hz = rate_hz
        self.channels = channels
        self.ring = ring
        self.seed = seed
        self._builds = 0
        self.error: BaseException | None = None
        self.ready = threading.Event()
        self._sources: list[CircuitNoiseSource] = []
        self._redesigned: dict[int, Design] = {}
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="filtertwin-noise", daemon=True)
        self._poll_s = min(0.01, ring.capacity_frames / rate_hz / 8)

    def _source(self, design: Design) -> CircuitNoiseSource:
        from filtertwin.circuit.noise import CircuitNoiseSource

        names = [f.name for f in design.filters]
        seed = self.seed + self._builds
        self._builds += 1
        return CircuitNoiseSource(design, names, self.rate_hz, self.channels, seed=seed)

    def redesign(self, index: int, design: Design) -> None:
        """Make candidate ``index``'s noise follow an edited design (from the next chunk on
        after the thread has rebuilt it)."""
        with self._lock:
            self._redesigned[index] = design

    def _take_redesigns(self) -> None:
        with self._lock:
            todo, self._redesigned = self._redesigned, {}
        for index, design in todo.items():
            self._sources[index] = self._source(design)
            self.designs[index] = design

    def _chunk(self) -> np.ndarray:
        parts = [source.next(CHUNK_FRAMES) for source in self._sources]
        return np.ascontiguousarray(np.concatenate(parts), dtype=np.float32)

    def _run(self) -> None:
        try:
            self._sources = [self._source(d) for d in self.designs]
            while not self._stop.is_set():
                self._take_redesigns()
                data, offset = self._chunk(), 0
                while offset < data.shape[1]:
                    offset += self.ring.write(data, offset)
                    if self.ring.room_frames == 0:
                        self.ready.set()
                        if self._stop.wait(self._poll_s):
                            return
        except BaseException as error:  # handed to the control thread, which reports it
            self.error = error
            self.ready.set()

    def start(self) -> None:
        """Start the thread (the sources are built in it); again: nothing."""
        if self._thread.ident is None:
            self._thread.start()

    def wait_ready(self, timeout_s: float = READY_TIMEOUT_S) -> None:
        """Wait until the ring is full (or the timeout); raise what the thread raised."""
        self.ready.wait(timeout_s)
        if self.error is not None:
            raise self.error

    def stop(self) -> None:
        """Stop the thread (safe to call twice, or before start)."""
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join()


def noise_ring(n_chains: int, channels: int) -> BlockRing:
    """The ring between a :class:`NoiseFeeder` and a :class:`NoiseAdder`."""
    return BlockRing(n_chains, RING_CHUNKS * CHUNK_FRAMES, channels)


def warm_up() -> None:
    """Compile the kernel now, before a stream starts."""
    block = np.zeros((1, 2, 2), dtype=np.float32)
    positions = np.zeros(2, dtype=np.int64)
    state = np.array([0.0, 1.0, 0.5])
    _add_kernel(block, block, positions, block.copy(), 1, state, np.zeros(1, dtype=np.int64))


class LiveNoise:
    """What the control thread holds of the live noise: the callback's adder and the thread.

    Parameters
    ----------
    adder : NoiseAdder
    feeder : NoiseFeeder
    """

    def __init__(self, adder: NoiseAdder, feeder: NoiseFeeder) -> None:
        self.adder = adder
        self.feeder = feeder

    @property
    def on(self) -> bool:
        """True when the noise is on."""
        return self.adder.on

    def switch(self, on: bool) -> None:
        """Fade the noise in or out; the first time, start making it and wait until it is
        there (the thread runs only once the noise is asked for: it costs CPU time)."""
        if on:
            self.feeder.start()
            self.feeder.wait_ready()
        self.adder.switch(on)

    def redesign(self, index: int, design: Design) -> None:
        """Make candidate ``index``'s noise follow its edited design."""
        self.feeder.redesign(index, design)

    @property
    def used(self) -> bool:
        """True once the noise has been asked for (its thread started)."""
        return self.feeder.ready.is_set()

    @property
    def starved_frames(self) -> int:
        """Frames the callback wanted noise for and the thread had not made yet."""
        return int(self.adder.starved_frames[0])
