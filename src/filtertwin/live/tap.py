"""A copy of what goes in and what comes out, for the preview window's live spectrum.

The audio callback only copies: :meth:`SignalTap.write` puts the block's dry input and its
output (after the ceiling, as heard), each averaged over its channels, into a preallocated
ring of ``CAPACITY_FRAMES`` frames, and moves one counter. Everything else (windowing, FFT,
the page) happens in the control side, which copies the latest frames out with
:meth:`SignalTap.latest` and may lose a race with the writer by at most one block at the
oldest end of what it reads, far outside the frames an analysis window weights.
"""

from __future__ import annotations

import numba
import numpy as np

CAPACITY_FRAMES = 16384
"""Frames kept (a power of two, about 0.34 s at 48 kHz): four 4096-frame analysis windows."""
DRY, OUT = 0, 1


@numba.njit(cache=True)
def _tap_kernel(dry: np.ndarray, out: np.ndarray, ring: np.ndarray, written: np.ndarray) -> None:
    """Append the channel means of ``dry`` (frames, ch) and ``out[:, :2]`` to the ring."""
    mask = ring.shape[1] - 1  # the capacity is a power of two
    start = written[0]
    frames = dry.shape[0]
    dry_scale = 1.0 / dry.shape[1]
    out_channels = min(2, out.shape[1])
    out_scale = 1.0 / out_channels
    for f in range(frames):
        row = (start + f) & mask
        total = 0.0
        for c in range(dry.shape[1]):
            total += dry[f, c]
        ring[DRY, row] = total * dry_scale
        total = 0.0
        for c in range(out_channels):
            total += out[f, c]
        ring[OUT, row] = total * out_scale
    written[0] = start + frames


class SignalTap:
    """Ring of the dry input and the output (mono), written by the audio callback."""

    def __init__(self, capacity_frames: int = CAPACITY_FRAMES) -> None:
        if capacity_frames < 16 or capacity_frames & (capacity_frames - 1):
            raise ValueError(f"capacity_frames must be a power of two >= 16, got {capacity_frames}")
        self.ring = np.zeros((2, capacity_frames), dtype=np.float32)
        self.written = np.zeros(1, dtype=np.int64)

    def write(self, dry: np.ndarray, out: np.ndarray) -> None:
        """Copy one block in (audio callback; allocates nothing)."""
        _tap_kernel(dry, out, self.ring, self.written)

    def latest(self, frames: int) -> tuple[np.ndarray, np.ndarray, int]:
        """The last ``frames`` frames of the dry input and of the output (control side).

        Returns
        -------
        dry, out : numpy.ndarray
            float64 copies, oldest first (zeros before anything was written).
        written : int
            Frames written so far.
        """
        capacity = self.ring.shape[1]
        if not 0 < frames <= capacity:
            raise ValueError(f"frames must be 1 to {capacity}, got {frames}")
        written = int(self.written[0])
        end = written % capacity
        data = np.empty((2, frames))
        if frames <= end:
            data[:] = self.ring[:, end - frames : end]
        else:  # the stretch wraps round the end of the ring
            data[:, : frames - end] = self.ring[:, capacity - (frames - end) :]
            data[:, frames - end :] = self.ring[:, :end]
        if written < frames:
            data[:, : frames - written] = 0.0
        return data[DRY], data[OUT], written


def warm_up() -> None:
    """Compile the kernel now, before a stream starts."""
    tap = SignalTap(16)
    block = np.zeros((4, 2), dtype=np.float32)
    tap.write(block, block)
    tap.write(np.zeros((4, 1), dtype=np.float32), block)
