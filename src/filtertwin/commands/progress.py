"""A progress bar on one terminal line, redrawn in place (``render``, ``alias`` archives).

Silent when the stream is not a terminal (a pipe, a file, a test's buffer), so that nothing
but results reaches a log.
"""

from __future__ import annotations

import time
from typing import TextIO

BAR_CELLS = 30
"""Width of the bar in characters, between its brackets."""


class ProgressLine:
    """``[#########.....] TEXT`` on one line of a terminal, redrawn by :meth:`draw`.

    Parameters
    ----------
    stream : TextIO
        Where the line goes (standard error); nothing is written unless it is a terminal.
    """

    def __init__(self, stream: TextIO) -> None:
        self.stream = stream
        self.active = stream.isatty()
        self.started = time.monotonic()
        self.shown = False

    def draw(self, fraction: float, text: str) -> None:
        """Redraw the line: ``fraction`` (0 to 1) of the bar filled, then ``text``."""
        filled = int(BAR_CELLS * fraction)
        self.stream.write(f"\r[{'#' * filled}{'.' * (BAR_CELLS - filled)}] {text}")
        self.stream.flush()
        self.shown = True

    def close(self) -> None:
        """End the line (only if one was drawn)."""
        if self.shown:
            self.stream.write("\n")
            self.stream.flush()
