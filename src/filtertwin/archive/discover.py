"""Which recordings an archive run reads: files, folders (searched recursively) and glob
patterns, in a stable order."""

from __future__ import annotations

import glob
from collections.abc import Iterable
from pathlib import Path

from filtertwin.errors import UserInputError
from filtertwin.files.sensorcsv import CSV_SUFFIXES

__all__ = ["RECORDING_SUFFIXES", "find_recordings", "is_pattern"]

RECORDING_SUFFIXES = frozenset({".wav", ".flac", ".ogg", ".aiff", ".aif", ".npy"} | CSV_SUFFIXES)
"""File extensions picked up when a folder is given (a file named directly is always read)."""


def is_pattern(text: str) -> bool:
    """True when ``text`` holds glob wildcards (``*``, ``?``, ``[``)."""
    return any(ch in text for ch in "*?[")


def find_recordings(inputs: Iterable[str]) -> list[Path]:
    """Expand files, folders and glob patterns into the recordings to read.

    A file is taken as given; a folder contributes every file below it (recursively) whose
    extension is in :data:`RECORDING_SUFFIXES`, sorted by path; a pattern (``**`` reaches
    into sub-folders) contributes its matching files, sorted. A file reached twice is read
    once, at its first place.

    Parameters
    ----------
    inputs : iterable of str
        What the user typed.

    Returns
    -------
    list of Path

    Raises
    ------
    UserInputError
        An input that is no file, folder or matching pattern; nothing to read at all.
    """
    found: list[Path] = []
    for text in inputs:
        path = Path(text)
        if path.is_file():
            found.append(path)
        elif path.is_dir():
            below = sorted(p for p in path.rglob("*") if p.is_file() and _is_recording(p))
            if not below:
                raise UserInputError(
                    f"{text}: the folder holds no recordings ({_suffixes()}); check the folder"
                )
            found += below
        elif is_pattern(text):
            matched = sorted(Path(p) for p in glob.glob(text, recursive=True) if Path(p).is_file())
            if not matched:
                raise UserInputError(f"{text}: no file matches the pattern; check it (quote it)")
            found += matched
        else:
            raise UserInputError(f"{text}: no such file or folder; check the path")
    seen: set[Path] = set()
    unique = []
    for path in found:
        key = path.resolve()
        if key not in seen:
            seen.add(key)
            unique.append(path)
    return unique


def _is_recording(path: Path) -> bool:
    return path.suffix.lower() in RECORDING_SUFFIXES and not path.name.startswith(".")


def _suffixes() -> str:
    return " ".join(sorted(RECORDING_SUFFIXES))
