"""The control loop of ``filtertwin listen``: keys, script, status line, end of the run.

Runs in the main thread while the stream plays. Every tick (a tenth of a second) it hands
due script commands and pressed keys to the session and redraws the status line from the
meters and counters the callback wrote. The key ``e`` opens a one-line editor for a
command such as ``part low 2 C1 +1``; Enter runs it, Esc drops it.

On a terminal the status line is redrawn in place; into a pipe or a file a status line is
written every two seconds instead, so logs stay readable.
"""

from __future__ import annotations

import shutil
import sys
import time
from collections.abc import Sequence
from typing import TextIO

from filtertwin.errors import UserInputError
from filtertwin.live import keys
from filtertwin.live.player import Player
from filtertwin.live.status import StatusReader, status_line
from filtertwin.live.watchdog import StreamWatchdog

TICK_S = 0.1
PIPE_STATUS_EVERY_S = 2.0
BACKSPACE = ("\x7f", "\b")
ESCAPE = "\x1b"


class Console:
    """Messages and the status line on one text stream.

    Parameters
    ----------
    out : TextIO
        Where to write (standard output).
    """

    def __init__(self, out: TextIO = sys.stdout) -> None:
        self.out = out
        self.live = out.isatty()
        self._status_shown = False
        self._last_pipe_status_s = -PIPE_STATUS_EVERY_S

    def _clear(self) -> None:
        if self._status_shown:
            self.out.write("\r\x1b[K")
            self._status_shown = False

    def say(self, message: str) -> None:
        """Print a message on lines of its own (above the status line)."""
        self._clear()
        self.out.write(message + "\n")
        self.out.flush()

    def width(self) -> int | None:
        """Columns of the terminal (None into a pipe or a file: lines are not cut)."""
        return shutil.get_terminal_size().columns if self.live else None

    def status(self, text: str, now_s: float) -> None:
        """Show the status line (in place on a terminal, now and then into a pipe)."""
        if self.live:
            self.out.write("\r\x1b[K" + text)
            self._status_shown = True
        elif now_s - self._last_pipe_status_s >= PIPE_STATUS_EVERY_S:
            self.out.write(text + "\n")
            self._last_pipe_status_s = now_s
        self.out.flush()

    def end(self) -> None:
        """Leave the status line's row."""
        if self._status_shown:
            self.out.write("\n")
            self._status_shown = False
        self.out.flush()


class EscapeFilter:
    """Drops the escape sequences that arrow and function keys send (ESC [ A ...), so that
    their letters never reach the key table (an arrow key must not answer a trial)."""

    def __init__(self) -> None:
        self._state = ""

    def passes(self, key: str) -> bool:
        """True when ``key`` is a key press of its own, not part of an escape sequence."""
        if self._state == "escape":
            self._state = "sequence" if key in "[O" else ""
            return not self._state
        if self._state == "sequence":
            if "@" <= key <= "~":  # the final character of the sequence
                self._state = ""
            return False
        if key == ESCAPE:
            self._state = "escape"
        return True


class LineEditor:
    """The one-line editor opened by the key ``e``."""

    def __init__(self) -> None:
        self.text: str | None = None

    @property
    def active(self) -> bool:
        """True while a line is being typed."""
        return self.text is not None

    def open(self) -> None:
        """Start an empty line."""
        self.text = ""

    def key(self, key: str) -> str | None:
        """Take a key; return the finished line on Enter (None otherwise)."""
        assert self.text is not None
        if key in ("\n", "\r"):
            line, self.text = self.text, None
            return line
        if key == ESCAPE:
            self.text = None
        elif key in BACKSPACE:
            self.text = self.text[:-1]
        elif key.isprintable():
            self.text += key
        return None


def run(
    player: Player,
    console: Console,
    script: Sequence[keys.TimedCommand] = (),
    key_source: keys.TerminalKeys | None = None,
    duration_s: float | None = None,
) -> str:
    """Play until quit, the end of the trials, the duration, or Ctrl-C.

    Returns
    -------
    str
        Why the run ended ("quit", "trials done", "duration", "interrupted", "input ended").

    Raises
    ------
    StreamLost
        When the callback stopped coming (the audio server quit): see
        :mod:`filtertwin.live.watchdog`.
    BaseException
        An error of the read-ahead thread (e.g. the recording changed while playing).
    """
    session = player.session
    reader = StatusReader(session, player.cpu_load)
    watchdog = StreamWatchdog(player.core.blocks_done, player.core.period_s)
    editor = LineEditor()
    escapes = EscapeFilter()
    pending = list(script)
    started_s = time.monotonic()
    while True:
        now_s = time.monotonic()
        elapsed_s = now_s - started_s
        while pending and pending[0].time_s <= elapsed_s:
            session.handle(pending.pop(0).command, now_s)
        if session.quit_requested:
            blind = session.blind
            return "trials done" if blind is not None and blind.finished else "quit"
        if duration_s is not None and elapsed_s >= duration_s:
            return "duration"
        if player.feeder is not None and player.feeder.error is not None:
            raise player.feeder.error
        watchdog.check()
        session.poll()
        if editor.active:
            console.status(f"edit (Enter runs, Esc cancels)> {editor.text}", now_s)
        else:
            console.status(status_line(reader.facts(), console.width()), now_s)
        wait_s = TICK_S
        if pending:
            wait_s = min(wait_s, max(0.0, pending[0].time_s - elapsed_s))
        if duration_s is not None:
            wait_s = min(wait_s, max(0.0, duration_s - elapsed_s))
        if key_source is None or key_source.at_end:
            time.sleep(wait_s)
            continue
        key = key_source.read_key(wait_s)
        if key is not None and escapes.passes(key):
            _on_key(key, editor, player, console)


def _on_key(key: str, editor: LineEditor, player: Player, console: Console) -> None:
    now_s = time.monotonic()
    if editor.active:
        line = editor.key(key)
        if line is not None and line.strip():
            try:
                typed = keys.parse_command(line)
            except UserInputError as error:
                console.say(f"edit: {error}")
                return
            player.session.handle(typed, now_s)
        return
    command = keys.command_for_key(key)
    if command is None:
        return
    if command.name == "edit":
        editor.open()
        return
    player.session.handle(command, now_s)
