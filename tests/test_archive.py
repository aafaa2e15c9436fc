"""A sensor archive through candidate anti-alias filters: worst events at planted times and
frequencies, verdicts, identical results serial, threaded and on a Dask cluster, units, and
unreadable files among good ones."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
import soundfile as sf

from filtertwin.archive.calibration import (
    looks_like_counts,
    make_calibration,
    parse_sensitivity,
)
from filtertwin.archive.discover import find_recordings
from filtertwin.archive.scan import UNFILTERED, Candidate, ScanSpec, scan_file
from filtertwin.archive.summary import summarize
from filtertwin.archive.tasks import run_serial, run_tasks
from filtertwin.checks.alias import ideal_dynamic_range_db
from filtertwin.circuit.design import design_filter
from filtertwin.errors import UserInputError

RATE = 32000.0
ADC = 8000.0
BAND = 2000.0
SECONDS = 2.0
AMPLITUDE = 0.05

# (file, channel, tone Hz, start s, end s): invented bursts; each folds to |f - k fs|
PLANTED = [
    ("a.wav", 0, 6700.0, 0.5, 0.8),  # k = 1: 8000 - 6700 = 1300 Hz
    ("b.wav", 0, 14900.0, 0.2, 0.5),  # k = 2: 16000 - 14900 = 1100 Hz
    ("b.wav", 1, 9500.0, 1.2, 1.5),  # k = 1: 9500 - 8000 = 1500 Hz
]


def recording(name: str) -> np.ndarray:
    """Two channels: a 300 Hz in-band tone, faint noise, and the bursts planted in ``name``."""
    t = np.arange(int(RATE * SECONDS)) / RATE
    rng = np.random.default_rng(len(name) + ord(name[0]))
    x = 0.2 * np.sin(2 * np.pi * 300 * t)[:, None] + 1e-6 * rng.standard_normal((len(t), 2))
    for file, ch, f, lo, hi in PLANTED:
        if file == name:
            on = (t >= lo) & (t < hi)
            x[on, ch] += AMPLITUDE * np.sin(2 * np.pi * f * t[on])
    return x


@pytest.fixture(scope="module")
def archive(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("archive")
    for name in ("a.wav", "b.wav"):
        sf.write(folder / name, recording(name), int(RATE), subtype="FLOAT")
    return folder


def candidate(label: str, order: int, corner: str) -> Candidate:
    design = design_filter("aa", response="lowpass", alignment="butterworth", order=order,
                           corner=corner)  # fmt: skip
    return Candidate(label, design, "aa")


@pytest.fixture(scope="module")
def spec() -> ScanSpec:
    return ScanSpec(
        (candidate("steep", 8, "1 kHz"), candidate("gentle", 2, "3 kHz")), ADC, BAND, events=3
    )


@pytest.fixture(scope="module")
def serial(archive, spec):
    return run_serial(find_recordings([str(archive)]), spec)


def test_worst_events_are_the_planted_tones_at_their_times_and_fold_frequencies(serial):
    by_name = {Path(r.path).name: r for r in serial}
    for file, ch, f, lo, hi in PLANTED:
        worst = by_name[file].channels[ch].events[UNFILTERED][0]
        k = round(f / ADC)
        # Oppenheim & Schafer 4.2: a tone at f is sampled as |f - k fs|
        assert worst.alias_hz == pytest.approx(abs(f - k * ADC), abs=4.0)
        assert worst.source_hz == pytest.approx(f, abs=4.0)  # half a 7.8 Hz bin
        assert lo <= worst.time_s <= hi
        # a sine of amplitude A is 20 log10(A) dBFS (0 dBFS: full-scale sine, common practice)
        assert worst.dbfs == pytest.approx(20 * math.log10(AMPLITUDE), abs=0.3)


def test_filtered_events_drop_by_the_filter_s_attenuation(serial, spec):
    b, a = scipy.signal.butter(2, 2 * np.pi * 3000, analog=True)
    by_name = {Path(r.path).name: r for r in serial}
    for file, ch, f, _, _ in PLANTED:
        events = by_name[file].channels[ch].events
        drop = events[UNFILTERED][0].dbfs - events["gentle"][0].dbfs
        _, h = scipy.signal.freqs(b, a, [2 * np.pi * f])
        # scipy.signal.butter analog prototype; parts from E-series move it a little
        assert drop == pytest.approx(-20 * math.log10(abs(h[0])), abs=1.0)


def test_verdicts_say_which_candidate_passes_and_where_the_other_fails(serial, spec):
    summary = summarize(serial, spec)
    steep, gentle = summary.verdicts
    # the limit is a 16-bit ADC's ideal quantization noise: 6.02 N + 1.76 dB (Bennett 1948)
    assert summary.limit_dbfs == pytest.approx(-ideal_dynamic_range_db(16))
    assert steep.passed and "passes on every file (2)" in steep.text()
    assert not gentle.passed
    assert {Path(f).name for f in gentle.files_failed} == {"a.wav", "b.wav"}
    worst = gentle.failures[0]
    # 2nd order at 3 kHz: 6.7 kHz is attenuated least (scipy.signal.butter, as above)
    assert Path(worst.file).name == "a.wav" and worst.channel == "ch0"
    assert worst.event.alias_hz == pytest.approx(1300.0, abs=4.0)
    assert "FAILS on 2 of 2 files" in gentle.text()


def test_results_are_identical_serial_threaded_and_on_a_local_cluster(archive, spec, serial):
    from distributed import LocalCluster

    paths = find_recordings([str(archive)])
    expected = json.dumps([r.to_dict() for r in serial])
    threaded = run_tasks(paths, spec, workers=2)
    assert json.dumps([r.to_dict() for r in threaded]) == expected
    # two workers in this process, talking TCP on the loopback interface only
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, protocol="tcp",
                      host="127.0.0.1", dashboard_address=None) as cluster:  # fmt: skip
        seen = []
        clustered = run_tasks(paths, spec, address=cluster.scheduler_address,
                              progress=seen.append)  # fmt: skip
    assert json.dumps([r.to_dict() for r in clustered]) == expected
    assert sorted(r.path for r in seen) == sorted(str(p) for p in paths)


def test_segment_reads_only_its_time_range(archive, spec):
    part = ScanSpec(spec.candidates, ADC, BAND, start_s=1.0, end_s=1.9, events=3)
    result = scan_file(archive / "b.wav", part)
    assert result.start_s == pytest.approx(1.0) and result.duration_s == pytest.approx(0.9)
    worst = result.channels[1].events[UNFILTERED][0]
    assert 1.2 <= worst.time_s <= 1.5
    assert worst.alias_hz == pytest.approx(1500.0, abs=4.0)  # 9500 - 8000 (O&S 4.2)
    # the 14.9 kHz burst at 0.2-0.5 s lies before the segment
    assert result.channels[0].worst_dbfs[UNFILTERED] < -90


def test_unreadable_file_is_reported_and_the_others_are_done(archive, tmp_path, capsys,
                                                              monkeypatch):  # fmt: skip
    from filtertwin import cli

    folder = tmp_path / "mixed"
    folder.mkdir()
    for name in ("a.wav", "b.wav"):
        (folder / name).write_bytes((archive / name).read_bytes())
    (folder / "broken.wav").write_bytes((archive / "a.wav").read_bytes()[:60])  # cut header
    design = tmp_path / "steep.toml"
    design.write_text('[[filter]]\nname = "aa"\nresponse = "lowpass"\nalignment = '
                      '"butterworth"\norder = 8\ncorner = "1 kHz"\n')  # fmt: skip
    monkeypatch.chdir(tmp_path)
    status = cli.main(["alias", str(design), "mixed", "--adc-rate", "8k", "--band", "2k",
                       "--out", "out", "--workers", "2"])  # fmt: skip
    out, err = capsys.readouterr()
    assert status == 1
    assert "1 of 3 files could not be read" in err
    assert "broken.wav" in out and "passes on every file (2)" in out
    data = json.loads((tmp_path / "out" / "archive-summary.json").read_text())
    assert [Path(u["file"]).name for u in data["summary"]["unreadable"]] == ["broken.wav"]
    assert "\n" not in data["summary"]["unreadable"][0]["reason"]
    read = [f for f in data["files"] if "error" not in f]
    assert [Path(f["file"]).name for f in read] == ["a.wav", "b.wav"]
    assert (tmp_path / "out" / "archive-report.html").read_text().count("<img") == 1
    header = (tmp_path / "out" / "archive-table.csv").read_text().splitlines()[0]
    assert header.startswith("file,channel,stream,pass,worst_dbfs")


def test_sensitivity_and_full_scale_give_levels_in_the_sensor_s_unit():
    s = parse_sensitivity("100 mV/g")
    assert (s.volts_per_unit, s.unit) == (pytest.approx(0.1), "g")
    assert parse_sensitivity("10 V/(m/s)").unit == "m/s"
    with pytest.raises(UserInputError, match="VOLTAGE/UNIT"):
        parse_sensitivity("100 g")
    cal = make_calibration("volts", bits=16, full_scale_v=5.0, sensitivity=s)
    power = 0.5**2 / 2  # a 0.5 V sine
    # definition of sensitivity: 0.5 V / (0.1 V/g) = 5 g; 0.5 V of 5 V full scale = -20 dBFS
    assert cal.peak_in_unit(power) == pytest.approx(5.0)
    assert cal.dbfs(power) == pytest.approx(-20.0)
    counts = make_calibration("counts", bits=16, full_scale_v=5.0, sensitivity=s)
    # 16-bit full scale is 2^15 = 32768 counts (two's complement, common practice)
    assert counts.dbfs(16384.0**2 / 2) == pytest.approx(20 * math.log10(0.5))
    assert counts.peak_in_unit(16384.0**2 / 2) == pytest.approx(2.5 / 0.1)


def test_raw_counts_are_recognised_and_the_user_told_how_to_calibrate(tmp_path, spec):
    rate = 32000
    t = np.arange(rate) / rate
    counts = np.round(8952 * np.sin(2 * np.pi * 300 * t) + 40 * np.sin(2 * np.pi * 6700 * t))
    assert looks_like_counts(counts[:, None]) == pytest.approx(np.abs(counts).max())
    assert looks_like_counts(counts[:, None] / 32768) is None
    path = tmp_path / "logger.csv"
    path.write_text("time,x\n" + "".join(f"{i / rate:.7f},{int(v)}\n" for i, v in
                                         enumerate(counts)))  # fmt: skip
    result = scan_file(path, spec)
    assert result.error is None, result.error
    assert result.calibration.recorded_as == "counts" and "raw ADC counts" in result.note
    assert "--full-scale" in result.note and "--sensitivity" in result.note
    worst = result.channels[0].events[UNFILTERED][0]
    # 40 counts of 32768: 20 log10(40 / 32768) dBFS
    assert worst.dbfs == pytest.approx(20 * math.log10(40 / 32768), abs=0.3)


def test_progress_bar_counts_files_and_bytes(tmp_path):
    import io

    from filtertwin.archive.scan import FileResult
    from filtertwin.commands.alias_archive import _Progress

    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    paths = []
    for i, size in enumerate((1000, 3000)):
        paths.append(tmp_path / f"f{i}.wav")
        paths[-1].write_bytes(b"x" * size)
    screen = Terminal()
    bar = _Progress(screen, paths)
    bar.update(FileResult(str(paths[1]), 3000))
    assert "1/2 files, 0.0 MB of 0.0 MB" in screen.getvalue()
    assert "[######################........]" in screen.getvalue()  # 3000 of 4000 bytes: 22/30
    bar.update(FileResult(str(paths[0]), 1000, error="broken"))
    bar.close()
    assert "2/2 files" in screen.getvalue() and "1 unreadable" in screen.getvalue()


def test_render_of_several_files_writes_each_into_its_own_folder(archive, tmp_path, capsys):
    from filtertwin import cli

    broken = tmp_path / "broken.wav"
    broken.write_text("not audio")
    design = tmp_path / "gentle.toml"
    design.write_text('[[filter]]\nname = "aa"\nresponse = "lowpass"\nalignment = '
                      '"butterworth"\norder = 2\ncorner = "3 kHz"\n')  # fmt: skip
    out = tmp_path / "out"
    status = cli.main(["render", str(design), str(archive / "*.wav"), str(broken), "--out",
                       str(out), "--no-report", "--oversample", "1"])  # fmt: skip
    err = capsys.readouterr().err
    assert status == 1 and "1 of 3 files could not be rendered" in err
    for name in ("a", "b"):
        before, _ = sf.read(out / name / "before.wav")
        # the input as heard is the recording itself (soundfile reads both)
        np.testing.assert_allclose(before, sf.read(archive / f"{name}.wav")[0], atol=1e-7)
        assert (out / name / "aa.wav").is_file()
