"""Noticing a stream that stopped, and leaving without waiting on it.

An audio server can quit (or a device go away) while ``filtertwin listen`` plays. PortAudio
then stops calling the callback without saying so, and stopping the stream may block
forever inside the library. :class:`StreamWatchdog` watches the callback's block count from
the control thread: no new block for :data:`MIN_STALL_S` (or 20 periods, whichever is
longer) means the stream is lost, and :class:`StreamLost` says so in one line.
:func:`call_within` runs a call that may block (stopping and closing the stream) in a
daemon thread and gives up after a timeout, so closing never waits forever.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable

from filtertwin.errors import FiltertwinError

MIN_STALL_S = 1.0
"""Longest wait for a block before the stream counts as lost (common practice: several
hundred milliseconds of silence from a running stream means it is gone)."""
STALL_PERIODS = 20
EXIT_STREAM_LOST = 3
"""Exit status of ``listen`` when the audio stream was lost."""


class StreamLost(FiltertwinError):
    """The audio stream stopped delivering blocks (one line: what happened and what to do)."""


class StreamWatchdog:
    """Raises :class:`StreamLost` when the callback count stops growing.

    Parameters
    ----------
    blocks_done : callable
        Returns the number of callbacks completed so far.
    period_s : float
        Duration of one block.
    clock : callable
        Seconds, monotonic.
    """

    def __init__(
        self,
        blocks_done: Callable[[], int],
        period_s: float,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.blocks_done = blocks_done
        self.stall_s = max(MIN_STALL_S, STALL_PERIODS * period_s)
        self.clock = clock
        self._blocks = blocks_done()
        self._seen_s = clock()

    def check(self) -> None:
        """Note the progress since the last check.

        Raises
        ------
        StreamLost
            If no block was completed for longer than :attr:`stall_s`.
        """
        now_s = self.clock()
        blocks = self.blocks_done()
        if blocks != self._blocks:
            self._blocks, self._seen_s = blocks, now_s
            return
        if now_s - self._seen_s > self.stall_s:
            raise StreamLost(
                f"the audio stream stopped: no audio block for {now_s - self._seen_s:.1f} s "
                "(the audio server quit or the device went away); start the server again "
                "and rerun the command"
            )


def call_within(call: Callable[[], None], timeout_s: float) -> bool:
    """Run ``call`` in a daemon thread; True if it returned within ``timeout_s``.

    An exception of ``call`` counts as returned (the caller is leaving anyway).
    """
    done = threading.Event()

    def run() -> None:
        try:
            call()
        except Exception:  # noqa: BLE001 - leaving: a failed close changes nothing
            pass
        finally:
            done.set()

    threading.Thread(target=run, name="filtertwin-close", daemon=True).start()
    return done.wait(timeout_s)
