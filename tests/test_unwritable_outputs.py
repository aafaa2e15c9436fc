"""Outputs that cannot be written: one line naming the path and the fix, exit 2, nothing left.

CI runs as root, for whom a chmod'ed folder is still writable, so the unwritable places here
are ones even root cannot write: a file in the way of a folder, and sysfs (/sys), where the
kernel refuses new files and folders to everyone (EACCES / EPERM, or EROFS when mounted
read-only). Running as a user in a root-owned folder gives the same lines (checked by hand,
see DEVELOPERS.md).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from filtertwin import cli
from filtertwin.digital.numbacache import choose_cache_dir
from filtertwin.errors import UserInputError
from filtertwin.files import outputs

SAMPLES = Path(__file__).resolve().parent.parent / "audio_samples"
PROGRAM = SAMPLES / "program_48k.wav"
VIBRATION = SAMPLES / "vibration_51k2.wav"
UNWRITABLE_EXISTING = "/sys/kernel"  # a folder no one may add files to
UNWRITABLE_NEW = "/sys/filtertwin-never/out"  # a folder no one may create
REFUSED = r"(permission denied|read-only file system)"

COMMANDS = {
    "render": lambda out: ["render", "turntable-rumble", str(PROGRAM), "--out", out],
    "tolerance": lambda out: ["tolerance", "bookshelf-2way", "--builds", "20", "--out", out],
    "crossover": lambda out: ["crossover", "bookshelf-2way", "--out", out],
    "alias": lambda out: [
        "alias",
        "vibration-antialias",
        str(VIBRATION),
        "--adc-rate",
        "8000",
        "--out",
        out,
    ],  # fmt: skip
    "examples": lambda out: ["examples", "--copy", out],
    "demo": lambda out: ["demo", "--out", out],
}


def _one_line_exit_2(capsys: pytest.CaptureFixture[str], status: int) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    err = [e for e in err if not e.startswith("filtertwin: note:")]
    assert status == 2 and len(err) == 1, err
    return err[0]


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_an_output_folder_behind_a_file_is_one_line_and_leaves_nothing(
    command, tmp_path, capsys, monkeypatch
):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "notes.txt").write_text("in the way\n")
    status = cli.main(COMMANDS[command]("notes.txt/out"))
    line = _one_line_exit_2(capsys, status)
    assert "notes.txt/out" in line and "notes.txt is a file, not a folder" in line
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt"]


@pytest.mark.parametrize("command", sorted(COMMANDS))
@pytest.mark.parametrize("where", [UNWRITABLE_EXISTING, UNWRITABLE_NEW])
def test_an_output_folder_that_cannot_be_written_is_one_line_with_the_fix(
    command, where, tmp_path, capsys, monkeypatch
):
    monkeypatch.chdir(tmp_path)
    before = sorted(os.listdir(UNWRITABLE_EXISTING))
    status = cli.main(COMMANDS[command](where))
    line = _one_line_exit_2(capsys, status)
    option = "--copy" if command == "examples" else "--out"
    assert line.startswith(f"filtertwin: cannot write {option} {where}: ")
    assert re_search(REFUSED, line) or "cannot be created" in line
    assert line.endswith("choose a folder you can write to, e.g. one under your home folder")
    assert sorted(os.listdir(UNWRITABLE_EXISTING)) == before
    assert not Path("/sys/filtertwin-never").exists()
    assert list(tmp_path.iterdir()) == []


def re_search(pattern: str, text: str) -> bool:
    import re

    return re.search(pattern, text) is not None


def test_a_parts_list_that_cannot_be_written_is_one_line(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    status = cli.main(["design", "bookshelf-2way", "--bom", f"{UNWRITABLE_EXISTING}/parts.csv"])
    line = _one_line_exit_2(capsys, status)
    assert line.startswith(f"filtertwin: cannot write {UNWRITABLE_EXISTING}/parts.csv: ")
    assert re_search(REFUSED, line)
    assert not Path(UNWRITABLE_EXISTING, "parts.csv").exists()
    (tmp_path / "notes.txt").write_text("x")
    status = cli.main(["design", "bookshelf-2way", "--bom", "notes.txt/parts.csv"])
    assert "notes.txt does not exist; create it first" in _one_line_exit_2(capsys, status)


def test_the_writers_turn_a_refused_file_into_one_line_naming_it():
    target = Path(UNWRITABLE_EXISTING, "capture.wav")
    with pytest.raises(UserInputError, match=rf"^cannot write {target}: {REFUSED}; choose"):
        outputs.SafeWriter(target, 48000, 1)  # libsndfile alone says "System error"
    with pytest.raises(UserInputError, match=rf"^cannot write {target.with_suffix('.csv')}: "):
        outputs.CsvWriter(target.with_suffix(".csv"), 48000, ["a"])
    with pytest.raises(UserInputError, match=rf"^cannot write {target.with_suffix('.npy')}: "):
        outputs.write_npy(target.with_suffix(".npy"), np.zeros(3))


def test_a_render_into_unwritable_place_gives_no_traceback_from_the_command_line(tmp_path):
    run = subprocess.run(
        [sys.executable, "-m", "filtertwin", "render", "turntable-rumble", str(PROGRAM),
         "--out", UNWRITABLE_NEW],
        capture_output=True, text=True, check=False, cwd=tmp_path,
    )  # fmt: skip
    assert run.returncode == 2 and run.stdout == ""
    assert run.stderr.count("\n") == 1 and "Traceback" not in run.stderr


def test_ctrl_c_late_in_alias_leaves_no_output_folder(tmp_path, capsys, monkeypatch):
    from filtertwin.report import check_figures

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(check_figures, "alias_figure", interrupted)
    status = cli.main(["alias", "vibration-antialias", str(VIBRATION), "--adc-rate", "8000",
                       "--out", "deep/alias"])  # fmt: skip
    assert status == 130 and "interrupted" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []  # the captures written before it are gone too


def test_an_interrupted_examples_copy_leaves_nothing(tmp_path, monkeypatch):
    from filtertwin import examples

    calls = []

    def copy_then_interrupt(src, dst):
        if calls:
            raise KeyboardInterrupt
        calls.append(dst)
        Path(dst).write_bytes(Path(src).read_bytes())

    monkeypatch.setattr(examples.shutil, "copyfile", copy_then_interrupt)
    with pytest.raises(KeyboardInterrupt):
        examples.copy_to(tmp_path / "copies")
    assert list(tmp_path.iterdir()) == []


# --- numba's cache ------------------------------------------------------------------------


def test_numba_keeps_its_own_cache_when_the_package_folder_is_writable(tmp_path):
    env: dict[str, str] = {}
    assert choose_cache_dir(env, [tmp_path]) is None and env == {}
    env = {"NUMBA_CACHE_DIR": str(tmp_path)}
    assert choose_cache_dir(env, [Path(UNWRITABLE_EXISTING)]) is None


def test_numba_cache_falls_back_to_a_temporary_folder_with_one_notice(tmp_path):
    (tmp_path / "home").write_text("a file where the home folder should be")
    env = {"XDG_CACHE_HOME": str(tmp_path / "home" / "cache")}
    notice = choose_cache_dir(env, [Path(UNWRITABLE_EXISTING)])
    assert notice is not None and notice.count("\n") == 0
    folder = Path(env["NUMBA_CACHE_DIR"]).parent  # a fresh temporary folder, removed at exit
    assert folder.is_dir() and str(folder) in notice and "NUMBA_CACHE_DIR" in notice
    assert "MPLCONFIGDIR" not in env  # matplotlib's own folder works here


def test_matplotlib_gets_the_temporary_folder_too_when_its_config_folder_cannot_be_written(
    tmp_path,
):
    (tmp_path / "home").write_text("a file where the home folder should be")
    env = {"XDG_CONFIG_HOME": str(tmp_path / "home" / "config")}
    notice = choose_cache_dir(env, [tmp_path])
    assert notice is not None and notice.count("\n") == 0 and "MPLCONFIGDIR" in notice
    assert Path(env["MPLCONFIGDIR"]).parent.is_dir() and "NUMBA_CACHE_DIR" not in env


def test_kernels_compile_without_a_cache_when_no_folder_can_hold_one(tmp_path):
    script = f"""
import tempfile
from pathlib import Path
from filtertwin.digital import numbacache

def refuse(*a, **k):
    raise PermissionError(13, "Permission denied")

tempfile.mkdtemp = refuse
env = {{"XDG_CACHE_HOME": "{UNWRITABLE_NEW}"}}
print(numbacache.choose_cache_dir(env, [Path("{UNWRITABLE_EXISTING}")]))
import numba

@numba.njit(cache=True)
def twice(x):
    return 2 * x

print(twice(21))
"""
    run = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         check=False, cwd=tmp_path)  # fmt: skip
    assert run.returncode == 0, run.stderr
    notice, answer = run.stdout.strip().splitlines()
    assert "compiled without a cache" in notice and answer == "42"
