"""Tests of filtertwin.files.outputs: audio, CSV and NPY outputs written safely.

Outside references: libsndfile through ``soundfile.read``/``soundfile.info`` for audio
contents and formats, ``numpy.loadtxt`` and ``numpy.load`` for CSV and NPY contents.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from filtertwin.errors import UserInputError
from filtertwin.files.outputs import SafeWriter, atomic_path, write_csv, write_npy
from filtertwin.files.recordings import inspect, read_all

RATE_HZ = 48000


def _noise(frames: int, channels: int, seed: int = 7) -> np.ndarray:
    return np.random.default_rng(seed).uniform(-0.9, 0.9, (frames, channels))


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
    source = tmp_path / "a.wav"
    sf.write(source, _noise(10, 1), RATE_HZ, subtype="FLOAT")
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


def test_float32_blocks_give_the_same_float_wav_as_float64_blocks(tmp_path: Path) -> None:
    data = _noise(1000, 2).astype(np.float32)
    for name, values in (("f32.wav", data), ("f64.wav", data.astype(np.float64))):
        with SafeWriter(tmp_path / name, RATE_HZ, 2) as writer:
            for start in range(0, 1000, 509):
                writer.write(values[start : start + 509])
    back, _ = sf.read(tmp_path / "f32.wav", dtype="float32", always_2d=True)  # libsndfile
    np.testing.assert_array_equal(back, data)
    assert (tmp_path / "f32.wav").read_bytes() == (tmp_path / "f64.wav").read_bytes()


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
