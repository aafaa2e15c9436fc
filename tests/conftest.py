"""Shared test fixtures: a private JACK dummy server for the tests marked ``live``.

``bash tools/test.sh`` starts the server before pytest and exports its name in
``FILTERTWIN_TEST_JACK_SERVER``; the fixture then only hands that name out. When pytest is run
directly, the fixture starts a server of its own the same way (``tools/jack_server.sh``) and
stops it at the end of the session, after PortAudio has let go of it.

Every listening session of the tests (and of the commands they run) locks the package's
compiled kernels when its stream starts (``FILTERTWIN_LOCK_KERNELS=1``,
:mod:`filtertwin.digital.kernels`): a kernel version the warm-up missed is an error there,
not a silent stall.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
JACK_SCRIPT = REPO / "tools" / "jack_server.sh"
SERVER_ENV = "FILTERTWIN_TEST_JACK_SERVER"
START_TIMEOUT_S = 10.0
STOP_TIMEOUT_S = 5.0
os.environ.setdefault("FILTERTWIN_LOCK_KERNELS", "1")


def _jack_answers(name: str) -> bool:
    env = dict(os.environ, JACK_DEFAULT_SERVER=name, JACK_NO_START_SERVER="1")
    done = subprocess.run(["jack_lsp"], env=env, capture_output=True, check=False)
    return done.returncode == 0


def _rescan_portaudio() -> None:
    """Make an already imported sounddevice see the JACK server started after its import."""
    sd = sys.modules.get("sounddevice")
    if sd is not None:
        sd._terminate()
        sd._initialize()


def _release_portaudio() -> None:
    """Terminate PortAudio before its JACK server goes away (else the process aborts)."""
    sd = sys.modules.get("sounddevice")
    if sd is not None:
        while sd._initialized:
            sd._terminate()


def _start_server(name: str, log: Path) -> subprocess.Popen[bytes]:
    with log.open("wb") as sink:
        server = subprocess.Popen(
            ["bash", str(JACK_SCRIPT), name], stdout=sink, stderr=subprocess.STDOUT
        )
    deadline = time.monotonic() + START_TIMEOUT_S
    while time.monotonic() < deadline:
        if _jack_answers(name):
            return server
        if server.poll() is not None:
            break
        time.sleep(0.05)
    _stop_server(server)
    raise RuntimeError(f"JACK server {name!r} did not start; its output:\n{log.read_text()}")


def _stop_server(server: subprocess.Popen[bytes]) -> None:
    if server.poll() is None:
        server.terminate()
        try:
            server.wait(STOP_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            server.kill()
            server.wait()


@pytest.fixture(scope="session")
def jack_server() -> Iterator[str]:
    """Name of a running JACK dummy server (48 kHz, period 256, 2 in, 2 out)."""
    given = os.environ.get(SERVER_ENV)
    if given:
        yield given
        return
    name = f"ft_test_{os.getpid()}"
    saved = {key: os.environ.get(key) for key in ("JACK_DEFAULT_SERVER", "JACK_NO_START_SERVER")}
    os.environ["JACK_DEFAULT_SERVER"] = name
    os.environ["JACK_NO_START_SERVER"] = "1"
    with tempfile.TemporaryDirectory() as scratch:
        server = _start_server(name, Path(scratch) / "jackd.log")
        try:
            _rescan_portaudio()
            yield name
        finally:
            _release_portaudio()
            _stop_server(server)
            for key, value in saved.items():
                if value is None:
                    os.environ.pop(key, None)
                else:
                    os.environ[key] = value
