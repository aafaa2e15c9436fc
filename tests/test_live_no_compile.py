"""After a live session's warm-up, no compiled kernel of the package compiles anything.

numba compiles a kernel once per argument type signature (dtype, dimensions, layout 'C' or
'A'; numba documentation, "Types and signatures"), holding the interpreter lock while it
does (about a second on a cold cache): if that happens while the stream runs, the callback
and the read-ahead stall (measured once: 63,104 frames not read ahead in time). Each
scenario runs a real session on the JACK dummy server in a fresh process
(``kernel_census.py``; this test process has compiled versions for other tests), takes a
census of every kernel's versions when the stream starts, drives the session through its
paths and takes it again: nothing may have been added.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from filtertwin.digital import kernels

HERE = Path(__file__).resolve().parent
SRC = HERE.parent / "src"
pytestmark = pytest.mark.live
SCENARIOS = ["stereo-ab", "mono-callback", "mono-blind", "adc-capture", "live-input",
             "live-callback", "short-edit"]  # fmt: skip
MIN_BLOCKS = 100
"""Callbacks a scenario must have run (256 frames each: about 0.5 s at 48 kHz); the shortest
scenario plays for about 1 s."""


def census(jack_server: str, tmp_path: Path, scenario: str, *flags: str, lock: bool = False):
    env = dict(os.environ, JACK_DEFAULT_SERVER=jack_server, JACK_NO_START_SERVER="1")
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(SRC), env.get("PYTHONPATH")]))
    env[kernels.LOCK_ENV] = "1" if lock else "0"
    done = subprocess.run(
        [sys.executable, str(HERE / "kernel_census.py"), scenario, str(tmp_path), *flags],
        env=env, capture_output=True, text=True, timeout=300, check=False,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_the_census_finds_every_kernel_the_source_defines():
    found = kernels.package_kernels(import_all=True)
    # outside reference: the package's own text, every @njit / @numba.njit decorator and
    # every `name = njit(function)`, counted per module
    pattern = re.compile(r"^@(?:numba\.)?njit\b|^\w+ = (?:numba\.)?njit\(", re.M)
    written = {}
    for path in sorted((SRC / "filtertwin").rglob("*.py")):
        count = len(pattern.findall(path.read_text()))
        if count:
            module = ".".join(path.relative_to(SRC).with_suffix("").parts)
            written[module] = count
    counted: dict[str, int] = {}
    for name in found:
        module = name.rsplit(".", 1)[0]
        counted[module] = counted.get(module, 0) + 1
    assert counted == written
    assert all(k.py_func.__module__ in written for k in found.values())


@pytest.mark.parametrize("scenario", SCENARIOS)
def test_no_kernel_compiles_while_the_stream_runs(scenario, jack_server, tmp_path):
    result = census(jack_server, tmp_path, scenario)
    # numba documentation ("Types and signatures"): a new signature is a new compilation;
    # none may happen after the stream started
    assert result["added"] == {}, json.dumps(result["added"], indent=1)
    assert result["errors"] == [] and result["thread_errors"] == []
    assert not result["stream_lost"] and result["blocks"] >= MIN_BLOCKS


def test_the_census_sees_a_short_block_reintroduced_as_a_slice(jack_server, tmp_path):
    # the bug fixed in CascadeRunner._make_view, brought back on purpose: a loop's short last
    # block, filtered during a part edit's crossfade, reaches the blend kernel non-contiguous
    result = census(jack_server, tmp_path, "short-edit", "--reintroduce")
    added = result["added"]
    assert list(added) == ["filtertwin.live.chains._blend_kernel"], added
    (signature,) = added["filtertwin.live.chains._blend_kernel"]
    # numba's 'A' layout: any strides, the version a non-contiguous view needs
    assert signature.startswith("(Array(float64, 3, 'A'"), signature


def test_locked_kernels_turn_a_missed_version_into_an_error(jack_server, tmp_path):
    # FILTERTWIN_LOCK_KERNELS=1: the same reintroduced bug stops the read-ahead with numba's
    # "No matching definition" instead of compiling (numba documentation, disable_compile)
    result = census(jack_server, tmp_path, "short-edit", "--reintroduce", lock=True)
    assert result["added"] == {}
    (error,) = result["thread_errors"]
    assert "No matching definition for argument type(s) array(float64, 3d, A)" in error
