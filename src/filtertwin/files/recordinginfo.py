"""What a validated recording is, and the checks that every reader of recordings shares.

:class:`RecordingInfo` (with :class:`CsvLayout` for sensor tables) is what
:func:`filtertwin.files.recordings.inspect` returns and
:func:`filtertwin.files.recordings.read_blocks`
reads from. The helpers below tell a file's real kind from its first bytes and pick the
channels or columns a user asked for; the audio, NPY (:mod:`filtertwin.files.recordings`) and CSV
(:mod:`filtertwin.files.sensorcsv`) readers all use them.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import NoReturn

from filtertwin.errors import UserInputError

__all__ = [
    "FILE_SIGNATURES",
    "CsvLayout",
    "RecordingInfo",
    "choose_indices",
    "fail",
    "head_bytes",
    "is_text",
]

FILE_SIGNATURES = (
    (b"RIFF", "a WAV audio file", ".wav"),
    (b"RF64", "a WAV audio file", ".wav"),
    (b"fLaC", "a FLAC audio file", ".flac"),
    (b"OggS", "an Ogg audio file", ".ogg"),
    (b"FORM", "an AIFF audio file", ".aiff"),
    (b"\x93NUMPY", "a NumPy array file", ".npy"),
    (b"PK\x03\x04", "a zip archive (e.g. .npz)", ".zip"),
)
"""(first bytes, what the file is, its usual extension) of the binary files users mix up."""


@dataclass(frozen=True)
class CsvLayout:
    """How the rows of a CSV file are laid out.

    Attributes
    ----------
    delimiter : str or None
        Field separator; ``None`` means runs of whitespace.
    skip_lines : int
        Lines before the first data row (comments, blank lines, the header row).
    decimal_comma : bool
        Numbers are written with a decimal comma (``0,25``; fields then split by ``;``,
        tabs or spaces).
    """

    delimiter: str | None
    skip_lines: int
    decimal_comma: bool = False


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
        Channels that :func:`filtertwin.files.recordings.read_blocks` yields.
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


def head_bytes(path: Path) -> bytes:
    """Return the first 4096 bytes of a file (fewer if it is shorter).

    Parameters
    ----------
    path : Path
        The file.

    Returns
    -------
    bytes
        Its head, to compare with :data:`FILE_SIGNATURES` or test with :func:`is_text`.
    """
    with open(path, "rb") as fh:
        return fh.read(4096)


def is_text(head: bytes) -> bool:
    """Tell whether a file head is UTF-8 text (a character cut at its end is fine).

    Parameters
    ----------
    head : bytes
        The first bytes of a file, from :func:`head_bytes`.

    Returns
    -------
    bool
        ``False`` for NUL bytes or bytes that are not UTF-8.
    """
    if b"\x00" in head:
        return False
    try:
        head.decode("utf-8")
    except UnicodeDecodeError as exc:  # a character cut at the end of the sample is fine
        return exc.start >= len(head) - 3 and exc.reason == "unexpected end of data"
    return True


def choose_indices(
    path: Path, names: tuple[str, ...], wanted: str | int | None, allowed: Iterable[int], what: str
) -> tuple[int, ...]:
    """Resolve the channel or column a user asked for, by name or 0-based index.

    Parameters
    ----------
    path : Path
        The recording, for the message.
    names : tuple of str
        Names of every channel or column in the file.
    wanted : str or int or None
        The user's choice; ``None`` means every allowed one.
    allowed : iterable of int
        Indices that may be chosen (every one but a time column).
    what : str
        What is chosen, for the message: ``"channel"``, ``"column"``, ``"time column"``.

    Returns
    -------
    tuple of int
        ``allowed`` when ``wanted`` is ``None``, else the one index chosen.

    Raises
    ------
    UserInputError
        Unknown name, index out of range, or an index that is not allowed.
    """
    allowed = tuple(allowed)
    if wanted is None:
        return allowed
    if isinstance(wanted, str) and wanted in names:
        index = names.index(wanted)
    elif isinstance(wanted, str) and not wanted.strip().lstrip("-").isdigit():
        fail(f"{path} has no {what} named {wanted!r}; available: {', '.join(names)}")
    else:
        index = int(wanted)
        if not 0 <= index < len(names):
            fail(
                f"{path}: {what} index {index} is out of range; it has {len(names)}"
                f" ({', '.join(f'{j}={n}' for j, n in enumerate(names))})"
            )
    if index not in allowed:
        fail(f"{path}: {what} {names[index]!r} is the time column; choose a data column")
    return (index,)


def fail(message: str) -> NoReturn:
    """Raise :class:`~filtertwin.errors.UserInputError` with ``message`` (one line)."""
    raise UserInputError(message)
