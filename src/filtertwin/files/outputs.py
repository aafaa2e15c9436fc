"""Outputs written safely: never over an input, never left half-written.

:class:`SafeWriter` (audio in blocks), :func:`write_csv`, :func:`write_npy` and
:func:`atomic_path` (any other file) write to a temporary name in the target folder and rename
it to the final name only when the write completed; a failed write leaves the target as it
was. Every writer refuses a target that is one of the inputs it is given to protect.
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import secrets
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import Any, Self

import numpy as np
import soundfile as sf

from filtertwin.errors import UserInputError

__all__ = [
    "OutputRun",
    "SafeWriter",
    "atomic_path",
    "cannot_write",
    "prepare_folder",
    "remove_empty",
    "write_csv",
    "write_npy",
]

_CSV_WRITE_ROWS = 65536
"""Rows formatted at a time by :func:`write_csv`."""

_FORMAT_BY_SUFFIX = {".wav": "WAV", ".flac": "FLAC", ".aif": "AIFF", ".aiff": "AIFF"}
_DEFAULT_SUBTYPE = {"WAV": "FLOAT", "FLAC": "PCM_24", "AIFF": "PCM_24"}
_SFC_SET_ADD_PEAK_CHUNK = 0x1050  # libsndfile sndfile.h; the PEAK chunk holds a wall-clock time


_WHY = {
    errno.EACCES: "permission denied",
    errno.EPERM: "permission denied",
    errno.EROFS: "the file system is read-only",
    errno.ENOSPC: "no space left on the device",
    errno.EDQUOT: "disk quota exceeded",
    errno.ENOTDIR: "part of the path is a file, not a folder",
    errno.ENOENT: "a folder cannot be created there",
    errno.EEXIST: "a file is in the way",
}


def cannot_write(
    path: str | os.PathLike[str], exc: BaseException, option: str = ""
) -> UserInputError:
    """The one line for an output that cannot be written: what, where, why, and one fix."""
    code = getattr(exc, "errno", None)
    why = _WHY.get(code) if isinstance(code, int) else None
    if why is None:
        why = str(getattr(exc, "strerror", None) or exc).strip().splitlines()[0]
    if code in (errno.ENOSPC, errno.EDQUOT):
        fix = "free some space or choose a folder on another disk"
    elif code in (errno.ENOTDIR, errno.ENOENT, errno.EEXIST):
        fix = "give a path whose folders exist or can be created"
    else:
        fix = "choose a folder you can write to, e.g. one under your home folder"
    where = f"{option} " if option else ""
    return UserInputError(f"cannot write {where}{path}: {why}; {fix}")


def prepare_folder(path: str | os.PathLike[str], option: str = "--out") -> list[Path]:
    """Create an output folder (and missing parents) and check that files can be written in it.

    Parameters
    ----------
    path : path-like
        The folder.
    option : str
        How the user gave it, for the message (``"--out"``).

    Returns
    -------
    list of Path
        The folders this call created, deepest first (for :func:`remove_empty`).

    Raises
    ------
    UserInputError
        A file is in the way, or the folder cannot be created or written; nothing is left.
    """
    folder = Path(path)
    missing = []
    probe = folder
    while not probe.exists() and probe != probe.parent:
        missing.append(probe)
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        if probe == folder:
            raise UserInputError(f"{option} {folder}: is a file, not a folder; give a folder name")
        raise UserInputError(
            f"cannot write {option} {folder}: {probe} is a file, not a folder; give a path "
            "through folders"
        )
    try:
        folder.mkdir(parents=True, exist_ok=True)
        with tempfile.TemporaryFile(dir=folder):
            pass
    except OSError as exc:
        remove_empty(missing)
        raise cannot_write(folder, exc, option) from None
    return missing


def remove_empty(folders: Iterable[Path]) -> None:
    """Remove each of ``folders`` (give them deepest first) that exists and is empty."""
    for folder in folders:
        with contextlib.suppress(OSError):
            if folder.is_dir() and not any(folder.iterdir()):
                folder.rmdir()


class OutputRun:
    """The outputs of one command run: a folder created if missing, and the files written.

    Leaving the ``with`` block by an exception (Ctrl-C included) removes every file noted with
    :meth:`add` and the folders this run created, so a failed run leaves nothing behind.

    Examples
    --------
    >>> with OutputRun("plots") as run:  # doctest: +SKIP
    ...     run.add(draw(run.folder / "a.png"))
    """

    def __init__(self, folder: str | os.PathLike[str], option: str = "--out") -> None:
        self.folder = Path(folder)
        self.option = option
        self.files: list[Path] = []
        self.made: list[Path] = []

    def __enter__(self) -> Self:
        self.made = prepare_folder(self.folder, self.option)
        return self

    def add(self, path: str | os.PathLike[str]) -> Path:
        """Note a file this run has written (never before: a refused target may be an
        input); returns it as a Path."""
        self.files.append(Path(path))
        return Path(path)

    def __exit__(self, exc_type: object, exc: object, traceback: object) -> None:
        if exc_type is not None:
            for path in self.files:
                with contextlib.suppress(OSError):
                    path.unlink(missing_ok=True)
            remove_empty(self.made)


def _refuse_protected(target: Path, protect: Iterable[str | os.PathLike[str]]) -> None:
    if target.is_dir():
        raise UserInputError(f"cannot write {target}: it is a folder; give a file name")
    if not target.parent.is_dir():
        raise UserInputError(
            f"cannot write {target}: folder {target.parent} does not exist; create it first"
        )
    for item in protect:
        other = Path(item)
        same = other.resolve() == target.resolve()
        if not same and other.exists() and target.exists():
            same = os.path.samefile(other, target)
        if same:
            raise UserInputError(
                f"refusing to write {target}: it is the input {other}; choose another name"
            )


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
        os.replace(temporary, final)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            temporary.unlink(missing_ok=True)
        if isinstance(exc, OSError) and exc.filename in (str(temporary), str(final)):
            raise cannot_write(final, exc) from None
        raise


class _TemporaryFileWriter:
    """What every streaming writer here shares: an open handle on a temporary file beside
    ``path``; :meth:`close` finishes it and gives it its name, :meth:`discard` (or an
    exception in a ``with`` block) removes it. Both are safe to call twice."""

    path: Path
    _temporary: Path
    _handle: Any

    def close(self) -> None:
        """Finish the file and give it its final name."""
        if self._handle is not None:
            self._handle.close()
            self._handle = None
            os.replace(self._temporary, self.path)

    def discard(self) -> None:
        """Abandon the file: delete the temporary and leave ``path`` untouched."""
        if self._handle is not None:
            self._handle.close()
            self._handle = None
            self._temporary.unlink(missing_ok=True)

    def __enter__(self) -> Self:
        return self

    def __exit__(self, exc_type: object, exc: object, traceback: object) -> None:
        if exc_type is None:
            self.close()
        else:
            self.discard()


class SafeWriter(_TemporaryFileWriter):
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
            raise UserInputError(
                f"cannot tell the audio format of {self.path}; name it .wav or .flac"
            )
        self.subtype = (subtype or _DEFAULT_SUBTYPE.get(major, "PCM_24")).upper()
        if not sf.check_format(major, self.subtype):
            choices = ", ".join(sf.available_subtypes(major)) or "none"
            raise UserInputError(
                f"{self.path}: {major} cannot hold {self.subtype} samples; use one of {choices}"
            )
        if not (np.isfinite(rate_hz) and round(rate_hz) >= 1) or int(channels) < 1:
            raise UserInputError(
                f"{self.path}: rate {rate_hz} Hz and {channels} channels must be at least 1"
            )
        _refuse_protected(self.path, protect)
        self.channels = int(channels)
        self.frames = 0
        self._float32_as_is = self.subtype == "FLOAT"
        self._temporary = _temporary_path(self.path)
        try:
            self._handle = sf.SoundFile(
                self._temporary, "w", int(round(rate_hz)), self.channels, self.subtype,
                format=major,
            )  # fmt: skip
        except (OSError, RuntimeError) as exc:  # libsndfile's error is a RuntimeError
            self._temporary.unlink(missing_ok=True)
            raise cannot_write(self.path, _as_os_error(exc, self._temporary)) from None
        _drop_peak_chunk(self._handle)

    def write(self, block: np.ndarray) -> None:
        """Append frames: shape ``(frames, channels)``, or ``(frames,)`` for one channel.

        float32 blocks go into FLOAT files as they are; anything else is converted to float64
        first. Both give the same file: libsndfile stores either as the nearest float32.
        """
        if self._handle is None:
            raise ValueError(f"{self.path}: the writer is already closed")
        block = np.asarray(block)
        if block.dtype != np.float32 or not self._float32_as_is:
            block = block.astype(np.float64, copy=False)
        if block.ndim == 1 and self.channels == 1:
            block = block[:, None]
        if block.ndim != 2 or block.shape[1] != self.channels:
            raise ValueError(f"block shape {block.shape} does not fit {self.channels} channels")
        self._handle.write(block)
        self.frames += len(block)


def _as_os_error(exc: BaseException, temporary: Path) -> BaseException:
    """libsndfile says only "System error" for a file it cannot open: find out why."""
    if isinstance(exc, OSError):
        return exc
    try:
        with open(temporary, "wb"):
            pass
    except OSError as why:
        return why
    finally:
        with contextlib.suppress(OSError):
            temporary.unlink(missing_ok=True)
    return exc


def _drop_peak_chunk(file: sf.SoundFile) -> None:
    """Ask libsndfile not to add a PEAK chunk: it holds the wall-clock time of writing."""
    if file.subtype in ("FLOAT", "DOUBLE") and hasattr(sf, "_snd"):
        sf._snd.sf_command(file._file, _SFC_SET_ADD_PEAK_CHUNK, sf._ffi.NULL, sf._snd.SF_FALSE)


class CsvWriter(_TemporaryFileWriter):
    """A sensor capture written as CSV block by block: header ``time_s,<names>``, a row a frame.

    Times are written to the nanosecond (``%.9f``), values with 9 significant digits, which
    reproduces float32 data exactly. Like :class:`SafeWriter`, the file is written under a
    temporary name and renamed by :meth:`close` (or on leaving a ``with`` block cleanly);
    :meth:`discard` (or an exception in the block) removes it.

    Parameters
    ----------
    path : path-like
        Output file.
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

    def __init__(
        self,
        path: str | os.PathLike[str],
        rate_hz: float,
        names: Iterable[str],
        *,
        protect: Iterable[str | os.PathLike[str]] = (),
    ) -> None:
        self.names = tuple(names)
        if any(re.search(r'[,"\r\n]', n) for n in self.names):
            raise ValueError(f"need plain column names, got {self.names}")
        if not (np.isfinite(rate_hz) and rate_hz > 0):
            raise UserInputError(
                f"{path}: sample rate {rate_hz} Hz must be a positive number; give it in Hz"
            )
        self.path = Path(path)
        self.rate_hz = rate_hz
        self.frames = 0
        self._formats = ["%.9f"] + ["%.9g"] * len(self.names)
        _refuse_protected(self.path, protect)
        self._temporary = _temporary_path(self.path)
        try:
            self._handle = open(self._temporary, "w", encoding="utf-8", newline="\n")  # noqa: SIM115
        except OSError as exc:
            raise cannot_write(self.path, exc) from None
        self._handle.write(",".join(("time_s", *self.names)) + "\n")

    def write(self, block: np.ndarray) -> None:
        """Append ``(frames,)`` or ``(frames, channels)`` samples."""
        values = np.asarray(block, dtype=np.float64).reshape(len(block), -1)
        if values.shape[1] != len(self.names):
            raise ValueError(f"need {len(self.names)} columns, got {values.shape[1]}")
        for start in range(0, len(values), _CSV_WRITE_ROWS):
            chunk = values[start : start + _CSV_WRITE_ROWS]
            times = (self.frames + np.arange(len(chunk))) / self.rate_hz
            np.savetxt(
                self._handle, np.column_stack([times, chunk]), fmt=self._formats, delimiter=","
            )
            self.frames += len(chunk)


def write_csv(
    path: str | os.PathLike[str],
    data: np.ndarray,
    rate_hz: float,
    names: Iterable[str],
    *,
    protect: Iterable[str | os.PathLike[str]] = (),
) -> None:
    """Write a whole sensor capture as CSV (see :class:`CsvWriter` for the layout).

    Raises
    ------
    UserInputError
        Non-positive rate, protected target, missing folder.
    """
    values = np.asarray(data, dtype=np.float64)
    values = values.reshape(len(values), -1)
    names = tuple(names)
    if len(names) != values.shape[1]:
        raise ValueError(f"need {values.shape[1]} plain column names, got {names}")
    with CsvWriter(path, rate_hz, names, protect=protect) as writer:
        writer.write(values)


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
