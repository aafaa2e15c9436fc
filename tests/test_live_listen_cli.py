"""`filtertwin listen` and `filtertwin devices` from the command line, where no stream opens:
help, bad settings, no audio server, no PortAudio library."""

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from filtertwin.cli import main

REPO = Path(__file__).resolve().parents[1]


def run(*args, env_extra=None, pythonpath=None):
    env = dict(os.environ, JACK_DEFAULT_SERVER="ft_no_such_server", JACK_NO_START_SERVER="1")
    env["PYTHONPATH"] = os.pathsep.join([*(pythonpath or []), str(REPO / "src")])
    env.update(env_extra or {})
    return subprocess.run(
        [sys.executable, "-m", "filtertwin", *args], capture_output=True, text=True, env=env,
        cwd=REPO, stdin=subprocess.DEVNULL, timeout=60,
    )  # fmt: skip


def one_line_error(done) -> str:
    assert done.returncode == 2, (done.stdout, done.stderr)
    assert done.stderr.count("\n") == 1 and "Traceback" not in done.stderr, done.stderr
    return done.stderr


def test_help_warns_about_hearing_and_tweeters_and_lists_the_keys():
    done = run("listen", "--help")
    assert done.returncode == 0
    text = " ".join(done.stdout.split())
    assert "Safety: loud playback harms hearing" in text  # the README's safety wording
    assert "full-range or low-frequency signal destroys tweeters" in text
    assert "press 0 again within 3 s" in text and "--ways-out" in text
    assert "part low 2 C1 +1" in text and "a/b/x listen" in text
    # the typed commands, Esc, and t only with blind trials
    for word in ("level DB", "select N|LABEL", "capture on|off", "confirm", "undo", "save FILE"):
        assert word in text, word
    assert "Esc cancels" in text and "(--abx N or --prefer N)" in text


def test_the_key_table_lists_the_typed_commands_and_what_t_needs():
    from filtertwin.live.keys import KEY_BINDINGS, RULES, help_text

    text = help_text()
    typed = text.split("commands, typed after e (Enter runs, Esc cancels)")[1]
    for name in ("select", "solo", "mute", "level", "part", "corner", "undo", "redo", "edits",
                 "save", "capture", "confirm", "listen", "answer", "bypass", "quit"):  # fmt: skip
        assert name in typed and name in RULES, name
    t_help = next(b.help for b in KEY_BINDINGS if b.key == "t")
    assert "--abx or --prefer" in t_help
    assert max(len(line) for line in text.splitlines()) <= 79  # fits an 80-column terminal


def test_with_no_audio_server_both_commands_say_so_in_one_line():
    for args in (("devices",), ("listen", "candidate-bessel", "--input",
                                "audio_samples/program_48k.wav")):  # fmt: skip
        line = one_line_error(run(*args))
        assert "no audio devices found: start an audio server" in line
        assert "'filtertwin devices'" not in line  # not the command just run: what to do
        assert "then try again" in line


def test_without_the_portaudio_library_the_fix_is_named(tmp_path):
    # a sounddevice that fails to load its library exactly as the real one does (OSError)
    (tmp_path / "sounddevice.py").write_text('raise OSError("PortAudio library not found")\n')
    for args in (("devices",), ("listen", "candidate-bessel")):
        text = one_line_error(run(*args, pythonpath=[str(tmp_path)]))
        assert "the PortAudio library is missing: install Debian's libportaudio2" in text


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--ceiling", "0"], r"output ceiling must be -60 to -1 dBFS .*cannot be raised"),
        (["--level", "20"], r"output level must be -60 to \+12 dB"),
        (["--log", "x.csv"], r"--log and --seed belong to blind trials; add --abx N"),
        (
            ["candidate-butterworth", "studio-3way", "--abx", "4"],
            r"blind trials compare two designs, 3 were given",
        ),
        (["--match", "loudness"], r"--match loudness needs a recording \(--input\)"),
        (["--blocksize", "8"], r"--blocksize must be 16 to 8192 frames"),
        (["--script", "missing-script.txt"], r"cannot read command script missing-script.txt"),
    ],
)
def test_bad_settings_are_refused_in_one_line_before_any_device_is_touched(
    args, message, capsys, monkeypatch
):
    monkeypatch.chdir(REPO)
    assert main(["listen", "candidate-bessel", *args]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and re.search(message, err), err


def test_a_bad_script_line_is_named_by_file_and_line(tmp_path, capsys):
    script = tmp_path / "s.txt"
    script.write_text("0 select 1\n1 shout\n")
    assert main(["listen", "candidate-bessel", "--script", str(script)]) == 2
    assert "s.txt, line 2: unknown command 'shout'" in capsys.readouterr().err


def test_an_unknown_design_lists_the_examples(capsys):
    assert main(["listen", "no-such-design"]) == 2
    assert "no-such-design: no such design file or example" in capsys.readouterr().err
