"""Swapping rebuilt chains into a runner that another thread is using.

The runner belongs to a *host*: the audio callback (:class:`~filtertwin.live.stream.StreamCore`)
or the read-ahead pre-filter (:class:`~filtertwin.live.stream.PreFilter`). The control
thread never calls the runner's ``process``; it either

* calls ``set_chain`` (same section count: the chain keeps its state; the runner makes
  the new coefficients visible to the next block whole), waiting until the host has run two
  more blocks before the next ``set_chain``, so the runner's spare buffer is no longer in
  use when it is written again; or
* builds a new runner outside the audio thread (another section count), primes it, copies
  the state of every chain whose sections did not change, and replaces the host's
  ``runner`` reference in one store, taken up at the next block.
"""

from __future__ import annotations

import time
from collections.abc import Mapping, Sequence
from typing import Any, Protocol

import numba
import numpy as np

from filtertwin.digital.engine import CascadeRunner

SETTLE_BLOCKS = 2
SETTLE_TIMEOUT_S = 0.25


class ChainHost(Protocol):
    """Something that runs a runner block by block (its ``runner`` is a CascadeRunner; the
    stream core types it optional, as it has none when the read-ahead thread filters)."""

    runner: Any
    blend: Any  # ChainBlend or None: a chain being crossfaded to new sections

    def blocks_done(self) -> int:
        """Blocks processed so far."""
        ...


class ChainSwapper:
    """Replaces chains of a host's runner from the control thread.

    Parameters
    ----------
    host : ChainHost
        The owner of the runner.
    """

    def __init__(self, host: ChainHost) -> None:
        self.host = host
        self.clip_base = np.zeros_like(host.runner.clip_counts)
        self.slew_base = np.zeros_like(host.runner.slew_counts)
        self._last_swap_block: int | None = None

    def clip_counts(self) -> np.ndarray:
        """Clamped samples per chain and section since the start, over every runner used."""
        return self.clip_base + self.host.runner.clip_counts

    def slew_counts(self) -> np.ndarray:
        """Slew-limited samples per chain and section since the start, over every runner."""
        return self.slew_base + self.host.runner.slew_counts

    def _settle(self) -> None:
        if self._last_swap_block is None:
            return
        deadline = time.monotonic() + SETTLE_TIMEOUT_S
        while (
            self.host.blocks_done() < self._last_swap_block + SETTLE_BLOCKS
            and time.monotonic() < deadline
        ):
            time.sleep(0.001)

    def swap(
        self,
        changes: Mapping[int, tuple[np.ndarray, ...]],
        all_sos: Sequence[np.ndarray],
        all_levels: Sequence[np.ndarray],
        all_steps: Sequence[np.ndarray] | None = None,
    ) -> None:
        """Put new chains in place.

        Parameters
        ----------
        changes : dict
            Chain index -> (sos, clip levels) or (sos, clip levels, slew steps) of the chains
            that changed.
        all_sos, all_levels, all_steps : sequence of numpy.ndarray
            Every chain after the change (used when a new runner is needed).
        """
        runner = self.host.runner
        same_shape = all(runner.n_sections[i] == len(c[0]) for i, c in changes.items())
        if same_shape:
            for index, (sos, levels, *steps) in changes.items():
                self._settle()
                runner.set_chain(index, sos, levels, *steps)
                self._last_swap_block = self.host.blocks_done()
            return
        new = CascadeRunner(
            list(all_sos),
            runner.channels,
            runner.max_frames,
            list(all_levels),
            runner.dtype,
            None if all_steps is None else list(all_steps),
        )
        new.process(np.zeros((runner.max_frames, runner.channels), dtype=runner.dtype))
        new.reset()
        counts, slews = runner.clip_counts, runner.slew_counts
        last, new_last = runner.last_outputs, new.last_outputs
        for chain in range(runner.n_chains):
            if chain not in changes:
                n = runner.n_sections[chain]
                new.state[chain, :n] = runner.state[chain, :n]
                new_last[chain, :n] = last[chain, :n]  # where a slew limit moves on from
        new.set_last_outputs(new_last)
        self.host.runner = new  # one reference store: the next block uses the new runner
        base = np.zeros_like(new.clip_counts)
        width = min(base.shape[1], counts.shape[1])
        base[:, :width] = self.clip_base[:, :width] + counts[:, :width]
        self.clip_base = base
        slew_base = np.zeros_like(new.slew_counts)
        slew_base[:, :width] = self.slew_base[:, :width] + slews[:, :width]
        self.slew_base = slew_base


# --- crossfaded edits ----------------------------------------------------------------------

WARM_TAU = 8.0
"""Warm-up of a chain that starts from another chain's state, in time constants of its
slowest pole: the start-up error decays to e^-8 (-70 dB) before it is heard."""
MIN_WARM_S, MAX_WARM_S = 0.05, 0.5
_TARGET, _POSITION, _FADE, _FRAMES = 0, 1, 2, 3


@numba.njit(cache=True)
def _blend_kernel(chains: np.ndarray, chain: int, spare: np.ndarray, control: np.ndarray) -> None:
    """Mix the spare's output into ``chains[chain]`` with weight ``position / fade``, the
    position moving one frame at a time towards the target (an equal-gain crossfade)."""
    frames = chains.shape[1]
    channels = chains.shape[2]
    position = control[_POSITION]
    target = control[_TARGET]
    fade = control[_FADE]
    for n in range(frames):
        if position < target:
            position += 1
        elif position > target:
            position -= 1
        if position != 0:
            w = position / fade
            for c in range(channels):
                old = np.float64(chains[chain, n, c])
                chains[chain, n, c] = old + (np.float64(spare[0, n, c]) - old) * w
    control[_POSITION] = position
    control[_FRAMES] += frames


def warm_frames(sos: np.ndarray, rate_hz: float) -> int:
    """Frames a chain needs to forget the state it started from (see :data:`WARM_TAU`)."""
    radius = max((float(np.max(np.abs(np.roots(s[3:])))) for s in sos), default=0.0)
    tau_frames = -1.0 / np.log(radius) if 0.0 < radius < 1.0 else 0.0
    return int(np.clip(WARM_TAU * tau_frames, MIN_WARM_S * rate_hz, MAX_WARM_S * rate_hz))


class ChainBlend:
    """A second, warm copy of one chain with new sections, crossfaded in and out of it.

    The host (audio callback or read-ahead pre-filter) calls :meth:`process` after its
    runner: the spare runs the same input, and its output replaces the chain's own by an
    equal-gain crossfade whose direction the control thread sets with :meth:`fade_to`.
    Nothing is allocated per block (the spare runner is primed here).

    Parameters
    ----------
    runner : CascadeRunner
        The host's runner (channels, dtype, block size and the chain's present state).
    chain : int
        The chain to take over.
    sos, levels, steps : numpy.ndarray
        The chain's new sections, clip levels and slew steps.
    fade_frames : int
        Length of the crossfade.
    """

    def __init__(
        self,
        runner: CascadeRunner,
        chain: int,
        sos: np.ndarray,
        levels: np.ndarray,
        steps: np.ndarray,
        fade_frames: int,
    ) -> None:
        self.chain = chain
        self.sos = sos
        self.levels = levels
        self.steps = steps
        self.spare = CascadeRunner(
            [sos], runner.channels, runner.max_frames, [levels], runner.dtype, [steps]
        )
        self.spare.process(np.zeros((runner.max_frames, runner.channels), dtype=runner.dtype))
        n = min(len(sos), runner.n_sections[chain])
        self.spare.state[0] = 0.0
        self.spare.state[0, :n] = runner.state[chain, :n]  # a start near the present state
        last = self.spare.last_outputs
        last[0] = 0.0
        last[0, :n] = runner.last_outputs[chain, :n]  # where a slew limit moves on from
        self.spare.set_last_outputs(last)
        self.control = np.array([0, 0, max(1, fade_frames), 0], dtype=np.int64)

    def process(self, block: np.ndarray, chains: np.ndarray) -> None:
        """Run the spare on ``block`` and blend it into ``chains`` (in place)."""
        _blend_kernel(chains, self.chain, self.spare.process(block), self.control)

    def fade_to(self, spare: bool) -> None:
        """Crossfade towards the spare's output (True) or the chain's own (False)."""
        self.control[_TARGET] = self.control[_FADE] if spare else 0

    @property
    def frames_run(self) -> int:
        """Frames the spare has run so far."""
        return int(self.control[_FRAMES])

    @property
    def settled(self) -> bool:
        """True when the crossfade has reached its target."""
        return bool(self.control[_POSITION] == self.control[_TARGET])


class BlendedSwap:
    """One chain's change, heard without a click: warm spare, fade in, swap, fade back.

    Steps, each taken by :meth:`advance` once the audio thread has got there:

    1. the spare with the new sections runs unheard until it has forgotten its start;
    2. it is crossfaded in (now the change is heard);
    3. the runner's own chain gets the new sections (``set_chain``, state kept) and runs
       unheard until it too has forgotten the change;
    4. the chain's own output is crossfaded back (the two are equal by now) and the spare
       is dropped.

    Parameters
    ----------
    host : ChainHost
        Owner of the runner; it must have a ``blend`` attribute (None when idle).
    chain : int
        The chain to change.
    sos, levels, steps : numpy.ndarray
        Its new sections, clip levels and slew steps.
    old_sos : numpy.ndarray
        Its present sections (their slowest pole sets the second warm-up too).
    rate_hz : float
        Rate the runner runs at.
    fade_frames : int
        Crossfade length.
    """

    def __init__(
        self,
        host: ChainHost,
        chain: int,
        sos: np.ndarray,
        levels: np.ndarray,
        steps: np.ndarray,
        old_sos: np.ndarray,
        rate_hz: float,
        fade_frames: int,
    ) -> None:
        self.host = host
        self.blend = ChainBlend(host.runner, chain, sos, levels, steps, fade_frames)
        self.warm = max(warm_frames(sos, rate_hz), warm_frames(old_sos, rate_hz))
        self.step = 1
        self._mark = 0
        host.blend = self.blend  # one reference store: taken up at the next block

    @property
    def done(self) -> bool:
        """True once the spare is gone and the chain plays its new sections itself."""
        return self.step == 5

    def advance(self) -> None:
        """Take every step the audio thread has made possible (control thread)."""
        blend = self.blend
        if self.step == 1 and blend.frames_run >= self.warm:
            blend.fade_to(True)
            self.step = 2
        if self.step == 2 and blend.settled:
            self.host.runner.set_chain(blend.chain, blend.sos, blend.levels, blend.steps)
            self._mark = blend.frames_run
            self.step = 3
        if self.step == 3 and blend.frames_run >= self._mark + self.warm:
            blend.fade_to(False)
            self.step = 4
        if self.step == 4 and blend.settled and blend.frames_run > self._mark + self.warm:
            self.host.blend = None
            self.step = 5


def warm_up() -> None:
    """Compile the blend kernel for both sample types, before a stream starts."""
    control = np.array([1, 0, 2, 0], dtype=np.int64)
    for dtype in (np.float32, np.float64):
        _blend_kernel(np.zeros((1, 2, 1), dtype), 0, np.zeros((1, 2, 1), dtype), control)
