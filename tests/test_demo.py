"""`filtertwin demo` end to end: every output exists, parses and carries its verdict."""

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import pytest
import soundfile as sf

REPO = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    cwd = tmp_path_factory.mktemp("fresh-folder")
    run = subprocess.run(
        [sys.executable, "-m", "filtertwin", "demo"], capture_output=True, text=True, cwd=cwd
    )
    return run, cwd / "filtertwin-demo"


def test_demo_runs_from_any_folder_and_exits_0(demo):
    run, _ = demo
    assert run.returncode == 0, run.stderr
    assert "Traceback" not in run.stderr
    assert "demo finished in" in run.stdout


def test_demo_prints_the_verdicts_with_their_figures(demo):
    out = demo[0].stdout
    assert "verdict: PASS (flat within 1 dB)" in out  # crossover sum, Linkwitz 1976
    assert "verdict: FAIL; the stopband gives" in out  # 6th order vs 98.09 dB of a 16-bit ADC
    assert ", margin -" in out
    assert "98.09 dB" in out  # 6.02 x 16 + 1.76 (Bennett 1948; Kester 2005)
    assert "yield (every filter inside its mask)" in out
    assert "open   filtertwin-demo/crossover/report.html" in out


def test_demo_cautions_about_hearing_tweeters_and_mains_where_it_says_what_to_play(demo):
    out = demo[0].stdout
    tail = out[out.index("what to open and what to listen to") :]
    listen = tail.index("listen ")
    # common practice (REFERENCES.md, facts of the trade): loud playback harms hearing;
    # full-range signal destroys tweeters; mains wiring follows local codes
    for word in ("caution, hearing:", "caution, tweeters:", "caution, mains:"):
        assert word in tail and tail.index(word) > listen, word
    assert "never straight into a tweeter" in tail and "start playback quiet" in tail


def test_demo_outputs_exist_and_parse(demo):
    _, folder = demo
    crossover = folder / "crossover"
    for name in ("before.wav", "woofer.wav", "tweeter.wav", "sum.wav"):
        info = sf.info(crossover / name)
        assert info.samplerate == 48000 and info.channels == 2 and info.frames == 15 * 48000
    summary = json.loads((crossover / "summary.json").read_text())
    assert summary["crossover"]["verdict"] == "PASS"
    listed = {Path(f["path"]).name for f in summary["files"]}
    assert {"before.wav", "woofer.wav", "tweeter.wav", "sum.wav"} <= listed
    html = (crossover / "report.html").read_text()
    assert html.count("data:image/png;base64,") >= 3 and "Crossover check: PASS" in html
    assert list((folder / "tolerance").glob("*.png"))
    alias = folder / "antialias"
    assert (alias / "vibration_51k2-alias.png").stat().st_size > 10_000
    captured = sf.info(alias / "vibration_51k2-adc-with-filter.wav")
    assert captured.samplerate == 8000
    assert not list(folder.rglob("*.tmp*"))


def test_demo_recordings_are_the_committed_samples(demo):
    _, folder = demo
    for name in ("program_48k.wav", "vibration_51k2.wav"):
        made = hashlib.sha256((folder / "inputs" / name).read_bytes()).hexdigest()
        kept = hashlib.sha256((REPO / "audio_samples" / name).read_bytes()).hexdigest()
        assert made == kept  # sha256: the package synthesises the same bytes
