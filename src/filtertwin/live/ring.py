"""A bounded single-producer, single-consumer ring buffer of multi-source audio frames.

The read-ahead thread writes, the audio callback reads. The buffer holds ``sources``
signals side by side (the dry input alone, or every chain's output and the dry input when
the filtering happens in the read-ahead thread), each ``(frames, channels)`` float32.
Positions are two int64 counters that only grow: the writer moves ``written`` after the
samples are in place, the reader moves ``read`` after it has copied them out, so each side
only ever writes its own counter. The compiled kernels hold the interpreter lock while they
run, so the two sides never see a half-moved counter.
"""

from __future__ import annotations

import numba
import numpy as np

_WRITTEN, _READ = 0, 1


@numba.njit(cache=True)
def _read_kernel(buffer: np.ndarray, out: np.ndarray, positions: np.ndarray) -> int:
    """Copy up to ``out.shape[1]`` frames out; zero the rest of ``out``; return frames read."""
    sources, capacity, channels = buffer.shape
    frames = out.shape[1]
    available = positions[_WRITTEN] - positions[_READ]
    n = min(frames, available)
    start = positions[_READ] % capacity
    for s in range(sources):
        for f in range(n):
            row = (start + f) % capacity
            for c in range(channels):
                out[s, f, c] = buffer[s, row, c]
        for f in range(n, frames):
            for c in range(channels):
                out[s, f, c] = 0.0
    positions[_READ] += n
    return n


@numba.njit(cache=True)
def _write_kernel(buffer: np.ndarray, block: np.ndarray, offset: int, positions: np.ndarray) -> int:
    """Copy frames ``offset:`` of ``block`` in, as many as fit; return frames written."""
    sources, capacity, channels = buffer.shape
    room = capacity - (positions[_WRITTEN] - positions[_READ])
    n = max(0, min(block.shape[1] - offset, room))
    start = positions[_WRITTEN] % capacity
    for s in range(sources):
        for f in range(n):
            row = (start + f) % capacity
            for c in range(channels):
                buffer[s, row, c] = block[s, offset + f, c]
    positions[_WRITTEN] += n
    return n


class BlockRing:
    """Bounded ring of ``(sources, frames, channels)`` float32 audio.

    Parameters
    ----------
    sources : int
        Signals carried side by side.
    capacity_frames : int
        Frames the ring holds (per source).
    channels : int
        Channels per signal.
    """

    def __init__(self, sources: int, capacity_frames: int, channels: int) -> None:
        if sources < 1 or capacity_frames < 1 or channels < 1:
            raise ValueError(
                f"sources, capacity_frames and channels must be >= 1, got "
                f"{sources}, {capacity_frames}, {channels}"
            )
        self.buffer = np.zeros((sources, capacity_frames, channels), dtype=np.float32)
        self.positions = np.zeros(2, dtype=np.int64)

    @property
    def capacity_frames(self) -> int:
        """Frames the ring holds."""
        return int(self.buffer.shape[1])

    @property
    def available_frames(self) -> int:
        """Frames written and not yet read."""
        return int(self.positions[_WRITTEN] - self.positions[_READ])

    @property
    def room_frames(self) -> int:
        """Frames that can be written now."""
        return self.capacity_frames - self.available_frames

    def write(self, block: np.ndarray, offset: int = 0) -> int:
        """Write frames ``offset:`` of a ``(sources, frames, channels)`` float32 block, as
        many as fit.

        Returns
        -------
        int
            Frames written (less than given when the ring is full).
        """
        return int(_write_kernel(self.buffer, block, offset, self.positions))

    def read_into(self, out: np.ndarray) -> int:
        """Fill ``out`` ``(sources, frames, channels)``; frames not available become zeros.

        Allocates nothing: safe in an audio callback.

        Returns
        -------
        int
            Frames that came from the ring.
        """
        return _read_kernel(self.buffer, out, self.positions)


def warm_up() -> None:
    """Compile the kernels now, before a stream starts."""
    ring = BlockRing(1, 4, 2)
    block = np.zeros((1, 2, 2), dtype=np.float32)
    ring.write(block)
    ring.read_into(block)
