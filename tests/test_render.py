"""Offline rendering: block-size independence, equality with scipy, files, safety, bad input."""

from __future__ import annotations

import io
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
import soundfile as sf

from filtertwin import cli, examples
from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import load_design
from filtertwin.commands import render as render_command
from filtertwin.digital import render
from filtertwin.digital.resample import StreamResampler, design_filter, stage_taps
from filtertwin.digital.twin import build_twin
from filtertwin.errors import UserInputError
from filtertwin.files import outputs, recordings

RATE_HZ = 48000
SHORT_FRAMES = 1200


def _design(name: str = "studio-3way"):
    return build_design(load_design(examples.resolve(name)))


def _fidelity_status(out: Path) -> int:
    """The exit status the README's table gives: 1 when a twin is outside its tolerance."""
    fidelity = json.loads((out / "summary.json").read_text())["twin"]["fidelity"]
    return 0 if all(f["within_tolerance"] for f in fidelity.values()) else 1


def _noise(frames: int, channels: int = 2, level: float = 0.1, seed: int = 3) -> np.ndarray:
    return level * np.random.default_rng(seed).standard_normal((frames, channels))


def _float_wav(path: Path, data: np.ndarray, rate_hz: int = RATE_HZ) -> Path:
    sf.write(path, data, rate_hz, "FLOAT")
    return path


def _render_files(twin, source: Path, out: Path, block: int, spectra: bool = False):
    info = recordings.inspect(source)
    out.mkdir()
    plan = render.plan_outputs([f.name for f in twin.filters], out, ".wav")
    settings = render.RenderSettings(block_frames=block, spectra=spectra)
    return render.render(twin, info, plan, "FLOAT", settings)


def _no_temporaries(folder: Path) -> bool:
    return not [p for p in folder.rglob("*") if ".partial" in p.name]


# --- equality with scipy and block-size independence --------------------------------------


@pytest.mark.parametrize("block", [1, 17, 509, 4096])
def test_rendered_files_equal_one_pass_of_sosfilt_for_any_block_size(tmp_path, block):
    x = _noise(SHORT_FRAMES).astype(np.float32).astype(np.float64)
    source = _float_wav(tmp_path / "in.wav", x)
    twin = build_twin(_design(), RATE_HZ, oversampling=1)
    result = _render_files(twin, source, tmp_path / "out", block)
    ways = []
    for ft in twin.filters:
        expected = scipy.signal.sosfilt(ft.sos, x, axis=0)  # scipy.signal.sosfilt, one pass
        got, rate = sf.read(tmp_path / "out" / f"{ft.name}.wav", dtype="float64")
        assert rate == RATE_HZ
        # float32 file contents: within float32 rounding of the float64 reference
        np.testing.assert_allclose(got, expected, rtol=1e-6, atol=1e-6 * np.abs(expected).max())
        ways.append(expected)
    total, _ = sf.read(tmp_path / "out" / "sum.wav", dtype="float64")
    np.testing.assert_allclose(total, sum(ways), rtol=1e-6, atol=1e-6 * np.abs(total).max())
    before, _ = sf.read(tmp_path / "out" / "before.wav", dtype="float64")
    np.testing.assert_array_equal(before, x)  # the input as heard, bit for bit (float WAV)
    assert [f.path.name for f in result.files] == [
        "before.wav", "low.wav", "mid.wav", "high.wav", "sum.wav",
    ]  # fmt: skip


def test_in_memory_render_equals_sosfilt_in_float64():
    x = _noise(SHORT_FRAMES)
    twin = build_twin(_design(), RATE_HZ, oversampling=1)
    y = render.render_array(twin, x, 509)
    for i, ft in enumerate(twin.filters):
        expected = scipy.signal.sosfilt(ft.sos, x, axis=0)  # scipy.signal.sosfilt
        np.testing.assert_allclose(y[i], expected, rtol=0, atol=1e-12 * np.abs(expected).max())


@pytest.mark.parametrize("factor", [2, 4, 16])
def test_oversampled_render_does_not_depend_on_the_block_size(factor):
    x = _noise(2000)
    twin = build_twin(_design(), RATE_HZ, oversampling=factor)
    reference = render.render_array(twin, x, 4096)
    assert reference.shape == (3, 2000, 2)
    for block in (1, 17, 509):
        got = render.render_array(twin, x, block)
        # chunked output equal to one-shot output (python-soxr tests/test_resample.py habit)
        np.testing.assert_allclose(got, reference, rtol=0, atol=1e-13 * np.abs(reference).max())


@pytest.mark.parametrize("factor", [2, 8, 16])
def test_oversampled_render_equals_the_upfirdn_sosfilt_pipeline(factor):
    x = _noise(1500)
    twin = build_twin(_design(), RATE_HZ, oversampling=factor)
    got = render.render_array(twin, x, 256)
    # reference: scipy.signal.upfirdn with each 2x stage's FIR, sosfilt at the high rate,
    # upfirdn decimation stage by stage, then the delay of the linear-phase FIRs removed
    taps = [stage_taps(s) for s in range(1, factor.bit_length())]
    delay = render.TwinStream(twin, 2, 256).delay_frames
    padded = np.concatenate([x, np.zeros((delay, 2))])
    up = padded
    for h in taps:
        up = scipy.signal.upfirdn(2 * h, up, 2, 1, axis=0)[: 2 * len(up)]
    pad = (delay * factor - 2 * sum((len(h) - 1) // 2 * factor // 2**s for s, h in
                                    enumerate(taps, 1)))  # fmt: skip
    for i, ft in enumerate(twin.filters):
        high = scipy.signal.sosfilt(ft.sos, up, axis=0)
        high = np.concatenate([np.zeros((pad, 2)), high])[: len(high)]
        down = high
        for h in reversed(taps):
            down = scipy.signal.upfirdn(h, down, 1, 2, axis=0)[: len(down) // 2]
        down = down[delay : delay + len(x)]
        np.testing.assert_allclose(got[i], down, rtol=0, atol=1e-11 * np.abs(down).max())


@pytest.mark.parametrize("factor", [2, 3, 8])
def test_streaming_resamplers_match_resample_poly(factor):
    x = _noise(700, channels=2, level=1.0)
    up = StreamResampler(factor, 1, 2)
    zero_crossings = round(up.lag_frames)
    padded = np.concatenate([x, np.zeros((zero_crossings, 2))])
    got_up = np.concatenate([up.process(b) for b in np.array_split(padded, 9)])
    delay_hi = zero_crossings * factor
    expected_up = scipy.signal.resample_poly(x, factor, 1, axis=0)  # scipy.signal.resample_poly
    np.testing.assert_allclose(
        got_up[delay_hi : delay_hi + len(expected_up)], expected_up, rtol=0, atol=1e-12
    )
    high = _noise(700 * factor, channels=2, level=1.0, seed=4)
    down = StreamResampler(1, factor, 2)
    padded_hi = np.concatenate([high, np.zeros((delay_hi, 2))])
    sizes = [factor * k for k in (1, 5, 33)]
    pieces, start, k = [], 0, 0
    while start < len(padded_hi):
        pieces.append(down.process(padded_hi[start : start + sizes[k % 3]]))
        start += sizes[k % 3]
        k += 1
    got_down = np.concatenate(pieces)
    expected_down = scipy.signal.resample_poly(high, 1, factor, axis=0)  # resample_poly
    skip = zero_crossings
    np.testing.assert_allclose(
        got_down[skip : skip + len(expected_down)], expected_down, rtol=0, atol=1e-12
    )


def test_resampling_filter_is_the_one_resample_poly_applies():
    factor = 4
    impulse = np.zeros(64)
    impulse[32] = 1.0
    h = design_filter(1, factor)  # the FIR render's StreamResampler applies
    # resample_poly of a unit impulse, up by `factor`, is its FIR (times `factor`) centred
    response = scipy.signal.resample_poly(impulse, factor, 1)
    centre = 32 * factor
    half = len(h) // 2
    np.testing.assert_allclose(response[centre - half : centre + half + 1], h * factor, atol=1e-15)


# --- amplifier swing and levels -----------------------------------------------------------


def test_a_hot_input_clips_at_the_stage_whose_output_reaches_the_swing(tmp_path):
    design = _design()
    twin = build_twin(design, RATE_HZ, oversampling=1)
    t = np.arange(RATE_HZ // 4) / RATE_HZ
    level = 2.0 * twin.filters[0].clip_fs.min()  # well above the swing, in full-scale units
    x = np.column_stack([level * np.sin(2 * np.pi * 100.0 * t)] * 2)
    result = _render_files(twin, _float_wav(tmp_path / "hot.wav", x), tmp_path / "out", 4096)
    low = [c for c in result.clips if c.filter == "low"]
    assert low and all(c.samples > 0 for c in low)
    # the limited stage must be one whose output has a swing limit (the design's amplifier)
    limited = {s for s, lvl in zip(twin.filters[0].stage_of_section, twin.filters[0].clip_fs,
                                   strict=True) if np.isfinite(lvl)}  # fmt: skip
    assert {c.stage for c in low} <= limited
    out, _ = sf.read(tmp_path / "out" / "low.wav")
    # an op-amp output cannot go beyond its output swing (Horowitz & Hill 3rd ed., ch. 4,
    # from memory); the swing is the design's amplifier figure in full-scale units
    assert np.abs(out).max() <= twin.filters[0].clip_fs[-1] * (1 + 1e-6)


def test_render_exits_1_on_an_amplifier_swing_fail_and_0_when_every_check_passes(tmp_path):
    design = _design("turntable-rumble")  # a twin within its fidelity tolerance at 48 kHz
    twin = build_twin(design, RATE_HZ, oversampling="auto")
    t = np.arange(RATE_HZ // 4) / RATE_HZ
    quiet = np.column_stack([0.01 * np.sin(2 * np.pi * 100.0 * t)] * 2)
    hot = 2.0 * twin.filters[0].clip_fs.min() / 0.01 * quiet  # twice the swing, full-scale units
    for name, data, status in (("quiet", quiet, 0), ("hot", hot, 1)):
        source = _float_wav(tmp_path / f"{name}.wav", data)
        run = subprocess.run(
            [sys.executable, "-m", "filtertwin", "render", "turntable-rumble", str(source),
             "--out", str(tmp_path / name), "--no-report"],
            capture_output=True, text=True, check=False,
        )  # fmt: skip
        # README's exit-status table: 0 every check passed, 1 a check failed
        assert run.returncode == status, run.stdout + run.stderr
        lines = run.stdout.splitlines()
        assert lines[-1].startswith("verdict: PASS" if status == 0 else "verdict: FAIL")
        (swing,) = [s for s in lines if s.startswith("amplifier swing: filter 'rumble'")]
        assert swing.split()[4] == ("PASS" if status == 0 else "FAIL"), swing
    # the outputs of a FAIL are kept: the user listens to what failed
    assert (tmp_path / "hot" / "rumble.wav").exists()


@pytest.mark.parametrize("rate_hz", [44100, 48000])
@pytest.mark.parametrize("name", ["bookshelf-2way", "studio-3way"])
def test_a_plain_render_of_a_shipped_crossover_passes_every_check(tmp_path, capsys, name, rate_hz):
    source = _float_wav(tmp_path / "in.wav", _noise(rate_hz // 10), rate_hz)
    status = cli.main(["render", name, str(source), "--out", str(tmp_path / "o"), "--no-report"])
    printed = capsys.readouterr().out.splitlines()
    # README's exit-status table: 0 every check passed
    assert status == 0, "\n".join(printed)
    assert f"twin at {16 * rate_hz} Hz (16x)" in printed[0]
    twin_lines = [s for s in printed if s.startswith("twin fidelity: filter ")]
    assert len(twin_lines) == len(_design(name).filters)
    assert all(" PASS (" in s for s in twin_lines), twin_lines
    assert printed[-1].startswith("verdict: PASS")


def test_peak_levels_are_the_sample_peaks_of_the_written_files(tmp_path):
    x = _noise(SHORT_FRAMES, level=0.3)
    source = _float_wav(tmp_path / "in.wav", x)
    result = _render_files(build_twin(_design(), RATE_HZ, oversampling=1), source,
                           tmp_path / "out", 1024)  # fmt: skip
    for f in result.files:
        data, _ = sf.read(f.path, always_2d=True)
        peak = np.abs(data).max(axis=0)
        np.testing.assert_allclose(f.peak, peak, rtol=1e-6)  # float32 file vs float64 peak
        assert f.peak_dbfs == pytest.approx(20 * np.log10(peak.max()), abs=1e-4)  # dBFS of a peak


# --- files, failures and the command ------------------------------------------------------


def test_output_names_avoid_clashes_and_unsafe_characters(tmp_path):
    plan = render.plan_outputs(["sum", "low/pass", "Before", "x"], tmp_path, ".wav")
    names = [p.path.name for p in plan]
    assert names == ["before.wav", "sum-2.wav", "low-pass.wav", "Before-2.wav", "x.wav", "sum.wav"]
    assert len({n.lower() for n in names}) == len(names)


def test_a_failure_mid_render_leaves_no_output_and_no_temporary(tmp_path, monkeypatch):
    source = _float_wav(tmp_path / "in.wav", _noise(20000))
    twin = build_twin(_design(), RATE_HZ, oversampling=1)
    calls = {"n": 0}
    original = render.TwinStream.process

    def failing(self, block):
        calls["n"] += 1
        if calls["n"] == 3:
            raise RuntimeError("disk vanished")
        return original(self, block)

    monkeypatch.setattr(render.TwinStream, "process", failing)
    with pytest.raises(RuntimeError, match="disk vanished"):
        _render_files(twin, source, tmp_path / "out", 1000)
    assert list((tmp_path / "out").iterdir()) == []


def test_a_failure_while_writing_is_raised_and_leaves_nothing(tmp_path, monkeypatch):
    source = _float_wav(tmp_path / "in.wav", _noise(20000))
    twin = build_twin(_design(), RATE_HZ, oversampling=1)

    def failing(self, block):
        raise OSError("no space left on device")

    monkeypatch.setattr(outputs.SafeWriter, "write", failing)
    with pytest.raises(OSError, match="no space left"):
        _render_files(twin, source, tmp_path / "out", 1000)
    assert list((tmp_path / "out").iterdir()) == []


def test_the_command_writes_audio_figures_report_and_a_complete_summary(tmp_path, capsys):
    source = _float_wav(tmp_path / "in.wav", _noise(RATE_HZ // 2))
    original = source.read_bytes()
    out = tmp_path / "rendered"
    args = ["render", "studio-3way", str(source), "--out", str(out), "--oversample", "1"]
    status = cli.main(args)
    assert status == _fidelity_status(out)
    printed = capsys.readouterr()
    assert "clipping: none" in printed.out and "dBFS" in printed.out
    assert printed.err == ""  # no progress bar when stderr is not a terminal
    summary = json.loads((out / "summary.json").read_text())
    listed = [f["path"] for f in summary["files"]] + summary["figures"] + [summary["report"]]
    on_disk = sorted(p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file())
    assert sorted(listed + ["summary.json"]) == on_disk  # every file listed, nothing else left
    assert {f["role"] for f in summary["files"]} == {"before", "filter", "sum"}
    assert all(isinstance(f["peak_dbfs"], float) for f in summary["files"])
    page = (out / "report.html").read_text()
    # spectra, twin against analog, and the crossover check of this 3-way design
    assert page.count("data:image/png;base64,") == len(summary["figures"]) == 3
    assert "figures/crossover.png" in summary["figures"] and "Crossover check: PASS" in page
    assert "<th>built f0</th>" in page and "Filter &#x27;low&#x27;: stages and parts" in page
    assert "loud playback harms hearing" in page
    assert source.read_bytes() == original  # the input is never touched


def test_a_report_failure_removes_the_audio_already_written(tmp_path, monkeypatch):
    from filtertwin.report import figures

    def broken(*args, **kwargs):
        raise RuntimeError("figure failed")

    monkeypatch.setattr(figures, "response_figure", broken)
    source = _float_wav(tmp_path / "in.wav", _noise(4800))
    out = tmp_path / "new" / "folder"
    with pytest.raises(RuntimeError, match="figure failed"):
        cli.main(["render", "studio-3way", str(source), "--out", str(out), "--oversample", "1"])
    assert not (tmp_path / "new").exists()  # nor the folders made for it


def test_a_csv_sensor_capture_renders_to_csv_equal_to_sosfilt(tmp_path, capsys):
    rate = 1000.0
    values = _noise(1500, channels=1, level=2.0)[:, 0]
    source = tmp_path / "accel.csv"
    outputs.write_csv(source, values, rate, ["accel_g"])
    out = tmp_path / "out"
    status = cli.main(["render", "turntable-rumble", str(source), "--out", str(out),
                       "--oversample", "1", "--no-report"])  # fmt: skip
    assert status == _fidelity_status(out)
    twin = build_twin(_design("turntable-rumble"), rate, oversampling=1)
    table = np.loadtxt(out / "rumble.csv", delimiter=",", skiprows=1)
    read_back = np.loadtxt(source, delimiter=",", skiprows=1)[:, 1]
    expected = scipy.signal.sosfilt(twin.filters[0].sos, read_back)  # scipy.signal.sosfilt
    np.testing.assert_allclose(table[:, 0], np.arange(1500) / rate, atol=1e-9)
    np.testing.assert_allclose(table[:, 1], expected, rtol=1e-8, atol=1e-8)  # 9 digits in CSV
    assert sorted(p.name for p in out.iterdir()) == ["before.csv", "rumble.csv", "summary.json"]


def test_the_progress_bar_is_silent_off_a_terminal_and_draws_on_one(monkeypatch):
    quiet = io.StringIO()
    bar = render_command._ProgressBar(quiet, 1000.0)
    bar(500, 1000)
    bar.close()
    assert quiet.getvalue() == ""

    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    monkeypatch.setattr(render_command, "PROGRESS_AFTER_S", 0.0)
    screen = Terminal()
    bar = render_command._ProgressBar(screen, 1000.0)
    bar(1000, 1000)
    bar.close()
    assert screen.getvalue().startswith("\r[") and "100.0 %" in screen.getvalue()
    assert screen.getvalue().endswith("\n")


def test_an_output_that_is_the_input_is_refused_before_anything_is_written(tmp_path):
    source = _float_wav(tmp_path / "mid.wav", _noise(480))
    with pytest.raises(UserInputError, match="would overwrite the input"):
        cli_args = ["render", "studio-3way", str(source), "--out", str(tmp_path)]
        render_command.cmd_render(cli.build_parser().parse_args(cli_args))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["mid.wav"]


def test_bad_inputs_exit_2_with_one_line_and_leave_nothing_behind(tmp_path):
    good = _float_wav(tmp_path / "before.wav", _noise(4800))
    data = good.read_bytes()
    (tmp_path / "truncated.wav").write_bytes(data[: len(data) // 2])
    (tmp_path / "empty.wav").write_bytes(b"")
    (tmp_path / "text.wav").write_text("time,value\n0,1\n1,2\n")
    cases = {
        "truncated.wav": "truncated",
        "empty.wav": "empty",
        "text.wav": "holds text, not audio",
        "before.wav": "would overwrite the input",  # --out is the input's own folder
    }
    runs = {}
    for name in cases:
        out = tmp_path if name == "before.wav" else tmp_path / f"out_{name}"
        runs[name] = subprocess.Popen(
            [sys.executable, "-m", "filtertwin", "render", "studio-3way", str(tmp_path / name),
             "--out", str(out)],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )  # fmt: skip
    for name, expected in cases.items():
        stdout, stderr = runs[name].communicate(timeout=60)
        assert runs[name].returncode == 2, (name, stderr)
        assert stderr.count("\n") == 1 and "Traceback" not in stderr, (name, stderr)
        assert expected in stderr and stdout == "", (name, stderr)
    left = sorted(p.name for p in tmp_path.iterdir())
    assert left == ["before.wav", "empty.wav", "text.wav", "truncated.wav"]


def test_the_worst_build_render_uses_the_tolerance_analysis_worst_parts(tmp_path, capsys):
    from filtertwin.checks.tolerance import run_tolerance, worst_build_design

    x = _noise(4800).astype(np.float32).astype(np.float64)
    source = _float_wav(tmp_path / "in.wav", x)
    out = tmp_path / "out"
    args = ["render", "bookshelf-2way", str(source), "--out", str(out), "--oversample", "1",
            "--build", "worst", "--builds", "40", "--seed", "3"]  # fmt: skip
    assert cli.main(args) == _fidelity_status(out)
    summary = json.loads((out / "summary.json").read_text())
    analysis = run_tolerance(_design("bookshelf-2way"), 40, seed=3)
    assert summary["design"]["build"] == "worst"
    assert summary["tolerance"]["worst"]["build"] == analysis.worst_build
    assert "figures/tolerance.png" in summary["figures"]
    worst = build_twin(worst_build_design(_design("bookshelf-2way"), analysis), RATE_HZ,
                       oversampling=1)  # fmt: skip
    for ft in worst.filters:
        expected = scipy.signal.sosfilt(ft.sos, x, axis=0)  # scipy.signal.sosfilt
        got, _ = sf.read(out / f"{ft.name}.wav")
        np.testing.assert_allclose(got, expected, rtol=1e-6, atol=1e-6 * np.abs(expected).max())
    nominal = build_twin(_design("bookshelf-2way"), RATE_HZ, oversampling=1)
    assert not np.allclose(nominal.filters[0].sos, worst.filters[0].sos)  # other parts
    page = (out / "report.html").read_text()
    # spectra, twin against analog, crossover check, tolerance envelope
    assert page.count("data:image/png;base64,") == 4 and "Tolerance builds" in page
