"""Recordings in: audio, sensor tables and NumPy arrays validated once, then read in blocks.

Reading is two steps. :func:`inspect` validates a file completely (one pass) and returns a
:class:`~filtertwin.files.recordinginfo.RecordingInfo` that also records which columns or channels
to read; :func:`read_blocks` then streams float64 ``(frames, channels)`` blocks from it. Peak
memory depends on the block size, never on the length of the file. Audio and NPY files are
read here, sensor tables (CSV) in :mod:`filtertwin.files.sensorcsv`; outputs are written by
:mod:`filtertwin.files.outputs`.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import soundfile as sf

from filtertwin.errors import UserInputError
from filtertwin.files import sensorcsv
from filtertwin.files.recordinginfo import (
    FILE_SIGNATURES,
    RecordingInfo,
    choose_indices,
    fail,
    head_bytes,
    is_text,
)

__all__ = ["SCAN_FRAMES", "inspect", "read_all", "read_blocks"]

SCAN_FRAMES = 65536
"""Frames per read while validating audio and NPY files."""


def inspect(
    path: str | os.PathLike[str],
    *,
    rate_hz: float | None = None,
    column: str | int | None = None,
    time_column: str | int | None = None,
    jitter_limit: float = 0.01,
) -> RecordingInfo:
    """Validate a recording completely and describe what :func:`read_blocks` will yield.

    The kind follows the extension: ``.csv``/``.tsv``/``.txt`` are sensor tables, ``.npy``
    a NumPy array of shape ``(frames,)`` or ``(frames, channels)``, anything else audio.

    Parameters
    ----------
    path : path-like
        The recording.
    rate_hz : float, optional
        Sample rate in Hz. Required for NPY files and for CSV files without a time column;
        for audio files it must agree with the file's own rate.
    column : str or int, optional
        The one channel to read: a CSV header name or 0-based field index, or a 0-based
        audio/NPY channel index (or its name ``ch0``...). Default: every channel; for CSV
        every field except the time column whose first data row holds a number.
    time_column : str or int, optional
        CSV time column (seconds; ``ms``/``us`` names are scaled). Default: the field whose
        header is a time name such as ``time``, ``t``, ``time_s``, ``seconds``, ``time_ms``.
    jitter_limit : float, optional
        Largest allowed deviation of a CSV sample interval from the typical (median) interval,
        as a fraction of it (default 0.01 = 1 %).

    Returns
    -------
    RecordingInfo
        For CSV files with a time column, ``rate_hz`` is (frames - 1) / (last - first time)
        unless ``rate_hz`` was given (it then must agree within ``jitter_limit``).

    Raises
    ------
    UserInputError
        One line naming the file (and line and column for CSV) and the fix: unreadable,
        mislabelled, empty, truncated, text in a numeric column, NaN or infinite values,
        time stamps that do not increase or jitter, missing rate, unknown column.
    """
    path = Path(path)
    if rate_hz is not None and not (np.isfinite(rate_hz) and rate_hz > 0):
        raise UserInputError(
            f"{path}: sample rate {rate_hz} Hz must be a positive number; give it in Hz, e.g. 1000"
        )
    if not jitter_limit > 0:
        raise UserInputError(
            f"jitter limit {jitter_limit} must be positive; give a fraction, e.g. 0.01"
        )
    if not path.is_file():
        raise UserInputError(f"{path}: no such file; check the path and the working folder")
    if path.stat().st_size == 0:
        raise UserInputError(f"{path} is empty (0 bytes); record or export it again")
    suffix = path.suffix.lower()
    if suffix in sensorcsv.CSV_SUFFIXES:
        return sensorcsv.inspect_csv(path, rate_hz, column, time_column, jitter_limit)
    if time_column is not None:
        raise UserInputError(f"{path}: a time column applies only to CSV files; drop it")
    if suffix == ".npy":
        return _inspect_npy(path, rate_hz, column)
    return _inspect_audio(path, rate_hz, column)


def read_blocks(info: RecordingInfo, block_frames: int) -> Iterator[np.ndarray]:
    """Yield the recording as float64 ``(frames, channels)`` blocks.

    Every block holds ``block_frames`` frames except the last, which holds the rest. The
    channels (and CSV columns) are those chosen in :func:`inspect` and stored in ``info``.
    Each block is a new array the caller may keep.

    Parameters
    ----------
    info : RecordingInfo
        From :func:`inspect`.
    block_frames : int
        Frames per block, at least 1.

    Yields
    ------
    numpy.ndarray
        float64 array of shape ``(n, info.channels)``, ``1 <= n <= block_frames``.

    Raises
    ------
    UserInputError
        If ``block_frames`` is not positive, or the file changed or broke since inspection.
    """
    if int(block_frames) != block_frames or block_frames < 1:
        raise UserInputError(f"block size {block_frames} frames must be a whole number >= 1")
    block_frames = int(block_frames)
    if info.kind == "csv":
        return _counted(info, sensorcsv.csv_blocks(info, block_frames))
    if info.kind == "npy":
        return _counted(info, _npy_blocks(info, block_frames))
    return _counted(info, _audio_blocks(info, block_frames))


def _counted(info: RecordingInfo, blocks: Iterator[np.ndarray]) -> Iterator[np.ndarray]:
    frames = 0
    for block in blocks:
        frames += len(block)
        yield block
    if frames != info.frames:
        raise UserInputError(
            f"{info.path} changed while it was read ({frames} frames, expected {info.frames});"
            " leave inputs untouched while filtertwin runs"
        )


def read_all(info: RecordingInfo) -> np.ndarray:
    """Read a whole (short) recording as one float64 ``(frames, channels)`` array.

    Parameters
    ----------
    info : RecordingInfo
        From :func:`inspect`.

    Returns
    -------
    numpy.ndarray
        Same values as the concatenated blocks of :func:`read_blocks`.
    """
    out = np.empty((info.frames, info.channels))
    start = 0
    for block in read_blocks(info, SCAN_FRAMES):
        out[start : start + len(block)] = block
        start += len(block)
    return out


# --- audio -------------------------------------------------------------------------------


def _inspect_audio(path: Path, rate_hz: float | None, column: str | int | None) -> RecordingInfo:
    try:
        f = sf.SoundFile(path)
    except sf.LibsndfileError as exc:
        raise UserInputError(_not_audio_message(path, exc)) from None
    with f:
        rate, channels, frames, subtype = f.samplerate, f.channels, f.frames, f.subtype
        _check_audio_header(path, f.extra_info)
        _scan_audio(path, f, check_finite=subtype in ("FLOAT", "DOUBLE"))
    if frames == 0:
        raise UserInputError(f"{path} holds no audio (0 frames); record or export it again")
    if rate_hz is not None and rate_hz != rate:
        raise UserInputError(
            f"{path} is recorded at {rate} Hz, not the {rate_hz:g} Hz given; drop the rate"
        )
    names = tuple(f"ch{i}" for i in range(channels))
    chosen = choose_indices(path, names, column, range(channels), "channel")
    return RecordingInfo(
        path, "audio", float(rate), len(chosen), frames, tuple(names[i] for i in chosen), subtype,
        chosen if column is not None else (),
    )  # fmt: skip


def _check_audio_header(path: Path, log: str) -> None:
    """Find data chunks that claim more bytes than the file holds (libsndfile's header log)."""
    for name, claimed, present in re.findall(r"(data|SSND)\s*:\s*(\d+)\s*\(should be (\d+)\)", log):
        if int(claimed) > int(present):
            raise UserInputError(
                f"{path} is truncated: its {name} chunk claims {claimed} bytes but holds"
                f" {present}; copy or export the file again"
            )


def _scan_audio(path: Path, f: sf.SoundFile, *, check_finite: bool) -> None:
    frames = 0
    try:
        while len(block := f.read(SCAN_FRAMES, dtype="float32", always_2d=True)):
            if check_finite and not np.isfinite(block).all():
                at = frames + int(np.argwhere(~np.isfinite(block))[0, 0])
                fail(
                    f"{path} holds NaN or infinite samples from frame {at}"
                    f" ({at / f.samplerate:.6g} s); repair or re-export the recording"
                )
            frames += len(block)
    except sf.LibsndfileError as exc:
        reason = " ".join(str(exc.error_string).split())
        fail(
            f"{path} is damaged or truncated after frame {frames} (libsndfile: {reason});"
            " copy or export the file again"
        )
    if frames != f.frames:
        fail(
            f"{path} is truncated: {frames} of {f.frames} frames are readable;"
            " copy or export the file again"
        )


def _not_audio_message(path: Path, exc: sf.LibsndfileError) -> str:
    reason = " ".join(str(exc.error_string).split())
    head = head_bytes(path)
    for magic, what, suffix in FILE_SIGNATURES:
        if head.startswith(magic) and path.suffix.lower() != suffix:
            return f"{path} is really {what}; rename it to {suffix}"
    if head and is_text(head):
        return f"{path} holds text, not audio; if it is a sensor table, rename it to .csv"
    return f"{path}: cannot read it as audio (libsndfile: {reason}); export it again as WAV or FLAC"


def _audio_blocks(info: RecordingInfo, block_frames: int) -> Iterator[np.ndarray]:
    select = list(info.source_channels)
    try:
        with sf.SoundFile(info.path) as f:
            while len(block := f.read(block_frames, dtype="float64", always_2d=True)):
                yield block[:, select] if select else block
    except sf.LibsndfileError as exc:
        reason = " ".join(str(exc.error_string).split())
        fail(f"{info.path} could not be read (libsndfile: {reason}); copy the file again")


# --- NPY ---------------------------------------------------------------------------------


def _inspect_npy(path: Path, rate_hz: float | None, column: str | int | None) -> RecordingInfo:
    array = _load_npy(path)
    if array.dtype.kind not in "iuf":
        raise UserInputError(
            f"{path} holds {array.dtype} values; save real numbers, e.g. data.astype(float)"
        )
    if array.ndim not in (1, 2) or (array.ndim == 2 and array.shape[1] > array.shape[0]):
        raise UserInputError(
            f"{path} has shape {array.shape}; save (frames,) or (frames, channels),"
            " e.g. np.save(path, data.T) if channels come first"
        )
    frames = array.shape[0]
    if frames == 0:
        raise UserInputError(f"{path} holds no samples (0 frames); save the capture again")
    if rate_hz is None:
        raise UserInputError(f"{path}: NPY files carry no sample rate; give it with --rate HZ")
    if array.dtype.kind == "f":
        for start in range(0, frames, SCAN_FRAMES):
            bad = ~np.isfinite(array[start : start + SCAN_FRAMES])
            if bad.any():
                at = start + int(np.argwhere(bad)[0, 0])
                raise UserInputError(
                    f"{path} holds NaN or infinite values from frame {at}; repair the capture"
                )
    channels = 1 if array.ndim == 1 else array.shape[1]
    names = tuple(f"ch{i}" for i in range(channels))
    chosen = choose_indices(path, names, column, range(channels), "channel")
    return RecordingInfo(
        path, "npy", float(rate_hz), len(chosen), frames, tuple(names[i] for i in chosen),
        str(array.dtype), chosen if column is not None else (),
    )  # fmt: skip


def _load_npy(path: Path) -> np.ndarray:
    head = head_bytes(path)
    if not head.startswith(b"\x93NUMPY"):
        kind = next((what for magic, what, _ in FILE_SIGNATURES if head.startswith(magic)), None)
        kind = kind or ("text" if is_text(head) else "unknown binary data")
        raise UserInputError(
            f"{path} is not a NumPy .npy file (it holds {kind}); save it with numpy.save"
        )
    try:
        array = np.load(path, mmap_mode="r", allow_pickle=False)
    except (ValueError, OSError, EOFError) as exc:
        reason = " ".join(str(exc).split())
        raise UserInputError(
            f"{path} is truncated or damaged (numpy: {reason}); save the capture again"
        ) from None
    return np.asarray(array)


def _npy_blocks(info: RecordingInfo, block_frames: int) -> Iterator[np.ndarray]:
    array = _load_npy(info.path)
    select = list(info.source_channels)
    for start in range(0, array.shape[0], block_frames):
        block = np.array(array[start : start + block_frames], dtype=np.float64, ndmin=1)
        block = block.reshape(len(block), -1)
        yield block[:, select] if select else block
