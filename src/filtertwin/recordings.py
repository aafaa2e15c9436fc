"""Recordings in and out: audio and sensor files read in blocks, outputs written safely.

Reading is two steps. :func:`inspect` validates a file completely (one pass) and returns a
:class:`RecordingInfo` that also records which columns or channels to read; :func:`read_blocks`
then streams float64 ``(frames, channels)`` blocks from it. Peak memory depends on the block
size, never on the length of the file.

Writing never touches an input and never leaves a half-written output: :class:`SafeWriter`,
:func:`write_csv`, :func:`write_npy` and :func:`atomic_path` write to a temporary name in the
target folder and rename it to the final name only when the write completed.
"""

from __future__ import annotations

import contextlib
import os
import re
import secrets
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from itertools import islice
from pathlib import Path
from typing import NoReturn, TextIO

import numpy as np
import soundfile as sf

from filtertwin.errors import UserInputError

__all__ = [
    "CsvLayout",
    "RecordingInfo",
    "SafeWriter",
    "atomic_path",
    "inspect",
    "read_all",
    "read_blocks",
    "write_csv",
    "write_npy",
]

CSV_BATCH_LINES = 8192
"""Lines parsed at a time; also the number of intervals that set the typical time step."""
SCAN_FRAMES = 65536
"""Frames per read while validating audio and NPY files."""

_CSV_SUFFIXES = frozenset({".csv", ".tsv", ".txt"})
_TIME_SCALES_S = {
    **dict.fromkeys(("t", "time", "time_s", "t_s", "seconds", "sec", "s", "timestamp"), 1.0),
    **dict.fromkeys(("time_ms", "t_ms", "ms", "milliseconds"), 1e-3),
    **dict.fromkeys(("time_us", "t_us", "us", "microseconds"), 1e-6),
}
_MAGIC = (
    (b"RIFF", "a WAV audio file", ".wav"),
    (b"RF64", "a WAV audio file", ".wav"),
    (b"fLaC", "a FLAC audio file", ".flac"),
    (b"OggS", "an Ogg audio file", ".ogg"),
    (b"FORM", "an AIFF audio file", ".aiff"),
    (b"\x93NUMPY", "a NumPy array file", ".npy"),
    (b"PK\x03\x04", "a zip archive (e.g. .npz)", ".zip"),
)
_FORMAT_BY_SUFFIX = {".wav": "WAV", ".flac": "FLAC", ".aif": "AIFF", ".aiff": "AIFF"}
_DEFAULT_SUBTYPE = {"WAV": "FLOAT", "FLAC": "PCM_24", "AIFF": "PCM_24"}
_SFC_SET_ADD_PEAK_CHUNK = 0x1050  # libsndfile sndfile.h; the PEAK chunk holds a wall-clock time


@dataclass(frozen=True)
class CsvLayout:
    """How the rows of a CSV file are laid out.

    Attributes
    ----------
    delimiter : str or None
        Field separator; ``None`` means runs of whitespace.
    skip_lines : int
        Lines before the first data row (comments, blank lines, the header row).
    """

    delimiter: str | None
    skip_lines: int


@dataclass(frozen=True)
class RecordingInfo:
    """A validated recording and the choice of what to read from it.

    Attributes
    ----------
    path : Path
        The file.
    kind : str
        ``"audio"`` (anything libsndfile reads), ``"csv"`` or ``"npy"``.
    rate_hz : float
        Sample rate in Hz.
    channels : int
        Channels that :func:`read_blocks` yields.
    frames : int
        Frames (samples per channel) in the file.
    channel_names : tuple of str
        Names of the channels yielded: CSV header names (``col0``... without a header),
        ``ch0``... for audio and NPY channels.
    subtype : str or None
        libsndfile sample format (``"PCM_16"``, ``"FLOAT"``...) for audio, the dtype name for
        NPY, ``None`` for CSV.
    source_channels : tuple of int
        0-based channel (audio, NPY) or field (CSV) indices that are read, in output order;
        empty means every channel.
    layout : CsvLayout or None
        Row layout, for CSV files only.
    """

    path: Path
    kind: str
    rate_hz: float
    channels: int
    frames: int
    channel_names: tuple[str, ...]
    subtype: str | None
    source_channels: tuple[int, ...] = ()
    layout: CsvLayout | None = None

    @property
    def duration_s(self) -> float:
        """Length of the recording in seconds."""
        return self.frames / self.rate_hz


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
    if suffix in _CSV_SUFFIXES:
        return _inspect_csv(path, rate_hz, column, time_column, jitter_limit)
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
        return _counted(info, _rechunk(_csv_pieces(info), block_frames))
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
    chosen = _choose(path, names, column, range(channels), "channel")
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
                _fail(
                    f"{path} holds NaN or infinite samples from frame {at}"
                    f" ({at / f.samplerate:.6g} s); repair or re-export the recording"
                )
            frames += len(block)
    except sf.LibsndfileError as exc:
        reason = " ".join(str(exc.error_string).split())
        _fail(
            f"{path} is damaged or truncated after frame {frames} (libsndfile: {reason});"
            " copy or export the file again"
        )
    if frames != f.frames:
        _fail(
            f"{path} is truncated: {frames} of {f.frames} frames are readable;"
            " copy or export the file again"
        )


def _not_audio_message(path: Path, exc: sf.LibsndfileError) -> str:
    reason = " ".join(str(exc.error_string).split())
    head = _head(path)
    for magic, what, suffix in _MAGIC:
        if head.startswith(magic) and path.suffix.lower() != suffix:
            return f"{path} is really {what}; rename it to {suffix}"
    if head and _is_text(head):
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
        _fail(f"{info.path} could not be read (libsndfile: {reason}); copy the file again")


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
        raise UserInputError(f"{path}: NPY files carry no sample rate; give the rate in Hz")
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
    chosen = _choose(path, names, column, range(channels), "channel")
    return RecordingInfo(
        path, "npy", float(rate_hz), len(chosen), frames, tuple(names[i] for i in chosen),
        str(array.dtype), chosen if column is not None else (),
    )  # fmt: skip


def _load_npy(path: Path) -> np.ndarray:
    head = _head(path)
    if not head.startswith(b"\x93NUMPY"):
        kind = next((what for magic, what, _ in _MAGIC if head.startswith(magic)), None)
        kind = kind or ("text" if _is_text(head) else "unknown binary data")
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


# --- CSV ---------------------------------------------------------------------------------


def _inspect_csv(
    path: Path,
    rate_hz: float | None,
    column: str | int | None,
    time_column: str | int | None,
    jitter_limit: float,
) -> RecordingInfo:
    _check_text(path)
    layout, names, numeric = _csv_head(path)
    every = range(len(names))
    if time_column is not None:
        found = list(_choose(path, names, time_column, every, "time column"))
    else:
        found = [j for j in every if _time_key(names[j]) in _TIME_SCALES_S][:1]
    tcol = found[0] if found else None
    scale = _TIME_SCALES_S.get(_time_key(names[found[0]]), 1.0) if found else 1.0
    data = [j for j in every if j != tcol and (column is not None or numeric[j])]
    chosen = _choose(path, names, column, data, "column")
    if not chosen:
        raise UserInputError(f"{path} has no numeric data column besides the time column")
    if tcol is None and rate_hz is None:
        raise UserInputError(
            f"{path} has no time column (a header such as time, t, time_s or seconds) and no"
            " sample rate was given; give the rate in Hz or add a time column"
        )
    usecols = chosen if tcol is None else (tcol, *chosen)
    frames, time_rate_hz = _scan_csv(path, layout, names, usecols, tcol, scale, jitter_limit)
    rate_hz = _csv_rate(path, frames, rate_hz, time_rate_hz, jitter_limit)
    return RecordingInfo(
        path, "csv", rate_hz, len(chosen), frames, tuple(names[j] for j in chosen), None,
        chosen, layout,
    )  # fmt: skip


def _check_text(path: Path) -> None:
    head = _head(path)
    for magic, what, suffix in _MAGIC:
        if head.startswith(magic):
            _fail(f"{path} is really {what}, not a text table; rename it to {suffix}")
    if not _is_text(head):
        _fail(f"{path} is binary, not a UTF-8 text table; export the capture as CSV text")


def _head(path: Path) -> bytes:
    with open(path, "rb") as fh:
        return fh.read(4096)


def _is_text(head: bytes) -> bool:
    if b"\x00" in head:
        return False
    try:
        head.decode("utf-8")
    except UnicodeDecodeError as exc:  # a character cut at the end of the sample is fine
        return exc.start >= len(head) - 3 and exc.reason == "unexpected end of data"
    return True


def _csv_head(path: Path) -> tuple[CsvLayout, tuple[str, ...], list[bool]]:
    """Find delimiter, header names and which fields of the first data row are numbers.

    The first row is a header if it has text where the row below has a number; a row of text
    right under the header (units, such as ``s,g``) is skipped as well.
    """
    content: list[tuple[int, str]] = []
    with _open_text(path) as fh:
        for index, line in enumerate(fh):
            if line.strip() and not line.lstrip().startswith("#"):
                content.append((index, line.strip()))
                if len(content) == 3:
                    break
    if not content:
        _fail(f"{path} has no data rows; export the capture again")
    delimiter = next((d for d in (",", ";", "\t") if d in content[0][1]), None)
    rows = [_split(line, delimiter) for _, line in content]
    numbers = [[_is_number(field) for field in row] for row in rows]

    def labels_over(i: int) -> bool:
        return any(not a and b for a, b in zip(numbers[0], numbers[i], strict=False))

    header_rows = 0
    if len(rows) == 1 and not all(numbers[0]):
        _fail(f"{path} has a header but no data rows; export the capture again")
    elif len(rows) > 1 and labels_over(1):
        header_rows = 1
    elif len(rows) > 2 and not any(numbers[1]) and labels_over(2):
        header_rows = 2
    data_row = rows[header_rows]
    labels = rows[0] if header_rows else [""] * len(data_row)
    names = tuple(label or f"col{j}" for j, label in enumerate(labels))
    numeric = numbers[header_rows] + [False] * (len(names) - len(data_row))
    return CsvLayout(delimiter, content[header_rows][0]), names, numeric


def _scan_csv(
    path: Path,
    layout: CsvLayout,
    names: tuple[str, ...],
    usecols: tuple[int, ...],
    tcol: int | None,
    scale: float,
    jitter_limit: float,
) -> tuple[int, float | None]:
    """Count the rows and check the time stamps; return (frames, rate from time column)."""
    frames = 0
    t_first = t_last = typical = None
    for lines, values in _csv_batches(path, layout, names, usecols):
        frames += len(values)
        if tcol is None:
            continue
        t = values[:, 0] * scale
        steps = np.diff(t if t_last is None else np.concatenate([[t_last], t]))
        if len(steps):
            at_lines = lines[len(lines) - len(steps) :]
            typical = _check_steps(path, names[tcol], steps, at_lines, typical, jitter_limit)
        t_first = t[0] if t_first is None else t_first
        t_last = t[-1]
    if t_first is None or t_last is None or frames < 2:
        return frames, None
    return frames, (frames - 1) / (t_last - t_first)


def _check_steps(
    path: Path, name: str, steps: np.ndarray, lines: np.ndarray, typical: float | None, limit: float
) -> float:
    """Check that time increases evenly; return the typical step (median of the first batch)."""
    if not np.all(steps > 0):
        at = int(np.argmax(steps <= 0))
        _fail(
            f"{path} line {lines[at]}: time ({name!r}) does not increase; sort the rows"
            " or remove repeated lines"
        )
    if typical is None:
        typical = float(np.median(steps))
    off = np.abs(steps - typical) / typical
    if np.any(off > limit):
        at = int(np.argmax(off > limit))
        _fail(
            f"{path} line {lines[at]}: sample interval {steps[at]:.6g} s is {off[at]:.1%} off"
            f" the typical {typical:.6g} s (limit {limit:.1%}); resample the capture evenly"
            " or raise the jitter limit"
        )
    return typical


def _csv_rate(
    path: Path, frames: int, given: float | None, from_time: float | None, limit: float
) -> float:
    if frames == 0:
        _fail(f"{path} has a header but no data rows; export the capture again")
    if from_time is None:
        if given is None:
            _fail(f"{path}: one row gives no sample interval; give the rate in Hz")
        return float(given)
    if given is not None and abs(given - from_time) > limit * from_time:
        _fail(
            f"{path}: the given rate {given:g} Hz disagrees with the time column"
            f" ({from_time:.6g} Hz); drop the rate or fix the time stamps"
        )
    return float(given if given is not None else from_time)


def _csv_pieces(info: RecordingInfo) -> Iterator[np.ndarray]:
    assert info.layout is not None
    names = tuple(f"col{j}" for j in range(max(info.source_channels) + 1))
    for _, values in _csv_batches(info.path, info.layout, names, info.source_channels):
        yield values


def _csv_batches(
    path: Path, layout: CsvLayout, names: tuple[str, ...], usecols: tuple[int, ...]
) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    """Yield (1-based line numbers, values of ``usecols``) for batches of data rows."""
    with _open_text(path) as fh:
        line_no = layout.skip_lines
        for _ in islice(fh, layout.skip_lines):
            pass
        while True:
            try:
                batch = list(islice(fh, CSV_BATCH_LINES))
            except UnicodeDecodeError:
                _fail(f"{path}: bytes after line {line_no} are not UTF-8 text; save as UTF-8")
            if not batch:
                return
            rows, numbers = [], []
            for offset, line in enumerate(batch, start=line_no + 1):
                if line.strip() and not line.lstrip().startswith("#"):
                    rows.append(line)
                    numbers.append(offset)
            line_no += len(batch)
            if rows:
                lines = np.array(numbers)
                yield lines, _parse_rows(path, rows, lines, layout, names, usecols)


def _parse_rows(
    path: Path,
    rows: list[str],
    lines: np.ndarray,
    layout: CsvLayout,
    names: tuple[str, ...],
    usecols: tuple[int, ...],
) -> np.ndarray:
    try:
        values = np.loadtxt(
            rows, delimiter=layout.delimiter, quotechar='"', comments=None, usecols=usecols,
            dtype=np.float64, ndmin=2,
        )  # fmt: skip
    except ValueError as exc:
        _explain_row_error(path, rows, lines, layout, names, usecols)
        reason = " ".join(str(exc).split())  # numpy refused a row that float() accepts
        _fail(f"{path} lines {lines[0]}-{lines[-1]}: {reason}; fix the values")
    bad = ~np.isfinite(values)
    if bad.any():
        i, k = np.argwhere(bad)[0]
        _fail(
            f"{path} line {lines[i]}, column {names[usecols[k]]!r} (index {usecols[k]}):"
            f" {values[i, k]} is not a finite number; repair or drop the row"
        )
    return values


def _explain_row_error(
    path: Path,
    rows: list[str],
    lines: np.ndarray,
    layout: CsvLayout,
    names: tuple[str, ...],
    usecols: tuple[int, ...],
) -> None:
    for row, line in zip(rows, lines, strict=True):
        fields = _split(row.strip(), layout.delimiter)
        for j in usecols:
            if j >= len(fields):
                _fail(
                    f"{path} line {line} has {len(fields)} fields, so column {names[j]!r}"
                    f" (index {j}) is missing; complete or drop the row"
                )
            if not _is_number(fields[j]):
                _fail(
                    f"{path} line {line}, column {names[j]!r} (index {j}): {fields[j][:20]!r}"
                    " is not a number; fix the value or choose another column"
                )


# --- shared helpers ----------------------------------------------------------------------


def _choose(
    path: Path, names: tuple[str, ...], wanted: str | int | None, allowed: Iterable[int], what: str
) -> tuple[int, ...]:
    allowed = tuple(allowed)
    if wanted is None:
        return allowed
    if isinstance(wanted, str) and wanted in names:
        index = names.index(wanted)
    elif isinstance(wanted, str) and not wanted.strip().lstrip("-").isdigit():
        _fail(f"{path} has no {what} named {wanted!r}; available: {', '.join(names)}")
    else:
        index = int(wanted)
        if not 0 <= index < len(names):
            _fail(
                f"{path}: {what} index {index} is out of range; it has {len(names)}"
                f" ({', '.join(f'{j}={n}' for j, n in enumerate(names))})"
            )
    if index not in allowed:
        _fail(f"{path}: {what} {names[index]!r} is the time column; choose a data column")
    return (index,)


def _time_key(name: str) -> str:
    """'Time (ms)' -> 'time_ms', 'T [s]' -> 't_s', 'seconds' -> 'seconds'."""
    key = re.sub(r"\s*[\(\[]\s*(\w+)\s*[\)\]]\s*$", r"_\1", name.strip().lower())
    return re.sub(r"[\s\-]+", "_", key)


def _split(line: str, delimiter: str | None) -> list[str]:
    return [field.strip().strip('"').strip() for field in line.split(delimiter)]


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _open_text(path: Path) -> TextIO:
    return open(path, encoding="utf-8-sig", errors="strict")


def _rechunk(pieces: Iterator[np.ndarray], block_frames: int) -> Iterator[np.ndarray]:
    """Regroup arrays of any lengths into blocks of exactly ``block_frames`` (last: rest)."""
    pending: list[np.ndarray] = []
    count = 0
    for piece in pieces:
        pending.append(piece)
        count += len(piece)
        while count >= block_frames:
            joined = pending[0] if len(pending) == 1 else np.concatenate(pending)
            yield joined[:block_frames].copy()
            pending = [joined[block_frames:]] if count > block_frames else []
            count -= block_frames
    if count:
        yield np.concatenate(pending)


def _fail(message: str) -> NoReturn:
    raise UserInputError(message)


# --- writing -----------------------------------------------------------------------------


def _refuse_protected(target: Path, protect: Iterable[str | os.PathLike[str]]) -> None:
    if target.is_dir():
        _fail(f"cannot write {target}: it is a folder; give a file name")
    if not target.parent.is_dir():
        _fail(f"cannot write {target}: folder {target.parent} does not exist; create it first")
    for item in protect:
        other = Path(item)
        same = other.resolve() == target.resolve()
        if not same and other.exists() and target.exists():
            same = os.path.samefile(other, target)
        if same:
            _fail(f"refusing to write {target}: it is the input {other}; choose another name")


def _temporary_path(final: Path) -> Path:
    """A fresh hidden name beside ``final`` that keeps its extension (for format guessing)."""
    return final.with_name(f".{final.stem}.{secrets.token_hex(4)}.partial{final.suffix}")


@contextlib.contextmanager
def atomic_path(
    final: str | os.PathLike[str], *, protect: Iterable[str | os.PathLike[str]] = ()
) -> Iterator[Path]:
    """Yield a temporary path beside ``final``; rename it to ``final`` when the block succeeds.

    If the block raises, the temporary file (if any) is removed and ``final`` is untouched.

    Parameters
    ----------
    final : path-like
        Where the output should end up. Its folder must exist.
    protect : iterable of path-like
        Inputs that must never be overwritten (compared as resolved paths).

    Yields
    ------
    Path
        Temporary path in the same folder, with the same extension as ``final``.

    Raises
    ------
    UserInputError
        If ``final`` is a protected input, a folder, or its folder does not exist.

    Examples
    --------
    >>> with atomic_path(out_png) as tmp:  # doctest: +SKIP
    ...     figure.savefig(tmp)
    """
    final = Path(final)
    _refuse_protected(final, protect)
    temporary = _temporary_path(final)
    try:
        yield temporary
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise
    os.replace(temporary, final)


class SafeWriter:
    """Write an audio file under a temporary name; it gets its final name only when complete.

    Use it as a context manager: a clean exit renames the file to ``path``, an exception
    deletes it. ``close()`` (finish) and ``discard()`` may also be called directly and are
    safe to call twice. Float WAV files carry no time stamp, so equal data gives equal bytes.

    Parameters
    ----------
    path : path-like
        Final file name; its folder must exist.
    rate_hz : float
        Sample rate in Hz, rounded to a whole number as audio files require.
    channels : int
        Channels per frame.
    format : str, optional
        libsndfile major format (``"WAV"``, ``"FLAC"``...); default from the extension.
    subtype : str, optional
        Sample format (``"FLOAT"``, ``"PCM_24"``, ``"PCM_16"``...); default ``"FLOAT"`` for
        WAV, ``"PCM_24"`` otherwise. PCM formats clip samples beyond full scale.
    protect : iterable of path-like
        Input files that must never be overwritten.

    Raises
    ------
    UserInputError
        Unknown extension, unsupported format/subtype pair, non-positive rate, a protected or
        missing target folder.
    """

    def __init__(
        self,
        path: str | os.PathLike[str],
        rate_hz: float,
        channels: int,
        *,
        format: str | None = None,
        subtype: str | None = None,
        protect: Iterable[str | os.PathLike[str]] = (),
    ) -> None:
        self.path = Path(path)
        major = (format or _FORMAT_BY_SUFFIX.get(self.path.suffix.lower(), "")).upper()
        if not major:
            _fail(f"cannot tell the audio format of {self.path}; name it .wav or .flac")
        self.subtype = (subtype or _DEFAULT_SUBTYPE.get(major, "PCM_24")).upper()
        if not sf.check_format(major, self.subtype):
            choices = ", ".join(sf.available_subtypes(major)) or "none"
            _fail(f"{self.path}: {major} cannot hold {self.subtype} samples; use one of {choices}")
        if not (np.isfinite(rate_hz) and round(rate_hz) >= 1) or int(channels) < 1:
            _fail(f"{self.path}: rate {rate_hz} Hz and {channels} channels must be at least 1")
        _refuse_protected(self.path, protect)
        self.channels = int(channels)
        self.frames = 0
        self._temporary = _temporary_path(self.path)
        self._file: sf.SoundFile | None = sf.SoundFile(
            self._temporary, "w", int(round(rate_hz)), self.channels, self.subtype,
            format=major,
        )  # fmt: skip
        _drop_peak_chunk(self._file)

    def write(self, block: np.ndarray) -> None:
        """Append frames: shape ``(frames, channels)``, or ``(frames,)`` for one channel."""
        if self._file is None:
            raise ValueError(f"{self.path}: the writer is already closed")
        block = np.asarray(block, dtype=np.float64)
        if block.ndim == 1 and self.channels == 1:
            block = block[:, None]
        if block.ndim != 2 or block.shape[1] != self.channels:
            raise ValueError(f"block shape {block.shape} does not fit {self.channels} channels")
        self._file.write(block)
        self.frames += len(block)

    def close(self) -> None:
        """Finish the file and give it its final name."""
        if self._file is not None:
            self._file.close()
            self._file = None
            os.replace(self._temporary, self.path)

    def discard(self) -> None:
        """Abandon the file: delete the temporary and leave ``path`` untouched."""
        if self._file is not None:
            self._file.close()
            self._file = None
            self._temporary.unlink(missing_ok=True)

    def __enter__(self) -> SafeWriter:
        return self

    def __exit__(self, exc_type: object, exc: object, traceback: object) -> None:
        if exc_type is None:
            self.close()
        else:
            self.discard()


def _drop_peak_chunk(file: sf.SoundFile) -> None:
    """Ask libsndfile not to add a PEAK chunk: it holds the wall-clock time of writing."""
    if file.subtype in ("FLOAT", "DOUBLE") and hasattr(sf, "_snd"):
        sf._snd.sf_command(file._file, _SFC_SET_ADD_PEAK_CHUNK, sf._ffi.NULL, sf._snd.SF_FALSE)


def write_csv(
    path: str | os.PathLike[str],
    data: np.ndarray,
    rate_hz: float,
    names: Iterable[str],
    *,
    protect: Iterable[str | os.PathLike[str]] = (),
) -> None:
    """Write a sensor capture as CSV: header ``time_s,<names>``, one row per frame.

    Times are written to the nanosecond (``%.9f``), values with 9 significant digits, which
    reproduces float32 data exactly.

    Parameters
    ----------
    path : path-like
        Output file; written under a temporary name, then renamed.
    data : numpy.ndarray
        Shape ``(frames,)`` or ``(frames, channels)``.
    rate_hz : float
        Sample rate in Hz; row ``n`` gets time ``n / rate_hz`` seconds.
    names : iterable of str
        One column name per channel (no commas, quotes or line breaks).
    protect : iterable of path-like
        Inputs that must never be overwritten.

    Raises
    ------
    UserInputError
        Non-positive rate, protected target, missing folder.
    """
    values = np.asarray(data, dtype=np.float64)
    values = values.reshape(len(values), -1)
    names = tuple(names)
    if len(names) != values.shape[1] or any(re.search(r'[,"\r\n]', n) for n in names):
        raise ValueError(f"need {values.shape[1]} plain column names, got {names}")
    if not (np.isfinite(rate_hz) and rate_hz > 0):
        _fail(f"{path}: sample rate {rate_hz} Hz must be a positive number; give it in Hz")
    formats = ["%.9f"] + ["%.9g"] * values.shape[1]
    with (
        atomic_path(path, protect=protect) as temporary,
        open(temporary, "w", encoding="utf-8", newline="\n") as fh,
    ):
        fh.write(",".join(("time_s", *names)) + "\n")
        for start in range(0, len(values), SCAN_FRAMES):
            chunk = values[start : start + SCAN_FRAMES]
            times = (start + np.arange(len(chunk))) / rate_hz
            np.savetxt(fh, np.column_stack([times, chunk]), fmt=formats, delimiter=",")


def write_npy(
    path: str | os.PathLike[str],
    data: np.ndarray,
    *,
    protect: Iterable[str | os.PathLike[str]] = (),
) -> None:
    """Write an array as a NumPy ``.npy`` file under a temporary name, then rename it.

    Parameters
    ----------
    path : path-like
        Output file.
    data : numpy.ndarray
        Shape ``(frames,)`` or ``(frames, channels)``; saved as given.
    protect : iterable of path-like
        Inputs that must never be overwritten.

    Raises
    ------
    UserInputError
        Protected target or missing folder.
    """
    with atomic_path(path, protect=protect) as temporary, open(temporary, "wb") as fh:
        np.save(fh, np.asarray(data), allow_pickle=False)
