"""Loudness of an edited candidate, measured again off the edit path.

After a part or corner edit only the edited candidate's loudness can have changed (the
others and the dry input are as they were). Measuring it means running the whole
loudness excerpt through the candidate's twin as it plays (oversampled, swing and slew
included), a few hundred milliseconds of work; the edit itself (rebuild, twin, crossfade
of the chains, new stage cards and plot) must be heard and seen within 100 ms. So the
session hands the measurement to :class:`LoudnessRemeasure`, whose thread measures the
latest edited design and reports the level back; the session then crossfades the new
level-match gains in. Levels already measured are kept per design, so undo and redo back
to a measured design match again at once.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from typing import Any

import numpy as np

from filtertwin.live.loudness import integrated_loudness
from filtertwin.live.matching import twin_output

Measured = Callable[[int, Any, float], None]
"""Called from the measuring thread with (candidate index, design, loudness in LKFS)."""


class LoudnessRemeasure:
    """Measure candidates' loudness in a thread of its own; the latest request wins.

    Parameters
    ----------
    program : numpy.ndarray
        ``(frames, channels)`` excerpt the match was measured on.
    rate_hz : float
        Its rate (the twins' input rate).
    measured : callable
        Called with ``(index, design, level_lkfs)`` when a measurement is done.
    """

    def __init__(self, program: np.ndarray, rate_hz: float, measured: Measured) -> None:
        self.program = program
        self.rate_hz = rate_hz
        self.measured = measured
        self._known: dict[int, tuple[Any, float]] = {}  # id(design) -> (design, level)
        self._job: tuple[int, Any, Any] | None = None
        self._busy = False
        self._cond = threading.Condition()
        self._thread: threading.Thread | None = None

    def remember(self, design: Any, level: float) -> None:
        """Keep a level measured elsewhere (the match before the start)."""
        with self._cond:
            self._known[id(design)] = (design, level)

    def known_level(self, design: Any) -> float | None:
        """The level of this very design, if it was measured."""
        with self._cond:
            found = self._known.get(id(design))
        return None if found is None or found[0] is not design else found[1]

    def request(self, index: int, design: Any, twin: Any) -> None:
        """Measure ``design`` (candidate ``index``) through ``twin``; replaces a waiting one."""
        with self._cond:
            self._job = (index, design, twin)
            if self._thread is None or not self._thread.is_alive():
                self._thread = threading.Thread(
                    target=self._run, name="filtertwin-loudness", daemon=True
                )
                self._thread.start()
            self._cond.notify_all()

    @property
    def pending(self) -> bool:
        """True while a measurement waits or runs."""
        with self._cond:
            return self._busy or self._job is not None

    def wait(self, timeout_s: float) -> bool:
        """Wait until no measurement waits or runs; True if so."""
        deadline = time.monotonic() + timeout_s
        with self._cond:
            while self._busy or self._job is not None:
                left = deadline - time.monotonic()
                if left <= 0:
                    return False
                self._cond.wait(left)
        return True

    def _run(self) -> None:
        while True:
            with self._cond:
                if self._job is None:
                    self._thread = None
                    return
                index, design, twin = self._job
                self._job = None
                self._busy = True
            try:
                level = integrated_loudness(twin_output(self.program, twin), self.rate_hz)
                with self._cond:
                    self._known[id(design)] = (design, level)
                self.measured(index, design, level)
            finally:
                with self._cond:
                    self._busy = False
                    self._cond.notify_all()
