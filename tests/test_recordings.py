"""Tests of filtertwin.recordings: block reading, validation messages and safe writing.

Outside references: libsndfile through ``soundfile.read`` for audio contents, ``numpy.loadtxt``
and ``numpy.load`` for CSV and NPY contents, ``numpy.median`` for the rate of a time column.
"""

from __future__ import annotations

import os
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from filtertwin import recordings
from filtertwin.errors import UserInputError
from filtertwin.recordings import (
    SafeWriter,
    atomic_path,
    inspect,
    read_all,
    read_blocks,
    write_csv,
    write_npy,
)

RATE_HZ = 48000


def _noise(frames: int, channels: int, seed: int = 7) -> np.ndarray:
    return np.random.default_rng(seed).uniform(-0.9, 0.9, (frames, channels))


def _csv(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def _concat(info: recordings.RecordingInfo, block_frames: int) -> np.ndarray:
    return np.concatenate(list(read_blocks(info, block_frames)))


# --- audio -------------------------------------------------------------------------------


@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24", "FLOAT"])
def test_wav_contents_equal_what_libsndfile_reads(tmp_path: Path, subtype: str) -> None:
    path = tmp_path / "in.wav"
    sf.write(path, _noise(1001, 2), RATE_HZ, subtype=subtype)
    info = inspect(path)
    expected, rate = sf.read(path, dtype="float64", always_2d=True)  # libsndfile
    assert (info.kind, info.rate_hz, info.channels, info.frames) == ("audio", rate, 2, 1001)
    assert info.subtype == sf.info(path).subtype  # libsndfile
    np.testing.assert_array_equal(read_all(info), expected)


def test_flac_contents_equal_what_libsndfile_reads(tmp_path: Path) -> None:
    path = tmp_path / "in.flac"
    sf.write(path, _noise(3000, 1), 44100, subtype="PCM_24")
    info = inspect(path)
    expected, _ = sf.read(path, dtype="float64", always_2d=True)  # libsndfile
    assert info.rate_hz == 44100.0
    np.testing.assert_array_equal(read_all(info), expected)


@pytest.mark.parametrize("block_frames", [1, 17, 509, 1000, 1001, 5000])
def test_audio_blocks_join_to_one_read_with_a_short_last_block(
    tmp_path: Path, block_frames: int
) -> None:
    path = tmp_path / "in.wav"
    sf.write(path, _noise(1000, 2), RATE_HZ, subtype="FLOAT")
    info = inspect(path)
    blocks = list(read_blocks(info, block_frames))
    sizes = [len(b) for b in blocks]
    assert all(size == block_frames for size in sizes[:-1])
    assert sizes[-1] == 1000 - block_frames * (len(blocks) - 1)
    assert all(b.dtype == np.float64 and b.shape[1] == 2 for b in blocks)
    expected, _ = sf.read(path, dtype="float64", always_2d=True)  # libsndfile
    np.testing.assert_array_equal(np.concatenate(blocks), expected)


def test_one_audio_channel_can_be_chosen_by_index_or_name(tmp_path: Path) -> None:
    path = tmp_path / "in.wav"
    sf.write(path, _noise(500, 3), RATE_HZ, subtype="FLOAT")
    expected, _ = sf.read(path, always_2d=True)  # libsndfile
    by_index = inspect(path, column=2)
    by_name = inspect(path, column="ch2")
    assert by_index.channels == 1 and by_index.channel_names == ("ch2",)
    np.testing.assert_array_equal(_concat(by_index, 17)[:, 0], expected[:, 2])
    np.testing.assert_array_equal(read_all(by_name)[:, 0], expected[:, 2])


# --- CSV ---------------------------------------------------------------------------------


def test_csv_rate_comes_from_the_time_column(tmp_path: Path) -> None:
    t = 0.25 + np.arange(2000) / 1234.5
    values = _noise(2000, 2)
    path = tmp_path / "log.csv"
    np.savetxt(path, np.column_stack([t, values]), delimiter=",", header="t,x,y", comments="")
    info = inspect(path)
    expected_rate = 1 / np.median(np.diff(np.loadtxt(path, delimiter=",", skiprows=1)[:, 0]))
    assert info.rate_hz == pytest.approx(expected_rate, rel=1e-9)  # numpy median interval
    assert info.channel_names == ("x", "y") and info.frames == 2000
    expected = np.loadtxt(path, delimiter=",", skiprows=1)[:, 1:]  # numpy.loadtxt
    np.testing.assert_array_equal(read_all(info), expected)


def test_csv_without_header_reads_every_column_at_the_given_rate(tmp_path: Path) -> None:
    path = tmp_path / "raw.csv"
    np.savetxt(path, _noise(777, 3), delimiter=",")
    info = inspect(path, rate_hz=500.0)
    assert (info.rate_hz, info.channels, info.channel_names) == (500.0, 3, ("col0", "col1", "col2"))
    np.testing.assert_array_equal(_concat(info, 509), np.loadtxt(path, delimiter=","))  # numpy


@pytest.mark.parametrize("block_frames", [1, 17, 509, 9000])
def test_csv_blocks_join_to_one_read_across_parse_batches(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, block_frames: int
) -> None:
    monkeypatch.setattr(recordings, "CSV_BATCH_LINES", 100)
    path = tmp_path / "log.csv"
    write_csv(path, _noise(2345, 2), 1000.0, ["a", "b"])
    info = inspect(path)
    blocks = list(read_blocks(info, block_frames))
    assert all(len(b) == block_frames for b in blocks[:-1])
    assert len(blocks[-1]) == 2345 - block_frames * (len(blocks) - 1)
    expected = np.loadtxt(path, delimiter=",", skiprows=1)[:, 1:]  # numpy.loadtxt
    np.testing.assert_array_equal(np.concatenate(blocks), expected)


def test_csv_accepts_comments_semicolons_quotes_and_millisecond_time(tmp_path: Path) -> None:
    text = '# logger export\n"Time (ms)";"Accel";"State"\n0;1.5;OK\n2;-2.5;OK\n\n4;3.0;OK\n'
    info = inspect(_csv(tmp_path / "ms.csv", text))
    assert info.rate_hz == pytest.approx(500.0)  # 2 ms step = 500 Hz (1 / 0.002 s)
    assert info.channel_names == ("Accel",)  # the text column is left out
    np.testing.assert_array_equal(read_all(info)[:, 0], [1.5, -2.5, 3.0])


def test_csv_column_can_be_chosen_by_name_or_index_and_time_column_explicitly(
    tmp_path: Path,
) -> None:
    path = _csv(tmp_path / "x.csv", "clock,a,b\n0,1,10\n0.5,2,20\n1.0,3,30\n")
    with pytest.raises(UserInputError, match=r"no time column"):
        inspect(path)
    by_name = inspect(path, time_column="clock", column="b")
    by_index = inspect(path, time_column=0, column=1)
    assert by_name.rate_hz == pytest.approx(2.0)  # 0.5 s step
    np.testing.assert_array_equal(read_all(by_name)[:, 0], [10, 20, 30])
    np.testing.assert_array_equal(read_all(by_index)[:, 0], [1, 2, 3])


def test_given_rate_wins_when_it_agrees_with_the_time_column(tmp_path: Path) -> None:
    path = _csv(tmp_path / "x.csv", "time,a\n0,1\n0.001,2\n0.002,3\n")
    assert inspect(path, rate_hz=1000.5).rate_hz == 1000.5
    with pytest.raises(UserInputError, match=r"2000 Hz disagrees with the time column"):
        inspect(path, rate_hz=2000.0)


# --- NPY ---------------------------------------------------------------------------------


@pytest.mark.parametrize("shape", [(999,), (999, 2)])
def test_npy_contents_equal_numpy_load(tmp_path: Path, shape: tuple[int, ...]) -> None:
    path = tmp_path / "cap.npy"
    np.save(path, np.random.default_rng(3).standard_normal(shape).astype(np.float32))
    info = inspect(path, rate_hz=2000.0)
    expected = np.load(path).astype(np.float64).reshape(999, -1)  # numpy.load
    assert (info.kind, info.frames, info.channels) == ("npy", 999, expected.shape[1])
    np.testing.assert_array_equal(_concat(info, 17), expected)
    np.testing.assert_array_equal(_concat(info, 509), expected)


# --- bad input ---------------------------------------------------------------------------


def _truncated_wav(tmp_path: Path) -> Path:
    path = tmp_path / "cut.wav"
    sf.write(path, _noise(10000, 2), RATE_HZ, subtype="PCM_16")
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    return path


def _truncated_flac(tmp_path: Path) -> Path:
    path = tmp_path / "cut.flac"
    sf.write(path, _noise(20000, 2), RATE_HZ, subtype="PCM_24")
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    return path


def _wav_with_nan(tmp_path: Path) -> Path:
    data = _noise(300, 1)
    data[123] = np.nan
    path = tmp_path / "nan.wav"
    sf.write(path, data, RATE_HZ, subtype="FLOAT")
    return path


def _truncated_npy(tmp_path: Path) -> Path:
    path = tmp_path / "cut.npy"
    np.save(path, np.arange(1000.0))
    path.write_bytes(path.read_bytes()[:900])
    return path


def _npy(tmp_path: Path, data: np.ndarray) -> Path:
    path = tmp_path / "a.npy"
    np.save(path, data, allow_pickle=True)
    return path


BAD_FILES = [
    ("missing", lambda p: p / "nope.wav", {}, r"nope\.wav: no such file"),
    ("zero bytes", lambda p: _csv(p / "e.wav", ""), {}, r"e\.wav is empty \(0 bytes\)"),
    ("text as wav", lambda p: _csv(p / "t.wav", "t,a\n0,1\n"), {}, r"holds text.*rename.*\.csv"),
    ("wav as csv", lambda p: _wav_as(p, "w.csv"), {}, r"w\.csv is really a WAV.*rename.*\.wav"),
    ("binary csv", lambda p: _bytes(p / "b.csv", bytes(range(256))), {}, r"b\.csv is binary"),
    ("text npy", lambda p: _csv(p / "t.npy", "1,2\n"), {"rate_hz": 10}, r"not a NumPy.*text"),
    ("truncated wav", _truncated_wav, {}, r"cut\.wav is truncated"),
    ("truncated flac", _truncated_flac, {}, r"cut\.flac is damaged or truncated"),
    ("truncated npy", _truncated_npy, {"rate_hz": 10}, r"cut\.npy is truncated or damaged"),
    ("zero frames", lambda p: _wav(p, np.zeros((0, 1))), {}, r"holds no audio \(0 frames\)"),
    ("nan wav", _wav_with_nan, {}, r"nan\.wav holds NaN or infinite samples from frame 123"),
    ("wrong rate", lambda p: _wav(p, _noise(10, 1)), {"rate_hz": 44100}, r"48000 Hz, not"),
    ("npy no rate", lambda p: _npy(p, np.ones(5)), {}, r"carry no sample rate"),
    ("npy nan", lambda p: _npy(p, np.r_[1.0, np.inf]), {"rate_hz": 9}, r"infinite.*frame 1"),
    ("npy complex", lambda p: _npy(p, np.ones(3) * 1j), {"rate_hz": 9}, r"complex128 values"),
    ("npy sideways", lambda p: _npy(p, np.ones((2, 50))), {"rate_hz": 9}, r"shape \(2, 50\)"),
    ("npy empty", lambda p: _npy(p, np.ones(0)), {"rate_hz": 9}, r"0 frames"),
    ("zero rate", lambda p: _wav(p, _noise(10, 1)), {"rate_hz": 0}, r"must be a positive number"),
    ("csv header only", lambda p: _csv(p / "h.csv", "time,a\n"), {}, r"header but no data rows"),
    ("csv no rate", lambda p: _csv(p / "n.csv", "a,b\n1,2\n"), {}, r"n\.csv has no time column"),
    ("csv bad channel", lambda p: _wav(p, _noise(9, 2)), {"column": 5}, r"index 5 is out of range"),
]


def _wav(tmp_path: Path, data: np.ndarray) -> Path:
    path = tmp_path / "a.wav"
    sf.write(path, data, RATE_HZ, subtype="FLOAT")
    return path


def _wav_as(tmp_path: Path, name: str) -> Path:
    path = _wav(tmp_path, _noise(100, 1))
    return path.rename(tmp_path / name)


def _bytes(path: Path, data: bytes) -> Path:
    path.write_bytes(data)
    return path


@pytest.mark.parametrize(("case", "make", "kwargs", "message"), BAD_FILES, ids=lambda x: x)
def test_bad_files_are_refused_with_one_line_naming_file_and_fix(
    tmp_path: Path, case: str, make: object, kwargs: dict[str, object], message: str
) -> None:
    path = make(tmp_path)  # type: ignore[operator]
    with pytest.raises(UserInputError, match=message) as caught:
        inspect(path, **kwargs)  # type: ignore[arg-type]
    assert "\n" not in str(caught.value)
    assert ";" in str(caught.value) or "rename" in str(caught.value)  # the fix is stated


BAD_CSV = [
    ("text value", "time,a\n0,1\n0.1,x\n", {}, r"line 3, column 'a' \(index 1\): 'x' is not a"),
    ("nan value", "time,a\n0,1\n0.1,nan\n", {}, r"line 3, column 'a'.*not a finite number"),
    ("inf value", "time,a\n0,inf\n0.1,1\n", {}, r"line 2, column 'a'.*not a finite number"),
    ("nan time", "time,a\n0,1\nnan,2\n", {}, r"line 3, column 'time'.*not a finite number"),
    ("backwards time", "time,a\n0,1\n0.1,2\n0.05,3\n", {}, r"line 4: time \('time'\) does not"),
    ("repeated time", "time,a\n0,1\n0.1,2\n0.1,2\n", {}, r"line 4: time.*does not increase"),
    ("jitter", "t,a\n0,1\n0.1,2\n0.2,3\n0.31,4\n", {}, r"line 5: sample interval 0.11 s is 10.0%"),
    ("short row", "time,a\n0,1\n0.1\n", {}, r"line 3 has 1 fields, so column 'a'"),
    ("unknown name", "time,a\n0,1\n0.1,2\n", {"column": "b"}, r"no column named 'b'; available"),
    ("time as data", "time,a\n0,1\n0.1,2\n", {"column": "time"}, r"'time' is the time column"),
    ("rate too low", "a\n1\n2\n", {"rate_hz": -5.0}, r"-5.0 Hz must be a positive number"),
    ("one row", "time,a\n0,1\n", {}, r"one row gives no sample interval"),
    ("only time", "time\n0\n1\n", {}, r"no numeric data column besides the time column"),
]


@pytest.mark.parametrize(("case", "text", "kwargs", "message"), BAD_CSV, ids=lambda x: x)
def test_bad_csv_is_refused_naming_line_and_column(
    tmp_path: Path, case: str, text: str, kwargs: dict[str, object], message: str
) -> None:
    path = _csv(tmp_path / "log.csv", text)
    with pytest.raises(UserInputError, match=message) as caught:
        inspect(path, **kwargs)  # type: ignore[arg-type]
    assert str(caught.value).startswith(str(path))
    assert "\n" not in str(caught.value)


def test_unknown_column_lists_the_available_names(tmp_path: Path) -> None:
    path = _csv(tmp_path / "log.csv", "time_s,accel_g,temp_c\n0,1,2\n0.1,2,3\n")
    with pytest.raises(UserInputError, match=r"available: time_s, accel_g, temp_c$"):
        inspect(path, column="accel")


def test_jitter_within_a_raised_limit_is_accepted(tmp_path: Path) -> None:
    path = _csv(tmp_path / "log.csv", "t,a\n0,1\n0.1,2\n0.2,3\n0.31,4\n")
    info = inspect(path, jitter_limit=0.2)
    assert info.rate_hz == pytest.approx(3 / 0.31)  # (frames - 1) / time span


@pytest.mark.parametrize(
    ("bad_line", "value", "message"),
    [
        (10, "0.0085", "sample interval 0.0015 s is 50.0% off"),  # inside the first batch
        (11, "0.0092", "sample interval 0.0012 s is 20.0% off"),  # last line of a batch
        (12, "0.0105", "sample interval 0.0015 s is 50.0% off"),  # step across two batches
        (12, "0.0085", r"time \('time'\) does not increase"),  # backwards across two batches
    ],
)
def test_time_checks_hold_across_parse_batches(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, bad_line: int, value: str, message: str
) -> None:
    monkeypatch.setattr(recordings, "CSV_BATCH_LINES", 10)  # batches: lines 2..11, 12..21, ...
    rows = [f"{n / 1000:.4f},{n}" for n in range(30)]  # 1 ms steps
    rows[bad_line - 2] = f"{value},0"
    path = _csv(tmp_path / "log.csv", "time,a\n" + "\n".join(rows) + "\n")
    with pytest.raises(UserInputError, match=rf"line {bad_line}: {message}"):
        inspect(path)


def test_a_units_row_under_the_header_is_skipped(tmp_path: Path) -> None:
    path = _csv(tmp_path / "log.csv", "time,accel\ns,g\n0,1\n0.01,2\n0.02,3\n")
    info = inspect(path)
    assert info.rate_hz == pytest.approx(100.0)  # 0.01 s step
    assert info.channel_names == ("accel",)
    np.testing.assert_array_equal(read_all(info)[:, 0], [1, 2, 3])


def test_a_text_column_in_every_row_does_not_make_the_first_row_a_header(tmp_path: Path) -> None:
    path = _csv(tmp_path / "log.csv", "0,1.5,OK\n1,2.5,OK\n")
    info = inspect(path, rate_hz=10.0)
    assert info.frames == 2 and info.channel_names == ("col0", "col1")
    with pytest.raises(UserInputError, match=r"line 1, column 'col2' \(index 2\): 'OK' is not"):
        inspect(path, rate_hz=10.0, column=2)


def test_block_size_must_be_positive(tmp_path: Path) -> None:
    info = inspect(_wav(tmp_path, _noise(10, 1)))
    with pytest.raises(UserInputError, match=r"block size 0 frames must be a whole number"):
        read_blocks(info, 0)


# --- memory ------------------------------------------------------------------------------


def _peak_bytes_reading(path: Path, **kwargs: object) -> int:
    tracemalloc.start()
    try:
        info = inspect(path, **kwargs)  # type: ignore[arg-type]
        total = 0.0
        for block in read_blocks(info, 4096):
            total += float(block.sum())
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


@pytest.mark.parametrize(("kind", "frames"), [("csv", 30_000), ("wav", 100_000), ("npy", 100_000)])
def test_peak_memory_does_not_grow_with_file_length(tmp_path: Path, kind: str, frames: int) -> None:
    # ``frames`` exceeds the parse batch (CSV) and the validation block (audio, NPY), so both
    # files already use full-size buffers; a reader that kept the file would grow tenfold.
    assert frames > (recordings.CSV_BATCH_LINES if kind == "csv" else recordings.SCAN_FRAMES)
    peaks = []
    for length in (frames, 10 * frames):
        data = _noise(length, 2)
        path = tmp_path / f"{length}.{kind}"
        if kind == "csv":
            write_csv(path, data, 1000.0, ["a", "b"])
        elif kind == "wav":
            sf.write(path, data, RATE_HZ, subtype="FLOAT")
        else:
            np.save(path, data)
        del data
        peaks.append(_peak_bytes_reading(path, rate_hz=1000.0 if kind == "npy" else None))
    short, long = peaks
    assert long < 1.25 * short + 64_000  # ten times the frames, about the same peak
    assert long < 10 * frames * 2 * 8 / 2  # well below the float64 size of the long file


# --- writing -----------------------------------------------------------------------------


@pytest.mark.parametrize(("name", "subtype"), [("o.wav", "FLOAT"), ("o.flac", "PCM_24")])
def test_safe_writer_output_reads_back_with_libsndfile(
    tmp_path: Path, name: str, subtype: str
) -> None:
    data = _noise(1234, 2)
    with SafeWriter(tmp_path / name, RATE_HZ, 2) as writer:
        for start in range(0, 1234, 509):
            writer.write(data[start : start + 509])
    back, rate = sf.read(tmp_path / name, always_2d=True)  # libsndfile
    assert rate == RATE_HZ and sf.info(tmp_path / name).subtype == subtype
    tolerance = 0 if subtype == "FLOAT" else 2.0**-23  # 24-bit step
    np.testing.assert_allclose(back, data.astype(np.float32), atol=tolerance, rtol=1e-7)
    assert sorted(p.name for p in tmp_path.iterdir()) == [name]


def test_safe_writer_leaves_no_file_when_the_block_raises(tmp_path: Path) -> None:
    target = tmp_path / "out.wav"
    target.write_bytes(b"previous result")
    with pytest.raises(RuntimeError, match="stop"), SafeWriter(target, RATE_HZ, 1) as writer:
        writer.write(np.zeros(100))
        raise RuntimeError("stop")
    assert [p.name for p in tmp_path.iterdir()] == ["out.wav"]
    assert target.read_bytes() == b"previous result"


def test_safe_writer_refuses_to_overwrite_a_protected_input(tmp_path: Path) -> None:
    source = _wav(tmp_path, _noise(10, 1))
    before = source.read_bytes()
    (tmp_path / "sub").mkdir()
    (tmp_path / "link.wav").symlink_to(source)
    for spelling in (source, tmp_path / "sub" / ".." / "a.wav", tmp_path / "link.wav"):
        with pytest.raises(UserInputError, match=r"refusing to write .*choose another name"):
            SafeWriter(spelling, RATE_HZ, 1, protect=[source])
    assert source.read_bytes() == before


def test_float_wav_output_has_no_time_stamp_so_equal_data_gives_equal_bytes(
    tmp_path: Path,
) -> None:
    for name in ("a.wav", "b.wav"):
        with SafeWriter(tmp_path / name, RATE_HZ, 1) as writer:
            writer.write(_noise(100, 1))
        with sf.SoundFile(tmp_path / name) as f:
            assert "time stamp" not in f.extra_info  # libsndfile's header log
    assert (tmp_path / "a.wav").read_bytes() == (tmp_path / "b.wav").read_bytes()


def test_pcm_output_clips_instead_of_wrapping(tmp_path: Path) -> None:
    with SafeWriter(tmp_path / "o.wav", RATE_HZ, 1, subtype="PCM_16") as writer:
        writer.write(np.array([1.5, -1.5, 0.5]))
    back, _ = sf.read(tmp_path / "o.wav")  # libsndfile
    np.testing.assert_allclose(back, [32767 / 32768, -1.0, 0.5], atol=2**-15)  # 16-bit limits


def test_safe_writer_close_is_safe_twice_and_write_after_close_fails(tmp_path: Path) -> None:
    writer = SafeWriter(tmp_path / "o.wav", RATE_HZ, 1)
    writer.write(np.zeros(10))
    writer.close()
    writer.close()
    assert sf.info(tmp_path / "o.wav").frames == 10  # libsndfile
    with pytest.raises(ValueError, match="already closed"):
        writer.write(np.zeros(10))


@pytest.mark.parametrize(
    ("name", "kwargs", "message"),
    [
        ("o.mp4", {}, r"cannot tell the audio format of .*o\.mp4; name it \.wav or \.flac"),
        ("o.flac", {"subtype": "FLOAT"}, r"FLAC cannot hold FLOAT samples; use one of"),
        ("missing/o.wav", {}, r"folder .*missing does not exist; create it first"),
    ],
)
def test_safe_writer_refuses_impossible_outputs(
    tmp_path: Path, name: str, kwargs: dict[str, str], message: str
) -> None:
    with pytest.raises(UserInputError, match=message):
        SafeWriter(tmp_path / name, RATE_HZ, 1, **kwargs)  # type: ignore[arg-type]


def test_atomic_path_renames_on_success_and_cleans_up_on_failure(tmp_path: Path) -> None:
    final = tmp_path / "report.json"
    with atomic_path(final) as temporary:
        assert temporary.parent == tmp_path and temporary.suffix == ".json"
        temporary.write_text("{}")
        assert not final.exists()
    assert final.read_text() == "{}"
    with pytest.raises(OSError, match="disk full"), atomic_path(final) as temporary:
        temporary.write_text('{"half": ')
        raise OSError("disk full")
    assert final.read_text() == "{}" and sorted(os.listdir(tmp_path)) == ["report.json"]
    with (
        pytest.raises(UserInputError, match="refusing to write"),
        atomic_path(final, protect=[final]),
    ):
        pass


def test_write_csv_round_trips_through_numpy_and_inspect(tmp_path: Path) -> None:
    data = _noise(100, 2).astype(np.float32)
    path = tmp_path / "cap.csv"
    write_csv(path, data, 51200.0, ["x_g", "y_g"])
    table = np.loadtxt(path, delimiter=",", skiprows=1)  # numpy.loadtxt
    assert path.read_text().splitlines()[0] == "time_s,x_g,y_g"
    np.testing.assert_array_equal(table[:, 1:].astype(np.float32), data)  # 9 digits: float32
    np.testing.assert_allclose(table[:, 0], np.arange(100) / 51200.0, atol=5e-10)
    info = inspect(path)
    assert info.rate_hz == pytest.approx(51200.0, rel=1e-6)
    np.testing.assert_array_equal(read_all(info), table[:, 1:])


def test_write_npy_round_trips_and_protects_inputs(tmp_path: Path) -> None:
    data = _noise(50, 3)
    path = tmp_path / "cap.npy"
    write_npy(path, data)
    np.testing.assert_array_equal(np.load(path), data)  # numpy.load
    with pytest.raises(UserInputError, match="refusing to write"):
        write_npy(path, data, protect=[path])
    with pytest.raises(UserInputError, match="refusing to write"):
        write_csv(path, data, 10.0, ["a", "b", "c"], protect=[path])
