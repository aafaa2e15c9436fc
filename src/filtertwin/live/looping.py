"""Which stretch of the recording the read-ahead thread plays, and jumps within it.

:class:`LoopReader` yields the recording in blocks, over and over, between a start and an
end frame (the whole file unless a region is asked for). A jump or a new region, asked for
from the control thread with :meth:`LoopReader.request`, is taken at the next block the
read-ahead thread reads; the old continuation and the new start are crossfaded over
``fade_frames`` (equal gain), so the jump is heard without a click once the read-ahead
buffer in front of it has played. Going round a region is crossfaded the same way, from what
follows its end into its start (at the end of the file nothing follows: the file's own end
meets its start, as a recording made to loop expects).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from filtertwin.files.recordinginfo import RecordingInfo
from filtertwin.files.recordings import read_blocks


class LoopReader:
    """The recording between ``start`` and ``end`` frames, looped, in blocks.

    Parameters
    ----------
    info : RecordingInfo
        The recording.
    chunk_frames : int
        Frames per block read.
    channels : int
        Channels kept (the first ``channels``).
    fade_frames : int
        Crossfade length of a jump, in frames of the recording.
    """

    def __init__(
        self, info: RecordingInfo, chunk_frames: int, channels: int, fade_frames: int = 256
    ) -> None:
        self.info = info
        self.chunk_frames = chunk_frames
        self.channels = channels
        self.fade_frames = max(1, fade_frames)
        self.region = (0, info.frames)
        self.position = 0
        """Recording frame after the last block handed out."""
        self.loops = 0
        self._request: tuple[int, int, int] | None = None

    def request(self, at_frame: int, start_frame: int = 0, end_frame: int | None = None) -> None:
        """Jump to ``at_frame`` and loop ``start_frame`` to ``end_frame`` from now on.

        Raises
        ------
        ValueError
            If the region is empty or ``at_frame`` is outside it.
        """
        end = self.info.frames if end_frame is None else int(end_frame)
        start = int(start_frame)
        if not 0 <= start < end <= self.info.frames:
            raise ValueError(f"the loop must lie within 0 to {self.info.frames} frames")
        if not start <= at_frame < end:
            raise ValueError(f"frame {at_frame} is outside the loop {start} to {end}")
        self._request = (int(at_frame), start, end)  # one store, taken by the reader thread

    def _stretch(self, start: int, end: int) -> Iterator[np.ndarray]:
        """Blocks of frames ``start`` to ``end`` (the frames before are read and dropped)."""
        offset = 0
        for block in read_blocks(self.info, self.chunk_frames):
            lo, hi = max(start, offset), min(end, offset + len(block))
            if lo < hi:
                yield block[lo - offset : hi - offset, : self.channels]
            offset += len(block)
            if offset >= end:
                return

    def blocks(self) -> Iterator[np.ndarray]:
        """Yield blocks for ever (the read-ahead thread's source)."""
        start, end = self.region
        source = self._stretch(start, end)
        while True:
            request, self._request = self._request, None
            if request is not None:  # a jump: from the old continuation into the new place
                at, start, end = request
                self.region = (start, end)
                fade_from = next(source, None)
            else:
                block = next(source, None)
                if block is not None:
                    self.position += len(block)
                    yield block
                    continue
                # round the loop: from what follows the end into the start
                self.loops += 1
                at = start
                fade_from = next(self._stretch(end, self.info.frames), None)
            source = self._stretch(at, end)
            first = next(source, None)
            if first is not None:
                self.position = at + len(first)
                yield self._crossfaded(fade_from, first)

    def _crossfaded(self, old: np.ndarray | None, new: np.ndarray) -> np.ndarray:
        if old is None:
            return new
        n = min(self.fade_frames, len(old), len(new))
        rise = (np.arange(n) + 0.5)[:, None] / n
        out = new.copy()
        out[:n] = rise * new[:n] + (1.0 - rise) * old[:n]
        return out
