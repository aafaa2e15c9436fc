"""Tests of tools/make_samples.py and the committed demo recordings in audio_samples/.

Outside references: scipy.signal.welch (P. D. Welch, IEEE Trans. Audio Electroacoust. AU-15,
1967) for spectra, scipy.signal.hilbert for the instantaneous frequency of the sweep, libsndfile
(soundfile) for file headers, sha256 (hashlib) for byte identity.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import os
import subprocess
import sys
from pathlib import Path
from types import ModuleType

import numpy as np
import pytest
import soundfile as sf
from scipy import signal

REPO = Path(__file__).resolve().parents[1]
SCRIPT = REPO / "tools" / "make_samples.py"
SAMPLES = REPO / "audio_samples"
GENERATED = (
    "log_sweep_48k.wav",
    "pink_noise_48k.wav",
    "program_48k.wav",
    "vibration_51k2.csv",
    "vibration_51k2.json",
    "vibration_51k2.wav",
)


def _load_script() -> ModuleType:
    spec = importlib.util.spec_from_file_location("make_samples", SCRIPT)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _hashes(folder: Path) -> dict[str, str]:
    return {name: hashlib.sha256((folder / name).read_bytes()).hexdigest() for name in GENERATED}


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """One run as a command in a fresh process, one in-process through main()."""
    first = tmp_path_factory.mktemp("first")
    second = tmp_path_factory.mktemp("second")
    env = dict(
        os.environ,
        PYTHONPATH=os.pathsep.join([str(REPO / "src"), os.environ.get("PYTHONPATH", "")]),
    )
    subprocess.run([sys.executable, str(SCRIPT), "--out", str(first)], check=True, env=env,
                   capture_output=True)  # fmt: skip
    assert _load_script().main(["--out", str(second)]) == 0
    return first, second


def test_two_runs_write_identical_bytes(two_runs: tuple[Path, Path]) -> None:
    first, second = two_runs
    assert sorted(p.name for p in first.iterdir()) == sorted(GENERATED)
    assert _hashes(first) == _hashes(second)  # sha256


def test_committed_samples_are_what_the_script_writes(two_runs: tuple[Path, Path]) -> None:
    assert _hashes(SAMPLES) == _hashes(two_runs[0])  # sha256 of a fresh run


def test_sample_folder_holds_only_generated_files_and_stays_under_10_mb() -> None:
    names = sorted(p.name for p in SAMPLES.iterdir())
    assert names == sorted((*GENERATED, "README.md"))
    assert sum(p.stat().st_size for p in SAMPLES.iterdir()) < 10 * 1024 * 1024


def test_readme_describes_every_file_as_invented_and_tells_how_to_regenerate() -> None:
    readme = (SAMPLES / "README.md").read_text(encoding="utf-8")
    assert "invented" in readme.lower() and "python tools/make_samples.py" in readme
    for name in GENERATED:
        assert name in readme


def _read(name: str) -> tuple[np.ndarray, int]:
    return sf.read(SAMPLES / name, always_2d=True)  # libsndfile


def test_program_is_15_s_of_48_khz_stereo_peaking_at_minus_3_dbfs() -> None:
    x, rate = _read("program_48k.wav")
    assert rate == 48000 and x.shape == (720_000, 2)  # 15.0 s
    assert sf.info(SAMPLES / "program_48k.wav").subtype == "PCM_16"
    assert 20 * np.log10(np.max(np.abs(x))) == pytest.approx(-3.0, abs=0.1)
    assert np.corrcoef(x[:, 0], x[:, 1])[0, 1] < 0.999  # left and right differ


def test_program_has_energy_for_both_sides_of_a_crossover_and_in_the_treble() -> None:
    x, rate = _read("program_48k.wav")
    f, p = signal.welch(x.mean(axis=1), rate, nperseg=8192)  # Welch 1967
    total = p.sum()
    for low_hz, high_hz, least_db in ((20, 150, -6), (150, 2000, -20), (5000, 20000, -40)):
        band = p[(f >= low_hz) & (f < high_hz)].sum()
        assert 10 * np.log10(band / total) > least_db, (low_hz, high_hz)


def test_pink_noise_falls_3_db_per_octave_within_1_db_from_20_hz_to_20_khz() -> None:
    x, rate = _read("pink_noise_48k.wav")
    x = x[:, 0]
    assert rate == 48000 and len(x) == 240_000
    assert 20 * np.log10(np.sqrt(np.mean(x**2))) == pytest.approx(-20.0, abs=0.05)
    f, p = signal.welch(x, rate, nperseg=2**15)  # Welch 1967
    band = (f >= 20) & (f <= 20000)
    slope_db_per_octave = np.polyfit(np.log2(f[band]), 10 * np.log10(p[band]), 1)[0]
    assert slope_db_per_octave == pytest.approx(-10 * np.log10(2), abs=0.1)  # 1/f: -3.01 dB/oct
    edges = 20 * 2 ** np.arange(0, 10, 1 / 3)  # third octaves 20 Hz .. 20.5 kHz
    levels = [
        10 * np.log10(np.mean((p * f)[(f >= lo) & (f < hi)]))  # flat for 1/f
        for lo, hi in zip(edges[:-1], edges[1:], strict=True)
    ]
    assert np.max(np.abs(np.array(levels) - np.mean(levels))) < 1.0


def test_sweep_frequency_follows_the_exponential_law_at_minus_6_dbfs() -> None:
    x, rate = _read("log_sweep_48k.wav")
    x = x[:, 0]
    assert rate == 48000 and len(x) == 240_000
    assert 20 * np.log10(np.max(np.abs(x))) == pytest.approx(-6.0, abs=0.05)
    phase = np.unwrap(np.angle(signal.hilbert(x)))  # analytic signal
    inst_hz = np.diff(phase) * rate / (2 * np.pi)
    for t_s in (0.5, 1.5, 2.5, 3.5, 4.5):
        n = int(t_s * rate)
        expected = 20.0 * 1000.0 ** (t_s / 5.0)  # f1 (f2/f1)^(t/T), Farina AES 2000
        assert np.median(inst_hz[n - 100 : n + 100]) == pytest.approx(expected, rel=0.01)


@pytest.fixture(scope="module")
def manifest() -> dict:
    return json.loads((SAMPLES / "vibration_51k2.json").read_text(encoding="utf-8"))


def test_vibration_spectrum_shows_every_listed_tone_at_its_level(manifest: dict) -> None:
    x, rate = _read("vibration_51k2.wav")
    assert rate == manifest["rate_hz"] == 51200
    assert len(x) == manifest["duration_s"]["vibration_51k2.wav"] * rate
    assert sf.info(SAMPLES / "vibration_51k2.wav").subtype == "FLOAT"
    f, p = signal.welch(x[:, 0], rate, nperseg=16384)  # Welch 1967, Hann, 3.125 Hz bins
    df = f[1]
    floor = np.median(p)
    assert floor == pytest.approx(manifest["noise_rms_g"] ** 2 / (rate / 2), rel=0.15)  # white
    for tone in manifest["components"]:
        k = int(round(tone["freq_hz"] / df))
        near = slice(k - 4, k + 5)
        peak = k - 4 + int(np.argmax(p[near]))
        assert abs(f[peak] - tone["freq_hz"]) <= df, tone["name"]
        assert p[peak] > 1000 * floor, tone["name"]
        amplitude_g = np.sqrt(2 * p[near].sum() * df)  # tone power A^2/2 summed over the lobe
        assert amplitude_g == pytest.approx(tone["amplitude_g"], rel=0.02), tone["name"]


def test_vibration_components_fit_the_scenario(manifest: dict) -> None:
    shaft_hz = manifest["shaft_hz"]
    adc_hz = manifest["logger_adc_rate_hz"]
    assert manifest["logger_nyquist_hz"] == adc_hz / 2
    by_kind: dict[str, list[dict]] = {}
    for tone in manifest["components"]:
        by_kind.setdefault(tone["kind"], []).append(tone)
        folded = abs(tone["freq_hz"] - adc_hz * round(tone["freq_hz"] / adc_hz))
        assert tone["alias_hz_at_logger_rate"] == pytest.approx(folded)  # O&S 4.2 folding
        assert tone["alias_hz_at_logger_rate"] < adc_hz / 2
    harmonics = [tone["freq_hz"] / shaft_hz for tone in by_kind["shaft"]]
    np.testing.assert_allclose(harmonics, [1, 2, 3, 4], rtol=1e-9)
    bearing = sorted(tone["freq_hz"] for tone in by_kind["bearing"])
    np.testing.assert_allclose(np.diff(bearing), [shaft_hz, shaft_hz], rtol=1e-9)  # sidebands
    assert all(tone["freq_hz"] > adc_hz / 2 for tone in by_kind["spur"])  # above the Nyquist


def test_vibration_csv_holds_the_first_second_of_the_same_samples(manifest: dict) -> None:
    path = SAMPLES / "vibration_51k2.csv"
    assert path.read_text(encoding="utf-8").splitlines()[0] == "time_s,accel_g"
    table = np.loadtxt(path, delimiter=",", skiprows=1)  # numpy.loadtxt
    rate = manifest["rate_hz"]
    assert len(table) == manifest["duration_s"]["vibration_51k2.csv"] * rate
    assert 1 / np.median(np.diff(table[:, 0])) == pytest.approx(rate, rel=1e-4)
    wav, _ = sf.read(SAMPLES / "vibration_51k2.wav", dtype="float32")  # libsndfile
    np.testing.assert_array_equal(table[:, 1].astype(np.float32), wav[: len(table)])
