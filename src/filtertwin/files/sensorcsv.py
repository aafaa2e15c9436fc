"""Sensor tables: CSV (also ``.tsv`` and ``.txt``) captures validated and read in batches.

A table has one row per sample, optionally a header row (and a row of units under it) and
``#`` comment lines; fields are separated by commas, semicolons, tabs or runs of spaces, and
numbers may use a decimal comma when fields are not separated by commas. The sample rate
comes from a time column (seconds, or ``ms``/``us`` by its name, or ISO-8601 date and time
stamps, :mod:`filtertwin.files.timestamps`) or is given.
:func:`inspect_csv` checks every row once; :func:`csv_blocks` then reads the chosen columns
in blocks, parsing :data:`CSV_BATCH_LINES` lines at a time. Users reach both through
:func:`filtertwin.files.recordings.inspect` and :func:`filtertwin.files.recordings.read_blocks`.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterator
from itertools import islice
from pathlib import Path
from typing import TextIO

import numpy as np

from filtertwin.errors import UserInputError
from filtertwin.files.recordinginfo import (
    FILE_SIGNATURES,
    CsvLayout,
    RecordingInfo,
    choose_indices,
    fail,
    head_bytes,
    is_text,
)
from filtertwin.files.timestamps import is_iso_time, parse_iso_time, seconds_since_many

__all__ = ["CSV_BATCH_LINES", "CSV_SUFFIXES", "csv_blocks", "inspect_csv"]

CSV_BATCH_LINES = 8192
"""Lines parsed at a time; also the number of intervals that set the typical time step."""
CSV_SUFFIXES = frozenset({".csv", ".tsv", ".txt"})
"""File extensions read as sensor tables."""

_TIME_SCALES_S = {
    **dict.fromkeys(("t", "time", "time_s", "t_s", "seconds", "sec", "s", "timestamp"), 1.0),
    **dict.fromkeys(("datetime", "date_time", "time_utc", "utc"), 1.0),
    **dict.fromkeys(("time_ms", "t_ms", "ms", "milliseconds"), 1e-3),
    **dict.fromkeys(("time_us", "t_us", "us", "microseconds"), 1e-6),
}


def inspect_csv(
    path: Path,
    rate_hz: float | None,
    column: str | int | None,
    time_column: str | int | None,
    jitter_limit: float,
) -> RecordingInfo:
    """Validate a sensor table completely.

    The CSV part of :func:`filtertwin.files.recordings.inspect`.

    Parameters
    ----------
    path : Path
        An existing, non-empty file.
    rate_hz : float or None
        Sample rate in Hz, checked positive by the caller; required without a time column.
    column : str or int or None
        Header name or 0-based field index of the one column to read; default every numeric
        field except the time column.
    time_column : str or int or None
        Time column (seconds; ``ms``/``us`` names are scaled); default the field whose header
        is a time name.
    jitter_limit : float
        Largest allowed deviation of a sample interval from the typical one, as a fraction.

    Returns
    -------
    RecordingInfo
        ``kind`` ``"csv"``, with the fields to read and the row layout.

    Raises
    ------
    UserInputError
        One line naming file, line and column and the fix.
    """
    _check_text(path)
    layout, names, numeric, first = _csv_head(path)
    every = range(len(names))
    if time_column is not None:
        found = list(choose_indices(path, names, time_column, every, "time column"))
    else:
        found = [j for j in every if _time_key(names[j]) in _TIME_SCALES_S][:1]
        found = found or [j for j in every if j < len(first) and is_iso_time(first[j])][:1]
    tcol = found[0] if found else None
    iso = tcol is not None and tcol < len(first) and is_iso_time(first[tcol])
    scale = _TIME_SCALES_S.get(_time_key(names[found[0]]), 1.0) if found else 1.0
    data = [j for j in every if j != tcol and (column is not None or numeric[j])]
    chosen = choose_indices(path, names, column, data, "column")
    if not chosen:
        raise UserInputError(f"{path} has no numeric data column besides the time column")
    if tcol is None and rate_hz is None:
        raise UserInputError(
            f"{path} has no time column (a header such as time, t, time_s or seconds) and no"
            " sample rate was given; give the rate with --rate HZ or add a time column"
        )
    usecols = chosen if tcol is None else (tcol, *chosen)
    frames, time_rate_hz = _scan_csv(
        path, layout, names, usecols, tcol, 1.0 if iso else scale, jitter_limit,
        first[tcol] if iso and tcol is not None else None,
    )  # fmt: skip
    rate_hz = _csv_rate(path, frames, rate_hz, time_rate_hz, jitter_limit)
    return RecordingInfo(
        path, "csv", rate_hz, len(chosen), frames, tuple(names[j] for j in chosen), None,
        chosen, layout,
    )  # fmt: skip


def csv_blocks(info: RecordingInfo, block_frames: int) -> Iterator[np.ndarray]:
    """Yield the chosen columns as float64 blocks of exactly ``block_frames`` rows (last: rest).

    Parameters
    ----------
    info : RecordingInfo
        From :func:`inspect_csv`.
    block_frames : int
        Rows per block, at least 1.

    Returns
    -------
    Iterator of numpy.ndarray
        float64 arrays of shape ``(n, info.channels)``, each new.
    """
    return _rechunk(_csv_pieces(info), block_frames)


def _check_text(path: Path) -> None:
    head = head_bytes(path)
    for magic, what, suffix in FILE_SIGNATURES:
        if head.startswith(magic):
            fail(f"{path} is really {what}, not a text table; rename it to {suffix}")
    if not is_text(head):
        fail(f"{path} is binary, not a UTF-8 text table; export the capture as CSV text")


def _csv_head(path: Path) -> tuple[CsvLayout, tuple[str, ...], list[bool], list[str]]:
    """Find delimiter, header names, which fields of the first data row are numbers, and
    that row's fields.

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
        fail(f"{path} has no data rows; export the capture again")
    delimiter = next((d for d in (",", ";", "\t") if d in content[0][1]), None)
    rows = [_split(line, delimiter) for _, line in content]
    comma = delimiter != "," and any(_DECIMAL_COMMA.match(f) for row in rows for f in row)
    numbers = [[_is_number(field, comma) for field in row] for row in rows]

    def labels_over(i: int) -> bool:
        return any(not a and b for a, b in zip(numbers[0], numbers[i], strict=False))

    header_rows = 0
    if len(rows) == 1 and not all(numbers[0]):
        fail(f"{path} has a header but no data rows; export the capture again")
    elif len(rows) > 1 and labels_over(1):
        header_rows = 1
    elif len(rows) > 2 and not any(numbers[1]) and labels_over(2):
        header_rows = 2
    data_row = rows[header_rows]
    labels = rows[0] if header_rows else [""] * len(data_row)
    names = tuple(label or f"col{j}" for j, label in enumerate(labels))
    numeric = numbers[header_rows] + [False] * (len(names) - len(data_row))
    return CsvLayout(delimiter, content[header_rows][0], comma), names, numeric, data_row


def _scan_csv(
    path: Path,
    layout: CsvLayout,
    names: tuple[str, ...],
    usecols: tuple[int, ...],
    tcol: int | None,
    scale: float,
    jitter_limit: float,
    iso_first: str | None = None,
) -> tuple[int, float | None]:
    """Count the rows and check the time stamps; return (frames, rate from time column).

    ``iso_first`` is the first ISO-8601 stamp of an ISO time column (None for seconds)."""
    frames = 0
    t_first = t_last = typical = None
    iso = None if iso_first is None or tcol is None else _IsoColumn(path, tcol, iso_first)
    for lines, values in _csv_batches(path, layout, names, usecols, iso):
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
        fail(
            f"{path} line {lines[at]}: time ({name!r}) does not increase; sort the rows"
            " or remove repeated lines"
        )
    if typical is None:
        typical = float(np.median(steps))
    off = np.abs(steps - typical) / typical
    if np.any(off > limit):
        at = int(np.argmax(off > limit))
        fail(
            f"{path} line {lines[at]}: sample interval {steps[at]:.6g} s is {off[at]:.1%} off"
            f" the typical {typical:.6g} s (limit {limit:.1%}); resample the capture evenly"
            " or raise the limit (--max-jitter PCT of alias and render)"
        )
    return typical


def _csv_rate(
    path: Path, frames: int, given: float | None, from_time: float | None, limit: float
) -> float:
    if frames == 0:
        fail(f"{path} has a header but no data rows; export the capture again")
    if from_time is None:
        if given is None:
            fail(f"{path}: one row gives no sample interval; give the rate with --rate HZ")
        return float(given)
    if given is not None and abs(given - from_time) > limit * from_time:
        fail(
            f"{path}: the given rate {given:g} Hz disagrees with the time column"
            f" ({from_time:.6g} Hz); drop the rate or fix the time stamps"
        )
    return float(given if given is not None else from_time)


def _csv_pieces(info: RecordingInfo) -> Iterator[np.ndarray]:
    assert info.layout is not None
    names = tuple(f"col{j}" for j in range(max(info.source_channels) + 1))
    for _, values in _csv_batches(info.path, info.layout, names, info.source_channels):
        yield values


class _IsoColumn:
    """ISO-8601 stamps of field ``index`` to seconds since the first stamp ``first``."""

    def __init__(self, path: Path, index: int, first: str) -> None:
        self.path, self.index, self.first = path, index, first
        self.ref = parse_iso_time(first)

    def one(self, text: str) -> float:
        try:
            return parse_iso_time(text).since(self.ref)
        except ValueError:
            fail(f"{self.path}: time stamp {text[:40]!r} is not ISO-8601 like {self.first!r}; "
                 "fix the row")  # fmt: skip

    def many(self, rows: list[str], delimiter: str | None) -> np.ndarray | None:
        """The stamps of ``rows`` read as arrays (:func:`seconds_since_many`), or None when
        they are not all written alike (then each is read by itself, and a bad one named)."""
        try:
            stamps = [row.split(delimiter, self.index + 1)[self.index] for row in rows]
            return seconds_since_many(stamps, self.ref)
        except (IndexError, ValueError):
            return None


def _csv_batches(
    path: Path,
    layout: CsvLayout,
    names: tuple[str, ...],
    usecols: tuple[int, ...],
    convert: _IsoColumn | None = None,
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
                fail(f"{path}: bytes after line {line_no} are not UTF-8 text; save as UTF-8")
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
                yield lines, _parse_rows(path, rows, lines, layout, names, usecols, convert)


def _parse_rows(
    path: Path,
    rows: list[str],
    lines: np.ndarray,
    layout: CsvLayout,
    names: tuple[str, ...],
    usecols: tuple[int, ...],
    convert: _IsoColumn | None = None,
) -> np.ndarray:
    if layout.decimal_comma:
        rows = [row.replace(",", ".") for row in rows]
    values = None if convert is None else _parse_with_stamps(rows, layout, usecols, convert)
    if values is None:
        converters: dict[int | str, Callable[[str], float]] | None = None
        if convert is not None:
            converters = {convert.index: convert.one}
        try:
            values = np.loadtxt(
                rows, delimiter=layout.delimiter, quotechar='"', comments=None, usecols=usecols,
                dtype=np.float64, ndmin=2, converters=converters,
            )  # fmt: skip
        except ValueError as exc:
            _explain_row_error(path, rows, lines, layout, names, usecols, convert)
            reason = " ".join(str(exc).split())  # numpy refused a row that float() accepts
            fail(f"{path} lines {lines[0]}-{lines[-1]}: {reason}; fix the values")
    bad = ~np.isfinite(values)
    if bad.any():
        i, k = np.argwhere(bad)[0]
        fail(
            f"{path} line {lines[i]}, column {names[usecols[k]]!r} (index {usecols[k]}):"
            f" {values[i, k]} is not a finite number; repair or drop the row"
        )
    return values


def _parse_with_stamps(
    rows: list[str], layout: CsvLayout, usecols: tuple[int, ...], stamps: _IsoColumn
) -> np.ndarray | None:
    """The columns of ``rows`` with the stamps read as arrays, numbers by numpy's parser
    (no Python call per row); None when either refuses (the caller then reads row by row and
    names the bad one)."""
    seconds = stamps.many(rows, layout.delimiter)
    if seconds is None:
        return None
    rest = tuple(j for j in usecols if j != stamps.index)
    try:
        data = np.loadtxt(
            rows, delimiter=layout.delimiter, quotechar='"', comments=None, usecols=rest,
            dtype=np.float64, ndmin=2,
        )  # fmt: skip
    except ValueError:
        return None
    values = np.empty((len(rows), len(usecols)))
    for k, j in enumerate(usecols):
        values[:, k] = seconds if j == stamps.index else data[:, rest.index(j)]
    return values


def _explain_row_error(
    path: Path,
    rows: list[str],
    lines: np.ndarray,
    layout: CsvLayout,
    names: tuple[str, ...],
    usecols: tuple[int, ...],
    stamps: _IsoColumn | None = None,
) -> None:
    for row, line in zip(rows, lines, strict=True):
        fields = _split(row.strip(), layout.delimiter)
        for j in usecols:
            if j >= len(fields):
                fail(
                    f"{path} line {line} has {len(fields)} fields, so column {names[j]!r}"
                    f" (index {j}) is missing; complete or drop the row"
                )
            if stamps is not None and j == stamps.index:
                if not is_iso_time(fields[j]):
                    fail(
                        f"{path} line {line}, column {names[j]!r}: time stamp {fields[j][:40]!r}"
                        f" is not a valid ISO-8601 date and time like {stamps.first!r}; fix the row"
                    )
            elif not _is_number(fields[j], layout.decimal_comma):
                fail(
                    f"{path} line {line}, column {names[j]!r} (index {j}): {fields[j][:20]!r}"
                    " is not a number; fix the value or choose another column"
                )


def _time_key(name: str) -> str:
    """'Time (ms)' -> 'time_ms', 'T [s]' -> 't_s', 'seconds' -> 'seconds'."""
    key = re.sub(r"\s*[\(\[]\s*(\w+)\s*[\)\]]\s*$", r"_\1", name.strip().lower())
    return re.sub(r"[\s\-]+", "_", key)


def _split(line: str, delimiter: str | None) -> list[str]:
    return [field.strip().strip('"').strip() for field in line.split(delimiter)]


_DECIMAL_COMMA = re.compile(r"^[-+]?\d*,\d+(?:[eE][-+]?\d+)?$")
"""A number written with a decimal comma: ``0,25``, ``,5``, ``-1,5e-3``."""


def _is_number(text: str, decimal_comma: bool = False) -> bool:
    try:
        float(text.replace(",", ".") if decimal_comma else text)
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
