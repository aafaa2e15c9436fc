"""Tests of filtertwin.files.recordings: block reading of audio and NPY files, validation messages.

Outside references: libsndfile through ``soundfile.read`` for audio contents, ``numpy.load``
for NPY contents. Sensor tables are tested in test_sensorcsv.py, writers in test_outputs.py.
"""

from __future__ import annotations

import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from filtertwin.errors import UserInputError
from filtertwin.files import recordings, sensorcsv
from filtertwin.files.outputs import write_csv
from filtertwin.files.recordinginfo import RecordingInfo
from filtertwin.files.recordings import inspect, read_all, read_blocks

RATE_HZ = 48000


def _noise(frames: int, channels: int, seed: int = 7) -> np.ndarray:
    return np.random.default_rng(seed).uniform(-0.9, 0.9, (frames, channels))


def _csv(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def _concat(info: RecordingInfo, block_frames: int) -> np.ndarray:
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
    ("npy no rate", lambda p: _npy(p, np.ones(5)), {}, r"carry no sample rate; give.*--rate HZ$"),
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
    assert frames > (sensorcsv.CSV_BATCH_LINES if kind == "csv" else recordings.SCAN_FRAMES)
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
