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

import numpy as np

from filtertwin.engine import CascadeRunner

SETTLE_BLOCKS = 2
SETTLE_TIMEOUT_S = 0.25


class ChainHost(Protocol):
    """Something that runs a runner block by block (its ``runner`` is a CascadeRunner; the
    stream core types it optional, as it has none when the read-ahead thread filters)."""

    runner: Any

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
