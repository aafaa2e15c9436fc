"""One verdict per candidate across the archive, the table rows and the worst events.

A candidate passes on a file when, on every channel and in every short window, the power its
filtered signal would fold into the band stays at or below the ADC's ideal quantization noise
(-(6.02 N + 1.76) dBFS, Bennett 1948 / Kester 2005), or below -X dBFS for a rejection X given.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from filtertwin.archive.scan import UNFILTERED, AliasEvent, FileResult, ScanSpec

__all__ = [
    "TABLE_COLUMNS",
    "ArchiveSummary",
    "CandidateVerdict",
    "summarize",
    "table_rows",
    "worst_events",
]

TABLE_COLUMNS = (
    "file", "channel", "stream", "pass", "worst_dbfs", "worst_peak", "unit", "worst_time_s",
    "worst_source_hz", "worst_alias_hz", "events_over_limit", "check_verdict", "check_margin_db",
    "check_aliased_db", "start_s", "duration_s", "error",
)  # fmt: skip


@dataclass(frozen=True)
class Located:
    """An event and where it happened."""

    file: str
    channel: str
    event: AliasEvent


@dataclass(frozen=True)
class CandidateVerdict:
    """Where a candidate fails, if anywhere.

    Attributes
    ----------
    label : str
    passed : bool
        Passes on every file that could be read.
    files_failed : tuple of str
    worst : Located or None
        The strongest filtered alias event of the archive.
    failures : tuple of Located
        The worst event of every failing (file, channel), strongest first.
    """

    label: str
    passed: bool
    files_checked: int
    files_failed: tuple[str, ...]
    worst: Located | None
    failures: tuple[Located, ...]
    limit_dbfs: float

    def text(self) -> str:
        """The verdict in one line."""
        if self.passed:
            worst = "" if self.worst is None else f"; worst {_where(self.worst)}"
            return (
                f"passes on every file ({self.files_checked}): no alias above "
                f"{self.limit_dbfs:.1f} dBFS{worst}"
            )
        return (
            f"FAILS on {len(self.files_failed)} of {self.files_checked} files; worst "
            f"{_where(self.failures[0])}"
        )

    def to_dict(self) -> dict[str, Any]:
        return {
            "candidate": self.label,
            "pass": self.passed,
            "verdict": self.text(),
            "files_checked": self.files_checked,
            "files_failed": list(self.files_failed),
            "limit_dbfs": self.limit_dbfs,
            "failures": [_located(x) for x in self.failures],
        }


@dataclass(frozen=True)
class ArchiveSummary:
    """The verdicts, the files that could not be read, and the numbers behind them."""

    verdicts: tuple[CandidateVerdict, ...]
    unreadable: tuple[tuple[str, str], ...]
    files: int
    recording_s: float
    limit_dbfs: float

    @property
    def exit_status(self) -> int:
        """0 when every file was read (whatever the verdicts), 1 otherwise."""
        return 1 if self.unreadable else 0

    def to_dict(self) -> dict[str, Any]:
        return {
            "files": self.files,
            "recording_s": self.recording_s,
            "limit_dbfs": self.limit_dbfs,
            "candidates": [v.to_dict() for v in self.verdicts],
            "unreadable": [{"file": f, "reason": r} for f, r in self.unreadable],
        }


def _where(x: Located) -> str:
    e = x.event
    return (
        f"{e.dbfs:.1f} dBFS in {x.file} {x.channel} at {e.time_s:.2f} s, "
        f"{e.source_hz:.0f} Hz landing at {e.alias_hz:.0f} Hz"
    )


def _located(x: Located) -> dict[str, Any]:
    return {"file": x.file, "channel": x.channel, **x.event.to_dict()}


def worst_events(results: Sequence[FileResult], label: str, count: int) -> list[Located]:
    """The ``count`` strongest events of stream ``label`` across the archive."""
    found = [
        Located(r.path, ch.name, e)
        for r in results
        for ch in r.channels
        for e in ch.events.get(label, ())
    ]
    found.sort(key=lambda x: (-x.event.dbfs, x.file, x.channel, x.event.time_s))
    return found[:count]


def summarize(results: Sequence[FileResult], spec: ScanSpec) -> ArchiveSummary:
    """Verdicts per candidate; files that failed to read with their reasons."""
    read = [r for r in results if r.error is None]
    limit = -spec.required_db
    verdicts = []
    for cand in spec.candidates:
        label = cand.label
        failures = [
            Located(r.path, ch.name, ch.events[label][0])
            for r in read
            for ch in r.channels
            if not ch.passed[label] and ch.events[label]
        ]
        failures.sort(key=lambda x: (-x.event.dbfs, x.file, x.channel))
        failed_files = tuple(dict.fromkeys(x.file for x in failures))
        worst = worst_events(read, label, 1)
        verdicts.append(
            CandidateVerdict(
                label,
                not failures,
                len(read),
                failed_files,
                worst[0] if worst else None,
                tuple(failures),
                limit,
            )  # fmt: skip
        )
    unreadable = tuple((r.path, r.error) for r in results if r.error is not None)
    seconds = sum(r.duration_s for r in read)
    return ArchiveSummary(tuple(verdicts), unreadable, len(results), seconds, limit)


def table_rows(results: Sequence[FileResult], spec: ScanSpec) -> list[dict[str, Any]]:
    """One row per file, channel and stream (the unfiltered capture and every candidate);
    one row with the reason for a file that could not be read."""
    limit = -spec.required_db
    rows: list[dict[str, Any]] = []
    for r in results:
        if r.error is not None:
            rows.append(dict.fromkeys(TABLE_COLUMNS, "") | {"file": r.path, "error": r.error})
            continue
        unit = r.calibration.unit if r.calibration and r.calibration.to_unit else ""
        for ch in r.channels:
            for label in spec.labels:
                events = ch.events[label]
                top = events[0] if events else None
                check = ch.checks.get(label, {})
                rows.append({
                    "file": r.path,
                    "channel": ch.name,
                    "stream": label,
                    "pass": "" if label == UNFILTERED else ch.passed[label],
                    "worst_dbfs": _round(ch.worst_dbfs[label]),
                    "worst_peak": "" if top is None or top.peak is None else f"{top.peak:.4g}",
                    "unit": unit,
                    "worst_time_s": "" if top is None else _round(top.time_s, 3),
                    "worst_source_hz": "" if top is None else _round(top.source_hz, 1),
                    "worst_alias_hz": "" if top is None else _round(top.alias_hz, 1),
                    "events_over_limit": sum(e.dbfs > limit for e in events),
                    "check_verdict": check.get("verdict", check.get("error", "")),
                    "check_margin_db": _round(check.get("margin_db")),
                    "check_aliased_db": _round(check.get("aliased_db", {}).get("with_filter")),
                    "start_s": _round(r.start_s, 3),
                    "duration_s": _round(r.duration_s, 3),
                    "error": "",
                })  # fmt: skip
    return rows


def _round(value: Any, digits: int = 2) -> Any:
    if isinstance(value, float) and math.isfinite(value):
        return round(value, digits)
    return "" if value is None else value
