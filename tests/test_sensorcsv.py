"""Tests of filtertwin.files.sensorcsv: sensor tables read through recordings.inspect.

Outside references: ``numpy.loadtxt`` for CSV contents, ``numpy.median`` for the rate of a
time column, and rates worked out by hand from the time steps (noted beside each).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from filtertwin.errors import UserInputError
from filtertwin.files import sensorcsv
from filtertwin.files.outputs import write_csv
from filtertwin.files.recordings import inspect, read_all, read_blocks


def _noise(frames: int, channels: int, seed: int = 7) -> np.ndarray:
    return np.random.default_rng(seed).uniform(-0.9, 0.9, (frames, channels))


def _csv(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


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
    blocks = list(read_blocks(info, 509))
    np.testing.assert_array_equal(np.concatenate(blocks), np.loadtxt(path, delimiter=","))  # numpy


@pytest.mark.parametrize("block_frames", [1, 17, 509, 9000])
def test_csv_blocks_join_to_one_read_across_parse_batches(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, block_frames: int
) -> None:
    monkeypatch.setattr(sensorcsv, "CSV_BATCH_LINES", 100)
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
    with pytest.raises(UserInputError, match=r"no time column.*give the rate with --rate HZ"):
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
    ("one row", "time,a\n0,1\n", {}, r"one row gives no sample interval; give.*--rate HZ$"),
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
    monkeypatch.setattr(sensorcsv, "CSV_BATCH_LINES", 10)  # batches: lines 2..11, 12..21, ...
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
