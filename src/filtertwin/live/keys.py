"""Commands of the live stream, from single key presses or from a timed script.

Both sources give :class:`Command` values: a command word and its arguments. The keys are
a fixed table (:data:`KEYS`, shown by :func:`help_text`); a script is a text file with one
command per line, ``TIME_S COMMAND [ARGS]``, run at those times after the start, so a
comparison can be repeated without anyone at the keyboard::

    # compare two candidates, then the low way alone
    0.0  select 1
    4.0  select 2
    8.0  solo low
    12   quit

The terminal reader switches a terminal to single-key input (no Enter needed, no echo) and
puts it back as it was on exit; from a pipe it reads the characters as they come.
"""

from __future__ import annotations

import codecs
import os
import re
import select
import sys
import termios
import time
import tty
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from filtertwin.errors import UserInputError

LEVEL_STEP_DB = 1.0
WAYS = ("low", "mid", "high", "sum")
LISTEN_CHOICES = ("A", "B", "X", "1", "2")
ON_OFF_CHOICES = ("on", "off")
LOWER_CASE_ARGS = ("capture", "noise")
"""Commands whose choices are lower-case words (the other choices are upper-case letters)."""
ANSWER_CHOICES = ("A", "B", "1", "2")


@dataclass(frozen=True)
class Command:
    """A command word with its arguments, e.g. ``Command("solo", ("low",))``."""

    name: str
    args: tuple[str, ...] = ()


@dataclass(frozen=True)
class TimedCommand:
    """A command of a script, due ``time_s`` seconds after the start (``line`` from 1)."""

    time_s: float
    command: Command
    line: int


@dataclass(frozen=True)
class CommandRule:
    """How many arguments a command takes and what they may be (the help text is in
    ``KEY_BINDINGS`` and ``TYPED_HELP``)."""

    usage: str
    n_args: tuple[int, ...]
    choices: tuple[str, ...] = ()


_LABEL = re.compile(r"^([1-9]|[A-Za-z])$")
_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)$")

RULES: dict[str, CommandRule] = {
    "select": CommandRule("select N|LABEL", (1,)),
    "bypass": CommandRule("bypass", (0,)),
    "solo": CommandRule("solo WAY", (1,)),
    "mute": CommandRule("mute WAY", (1,)),
    "level": CommandRule("level DB", (1,)),
    "louder": CommandRule("louder", (0,)),
    "quieter": CommandRule("quieter", (0,)),
    "trials": CommandRule("trials", (0,)),
    "listen": CommandRule("listen A|B|X|1|2", (1,), LISTEN_CHOICES),
    "answer": CommandRule("answer [A|B|1|2]", (0, 1), ANSWER_CHOICES),
    "part": CommandRule("part [WAY] [STAGE] PART CHANGE", (2, 3, 4)),
    "corner": CommandRule("corner [WAY] HZ [HZ]", (1, 2, 3)),
    "undo": CommandRule("undo", (0,)),
    "redo": CommandRule("redo", (0,)),
    "edits": CommandRule("edits", (0,)),
    "save": CommandRule("save FILE", (1,)),
    "capture": CommandRule("capture [on|off]", (0, 1), ON_OFF_CHOICES),
    "noise": CommandRule("noise [on|off]", (0, 1), ON_OFF_CHOICES),
    "confirm": CommandRule("confirm", (0,)),
    "edit": CommandRule("edit", (0,)),
    "help": CommandRule("help", (0,)),
    "quit": CommandRule("quit", (0,)),
}


@dataclass(frozen=True)
class KeyBinding:
    """A key, the command it gives, and a line of help."""

    key: str
    command: Command
    help: str


KEY_BINDINGS: tuple[KeyBinding, ...] = (
    *(KeyBinding(str(n), Command("select", (str(n),)), "") for n in range(1, 10)),
    KeyBinding("0", Command("bypass"), "hear the input without any filter (bypass)"),
    KeyBinding("s", Command("solo", ("sum",)), "hear all ways of the candidate together"),
    KeyBinding("l", Command("solo", ("low",)), "hear the low way alone"),
    KeyBinding("m", Command("solo", ("mid",)), "hear the mid way alone"),
    KeyBinding("h", Command("solo", ("high",)), "hear the high way alone"),
    KeyBinding("L", Command("mute", ("low",)), "leave the low way out of the sum (again: back)"),
    KeyBinding("M", Command("mute", ("mid",)), "leave the mid way out of the sum (again: back)"),
    KeyBinding("H", Command("mute", ("high",)), "leave the high way out of the sum (again: back)"),
    KeyBinding("+", Command("louder"), f"output level up {LEVEL_STEP_DB:g} dB"),
    KeyBinding("-", Command("quieter"), f"output level down {LEVEL_STEP_DB:g} dB"),
    KeyBinding("c", Command("capture"), "with --adc-rate: ADC capture on or off (aliases)"),
    KeyBinding("n", Command("noise"), "the circuit's own noise on or off (its true level)"),
    KeyBinding("t", Command("trials"), "with --abx or --prefer: say the trial and its keys"),
    KeyBinding("a", Command("listen", ("A",)), "in a trial: hear A"),
    KeyBinding("b", Command("listen", ("B",)), "in a trial: hear B"),
    KeyBinding("x", Command("listen", ("X",)), "in a trial: hear the unknown X"),
    KeyBinding("A", Command("answer", ("A",)), "in a trial: answer 'X is A'"),
    KeyBinding("B", Command("answer", ("B",)), "in a trial: answer 'X is B'"),
    KeyBinding("\n", Command("answer"), "in a trial: answer with the one you hear now"),
    KeyBinding("\r", Command("answer"), ""),
    KeyBinding("e", Command("edit"), "type a command (below); Enter runs it, Esc cancels it"),
    KeyBinding("u", Command("undo"), "take back the last part or corner edit"),
    KeyBinding("r", Command("redo"), "make the last undone edit again"),
    KeyBinding("?", Command("help"), "show these keys"),
    KeyBinding("q", Command("quit"), "fade out and stop"),
)
"""Every key and what it does; in preference trials, 1 and 2 choose what to hear."""

KEYS: dict[str, Command] = {binding.key: binding.command for binding in KEY_BINDINGS}


def command_for_key(key: str) -> Command | None:
    """The command of a key press, or None when the key does nothing."""
    return KEYS.get(key)


TYPED_HELP: tuple[tuple[str, str], ...] = (
    ("select N|LABEL", "hear a candidate: select 2, select B"),
    ("solo WAY / mute WAY", "a way alone / out of the sum (again: in)"),
    ("level DB", "output level -60 to +12 dB (ceiling stays)"),
    ("part [WAY] [STAGE] PART CHANGE", "part low 2 C1 +1, part 1 R1 10k"),
    ("corner [WAY] HZ [HZ]", "move a corner, new parts: corner low 2.5k"),
    ("undo / redo / edits", "take an edit back, make it again, list them"),
    ("save FILE", "the heard candidate as a new design file"),
    ("capture on|off", "with --adc-rate: hear the ADC capture"),
    ("noise on|off", "the circuit's own noise, at its true level"),
    ("confirm", "confirm a bypass that asks for it"),
    ("listen A|B|X|1|2, answer A|B|1|2", "blind trials (--abx N, --prefer N)"),
    ("bypass, louder, quieter, quit", "as the keys 0, +, -, q"),
)
"""Commands typed after the key ``e`` (or written in a script), with a line of help."""


def help_text() -> str:
    """A table of the keys and of the typed commands, and what they do."""
    lines = ["keys:", "  1-9    hear candidate 1-9 (A, B, C ... in the order given)"]
    for binding in KEY_BINDINGS:
        if binding.help:
            name = "Enter" if binding.key == "\n" else binding.key
            lines.append(f"  {name:<6} {binding.help}")
    lines.append("commands, typed after e (Enter runs, Esc cancels) or in a script:")
    lines += [f"  {usage:<32} {text}" for usage, text in TYPED_HELP]
    lines.append("  WAY: low, mid, high, sum, or the design's name of a filter (topcut, woofer)")
    return "\n".join(lines)


def parse_command(text: str) -> Command:
    """Parse ``COMMAND [ARGS]`` (the part of a script line after the time).

    Raises
    ------
    UserInputError
        If the command is unknown or its arguments are wrong (without a location; the
        caller adds where the text came from).
    """
    words = text.split()
    if not words:
        raise UserInputError("a command is missing")
    name, args = words[0].lower(), tuple(words[1:])
    rule = RULES.get(name)
    if rule is None:
        raise UserInputError(f"unknown command {words[0]!r}; commands: {', '.join(RULES)}")
    if len(args) not in rule.n_args:
        raise UserInputError(f"wrong number of arguments to {name}; use '{rule.usage}'")
    if rule.choices:
        args = tuple(arg.lower() if name in LOWER_CASE_ARGS else arg.upper() for arg in args)
        for arg in args:
            if arg not in rule.choices:
                raise UserInputError(
                    f"{name} takes {', '.join(rule.choices)}, not {arg!r}; use '{rule.usage}'"
                )
    if name == "select":
        if not _LABEL.match(args[0]):
            raise UserInputError(f"select takes 1-9 or a letter, not {args[0]!r}")
        args = (args[0].upper(),)
    if name == "level" and not _NUMBER.match(args[0]):
        raise UserInputError(f"level takes a number of dB, e.g. 'level -6', not {args[0]!r}")
    if name in ("solo", "mute") and args[0].lower() in WAYS:
        args = (args[0].lower(),)  # way roles in any case; a filter's name as written
    if name in ("part", "corner"):
        from filtertwin.live import edits  # the design machinery: only when it is needed

        (edits.parse_part if name == "part" else edits.parse_corner)(args)
    return Command(name, args)


def parse_script(text: str, source: str) -> tuple[TimedCommand, ...]:
    """Parse a command script: lines ``TIME_S COMMAND [ARGS]``, ``#`` comments, blank lines.

    Parameters
    ----------
    text : str
        The script.
    source : str
        Where it came from (a file name or "standard input"), for error messages.

    Returns
    -------
    tuple of TimedCommand
        In time order.

    Raises
    ------
    UserInputError
        Naming the source and line, if a line is not ``TIME_S COMMAND [ARGS]``, a time is
        negative or earlier than the line before, or a command is wrong.
    """
    commands: list[TimedCommand] = []
    previous_s = 0.0
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].strip()
        if not line:
            continue
        where = f"{source}, line {number}"
        first, *more = line.split(None, 1)
        rest = more[0] if more else ""
        if not _NUMBER.match(first) or first.startswith("+"):
            raise UserInputError(
                f"{where}: {first!r} is not a time in seconds; "
                "write lines as 'TIME_S COMMAND [ARGS]', e.g. '2.5 select 2'"
            )
        time_s = float(first)
        if time_s < 0:
            raise UserInputError(f"{where}: time {first} s is negative; times count from 0")
        if time_s < previous_s:
            raise UserInputError(
                f"{where}: time {time_s:g} s is earlier than the line before ({previous_s:g} s);"
                " keep the lines in time order"
            )
        try:
            command = parse_command(rest)
        except UserInputError as error:
            raise UserInputError(f"{where}: {error}") from None
        commands.append(TimedCommand(time_s, command, number))
        previous_s = time_s
    return tuple(commands)


def read_script(path: str | Path) -> tuple[TimedCommand, ...]:
    """Read and parse a script file; ``"-"`` reads standard input.

    Raises
    ------
    UserInputError
        If the file cannot be read or a line is wrong.
    """
    if str(path) == "-":
        return parse_script(sys.stdin.read(), "standard input")
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as error:
        raise UserInputError(f"cannot read command script {path}: {error}") from None
    return parse_script(text, str(path))


def play_script(
    commands: Iterable[TimedCommand],
    clock: Callable[[], float] = time.monotonic,
    sleep: Callable[[float], None] = time.sleep,
) -> Iterator[Command]:
    """Yield each command when its time has come, counted from the first call.

    Parameters
    ----------
    commands : iterable of TimedCommand
        From :func:`parse_script`.
    clock, sleep : callable
        Time source and wait (seconds); replaceable for tests.
    """
    start_s = clock()
    for timed in commands:
        wait_s = timed.time_s - (clock() - start_s)
        if wait_s > 0:
            sleep(wait_s)
        yield timed.command


class TerminalKeys:
    """Single key presses from a terminal (or characters from a pipe).

    On a terminal, ``with TerminalKeys() as keys`` switches to single-key input without
    echo (Ctrl-C still works) and restores the previous mode on exit.

    Parameters
    ----------
    fd : int, optional
        File descriptor to read; default: standard input.
    """

    def __init__(self, fd: int | None = None) -> None:
        self.fd = sys.stdin.fileno() if fd is None else fd
        self.at_end = False
        self._saved: list[Any] | None = None
        self._decoder = codecs.getincrementaldecoder("utf-8")(errors="replace")

    @property
    def is_terminal(self) -> bool:
        """True when reading from a terminal."""
        return os.isatty(self.fd)

    def __enter__(self) -> TerminalKeys:
        if self.is_terminal:
            self._saved = termios.tcgetattr(self.fd)
            tty.setcbreak(self.fd, termios.TCSANOW)
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def close(self) -> None:
        """Restore the terminal mode (safe to call twice)."""
        if self._saved is not None:
            termios.tcsetattr(self.fd, termios.TCSADRAIN, self._saved)
            self._saved = None

    def read_key(self, timeout_s: float) -> str | None:
        """The next key, or None if none came within ``timeout_s`` or input has ended
        (then :attr:`at_end` is True)."""
        if self.at_end:
            return None
        deadline = time.monotonic() + timeout_s
        while True:
            left_s = max(0.0, deadline - time.monotonic())
            ready, _, _ = select.select([self.fd], [], [], left_s)
            if not ready:
                return None
            byte = os.read(self.fd, 1)
            if not byte:
                self.at_end = True
                return None
            key = self._decoder.decode(byte)
            if key:
                return key
