"""`filtertwin listen` as a user runs it, in a process of its own on a JACK dummy server:
the cautions before any sound, Ctrl-C, and an audio server that dies under it.

The test that kills a server starts that server itself, under a name of its own, and never
touches the shared one of tests/conftest.py.
"""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from test_live_listen_cli import REPO

pytestmark = pytest.mark.live
JACK_SCRIPT = REPO / "tools" / "jack_server.sh"
START_TIMEOUT_S = 120.0  # numba's first compile on a busy 2-core machine
EXIT_WITHIN_S = 10.0


def listen(server: str, *args: str) -> subprocess.Popen[str]:
    env = dict(os.environ, JACK_DEFAULT_SERVER=server, JACK_NO_START_SERVER="1")
    env["PYTHONPATH"] = str(REPO / "src")
    return subprocess.Popen(
        [sys.executable, "-m", "filtertwin", "listen", "candidate-butterworth",
         "candidate-bessel", "--input", "audio_samples/program_48k.wav", *args],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, stdin=subprocess.DEVNULL, text=True,
        cwd=REPO, env=env,
    )  # fmt: skip


def read_until_playing(process: subprocess.Popen[str]) -> list[str]:
    """Lines of standard output up to "playing" (the stream has started)."""
    lines: list[str] = []
    deadline = time.monotonic() + START_TIMEOUT_S
    assert process.stdout is not None
    while time.monotonic() < deadline:
        line = process.stdout.readline()
        if not line:
            break
        lines.append(line.rstrip("\n"))
        if line.strip() == "playing":
            return lines
    process.kill()
    pytest.fail(f"listen did not start playing: {lines} {process.communicate()[1]}")


def start_own_server(name: str, log: Path) -> subprocess.Popen[bytes]:
    env = dict(os.environ, JACK_NO_START_SERVER="1")
    with log.open("wb") as sink:
        server = subprocess.Popen(["bash", str(JACK_SCRIPT), name], stdout=sink,
                                  stderr=subprocess.STDOUT, env=env)  # fmt: skip
    probe_env = dict(env, JACK_DEFAULT_SERVER=name)
    deadline = time.monotonic() + 10.0
    while time.monotonic() < deadline:
        if subprocess.run(["jack_lsp"], env=probe_env, capture_output=True).returncode == 0:
            return server
        time.sleep(0.05)
    server.kill()
    pytest.fail(f"JACK server {name} did not start: {log.read_text()}")


def test_killing_the_audio_server_ends_listen_in_one_line_within_seconds(tmp_path):
    name = f"ft_dies_{os.getpid()}"  # this test's own server, never the shared one
    server = start_own_server(name, tmp_path / "jackd.log")
    process = listen(name, "--duration", "120")
    try:
        read_until_playing(process)
        time.sleep(1.0)
        server.terminate()  # the audio server quits under the running stream
        killed_s = time.monotonic()
        try:
            out, err = process.communicate(timeout=EXIT_WITHIN_S + 5)
        except subprocess.TimeoutExpired:
            process.kill()
            pytest.fail("listen still runs 15 s after its audio server quit")
        took_s = time.monotonic() - killed_s
    finally:
        if process.poll() is None:
            process.kill()
        if server.poll() is None:
            server.kill()
        server.wait()
        # the client left by os._exit keeps its semaphore files: remove this server's
        for leftover in Path("/dev/shm").glob(f"jack*_{name}_*"):
            leftover.unlink(missing_ok=True)
    assert process.returncode == 3, (out, err)  # the exit status of a lost stream
    assert err.count("\n") == 1 and "Traceback" not in err, err
    assert err.startswith("filtertwin: the audio stream stopped: no audio block for"), err
    # the watchdog waits 1 s for a block, closing at most 1 s more (filtertwin.live.watchdog)
    assert took_s < EXIT_WITHIN_S, took_s


def test_the_cautions_come_before_any_sound_and_ctrl_c_exits_130(jack_server):
    process = listen(jack_server, "--duration", "120")
    try:
        before = read_until_playing(process)
        time.sleep(0.5)
        process.send_signal(signal.SIGINT)  # Ctrl-C
        out, err = process.communicate(timeout=EXIT_WITHIN_S + 5)
    finally:
        if process.poll() is None:
            process.kill()
    cautions = [line for line in before if line.startswith("caution:")]
    assert any("hearing" in line for line in cautions), before
    assert any("tweeter" in line for line in cautions), before
    assert before.index(cautions[0]) < before.index("playing")
    assert process.returncode == 130, (out, err)  # as the offline commands (cli.main)
    assert "stopped (interrupted); output faded out" in out
