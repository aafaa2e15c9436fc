import os
import pty
import termios

import pytest

from filtertwin.errors import UserInputError
from filtertwin.live.keys import (
    KEY_BINDINGS,
    RULES,
    Command,
    TerminalKeys,
    TimedCommand,
    command_for_key,
    help_text,
    parse_command,
    parse_script,
    play_script,
    read_script,
)

SCRIPT = """\
# compare two candidates, then the low way alone
0.0  select 1
4    select b     # by label (any case)
8.5  solo LOW
8.5  level -6.5

12   quit
"""


def test_a_script_gives_its_commands_at_their_times_in_order():
    commands = parse_script(SCRIPT, "compare.txt")
    assert commands == (
        TimedCommand(0.0, Command("select", ("1",)), 2),
        TimedCommand(4.0, Command("select", ("B",)), 3),
        TimedCommand(8.5, Command("solo", ("low",)), 4),
        TimedCommand(8.5, Command("level", ("-6.5",)), 5),
        TimedCommand(12.0, Command("quit"), 7),
    )


@pytest.mark.parametrize(
    ("line", "message"),
    [
        ("soon select 1", r"compare.txt, line 2: 'soon' is not a time in seconds; write lines as"),
        ("3", r"compare.txt, line 2: a command is missing"),
        ("3 play", r"compare.txt, line 2: unknown command 'play'; commands: select, bypass"),
        ("3 solo", r"compare.txt, line 2: wrong number of arguments to solo; use 'solo WAY'"),
        ("3 part low 2", r"line 2: 'part low 2' names no part: use 'part \[WAY\] \[STAGE\] PART"),
        ("3 part low 2 C1", r"line 2: the change of C1 is missing: add a step \(\+1, -2\)"),
        ("3 corner low fast", r"line 2: corner 'fast': "),
        ("3 level loud", r"line 2: level takes a number of dB, e.g. 'level -6', not 'loud'"),
        ("3 select 12", r"line 2: select takes 1-9 or a letter, not '12'"),
        ("-1 quit", r"line 2: time -1 s is negative"),
        ("0.5 quit", r"line 2: time 0.5 s is earlier than the line before \(1 s\)"),
    ],
)
def test_a_bad_script_line_is_refused_naming_the_file_and_line(line, message):
    with pytest.raises(UserInputError, match=message):
        parse_script(f"1 bypass\n{line}\n", "compare.txt")


def test_a_script_file_is_read_and_a_missing_one_is_named(tmp_path):
    path = tmp_path / "compare.txt"
    path.write_text(SCRIPT)
    assert len(read_script(path)) == 5
    with pytest.raises(UserInputError, match="cannot read command script .*missing.txt"):
        read_script(tmp_path / "missing.txt")


def test_play_script_waits_until_each_command_is_due():
    now = [100.0]
    waits = []

    def sleep(seconds):
        waits.append(seconds)
        now[0] += seconds

    played = list(play_script(parse_script(SCRIPT, "s"), clock=lambda: now[0], sleep=sleep))
    assert [c.name for c in played] == ["select", "select", "solo", "level", "quit"]
    assert waits == [4.0, 4.5, 3.5]  # no wait for commands already due


def test_every_key_gives_a_valid_command_with_help():
    for binding in KEY_BINDINGS:
        command = binding.command
        text = " ".join((command.name, *command.args))
        assert parse_command(text) == command
    assert command_for_key("0") == Command("bypass")
    assert command_for_key("7") == Command("select", ("7",))
    assert command_for_key("z") is None
    text = help_text()
    for key in ("1-9", "Enter", "q", "+"):
        assert f"  {key} " in text
    assert set(RULES) >= {b.command.name for b in KEY_BINDINGS}


def test_keys_come_one_by_one_from_a_pipe_and_the_end_is_noticed():
    read_end, write_end = os.pipe()
    os.write(write_end, "1é q".encode())
    os.close(write_end)
    with TerminalKeys(read_end) as keys:
        assert not keys.is_terminal
        got = [keys.read_key(1.0) for _ in range(5)]
        assert got == ["1", "é", " ", "q", None]
        assert keys.at_end
    os.close(read_end)


def test_a_terminal_is_put_in_single_key_mode_and_restored_on_exit():
    master, slave = pty.openpty()
    try:
        before = termios.tcgetattr(slave)
        assert before[3] & termios.ICANON  # a fresh terminal reads whole lines
        with TerminalKeys(slave) as keys:
            assert keys.is_terminal
            mode = termios.tcgetattr(slave)
            assert not mode[3] & termios.ICANON and not mode[3] & termios.ECHO
            os.write(master, b"q")
            assert keys.read_key(1.0) == "q"  # no Enter needed
            assert keys.read_key(0.01) is None  # nothing more: timeout
            keys.close()  # closing twice is harmless
        assert termios.tcgetattr(slave) == before
    finally:
        os.close(master)
        os.close(slave)
