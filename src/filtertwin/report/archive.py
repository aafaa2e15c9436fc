"""The archive's report: the table (CSV and JSON), a figure of the worst alias events over
time per candidate, and one HTML page with the verdicts.

Everything is computed in :mod:`filtertwin.archive`; this module only lays it out and writes
it (each file under a temporary name, renamed when complete).
"""

from __future__ import annotations

import csv
import json
import math
import os
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from filtertwin.archive.scan import UNFILTERED, FileResult, ScanSpec
from filtertwin.archive.summary import TABLE_COLUMNS, ArchiveSummary, table_rows, worst_events
from filtertwin.files.outputs import atomic_path
from filtertwin.report.html import ReportSection, write_html

__all__ = ["NAMES", "events_figure", "write_archive_report"]

NAMES = {
    "table": "archive-table.csv",
    "json": "archive-summary.json",
    "figure": "archive-events.png",
    "html": "archive-report.html",
}
DPI = 120
TOP_EVENTS = 10
LEGEND_FILES = 12
"""Up to this many files the figure names each file's colour."""


def write_archive_report(
    folder: Path,
    results: Sequence[FileResult],
    summary: ArchiveSummary,
    spec: ScanSpec,
    *,
    protect: Iterable[str | os.PathLike[str]] = (),
) -> dict[str, Path]:
    """Write the table, the JSON summary, the figure and the HTML page into ``folder``.

    Returns
    -------
    dict
        ``NAMES`` keys -> written paths.
    """
    protect = list(protect)
    rows = table_rows(results, spec)
    written = {"table": _write_csv(folder / NAMES["table"], rows, protect)}
    document = {
        "summary": summary.to_dict(),
        "settings": _settings(spec),
        "files": [r.to_dict() for r in results],
    }
    with atomic_path(folder / NAMES["json"], protect=protect) as tmp:
        tmp.write_text(json.dumps(document, indent=1, allow_nan=True), encoding="utf-8")
    written["json"] = folder / NAMES["json"]
    written["figure"] = events_figure(results, summary, spec, folder / NAMES["figure"], protect)
    written["html"] = write_html(
        folder / NAMES["html"],
        "Anti-alias check of a sensor archive",
        _sections(results, summary, spec, written["figure"]),
        caution=None,
        protect=protect,
    )
    return written


def _settings(spec: ScanSpec) -> dict[str, Any]:
    return {
        "candidates": [
            {"label": c.label, "design": c.design.spec.source, "filter": c.filter_name}
            for c in spec.candidates
        ],
        "adc_rate_hz": spec.adc_rate_hz,
        "band_hz": spec.band_hz,
        "bits": spec.bits,
        "required_db": spec.required_db,
        "segment_s": [spec.start_s, spec.end_s],
    }


def _write_csv(path: Path, rows: list[dict[str, Any]], protect: list[Any]) -> Path:
    with atomic_path(path, protect=protect) as tmp, open(tmp, "w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=TABLE_COLUMNS)
        writer.writeheader()
        writer.writerows(rows)
    return path


def events_figure(
    results: Sequence[FileResult],
    summary: ArchiveSummary,
    spec: ScanSpec,
    path: Path,
    protect: Iterable[str | os.PathLike[str]] = (),
) -> Path:
    """Worst alias events over time, one panel per stream (unfiltered, then each candidate).

    The time axis runs through the archive: each file starts where the one before ended (in
    the order given; thin grey lines between files), so the whole archive reads left to
    right. Each point is one event (channel, window), coloured by file (named in a legend up
    to :data:`LEGEND_FILES` files); events over the limit (the dashed line) are red crosses.
    """
    labels = spec.labels
    limit = summary.limit_dbfs
    fig = Figure(figsize=(9.0, 2.0 + 1.9 * len(labels)), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(len(labels), 1, sharex=True, squeeze=False)[:, 0]
    offsets, at = {}, 0.0
    for r in results:
        offsets[r.path] = at - r.start_s
        at += r.duration_s
    hours = at > 2 * 3600
    scale = 1 / 3600 if hours else 1.0
    readable = [r for r in results if r.error is None]
    for ax, label in zip(axes, labels, strict=True):
        over = False
        for k, r in enumerate(readable):
            ev = [e for ch in r.channels for e in ch.events[label]]
            t = np.array([offsets[r.path] + e.time_s for e in ev]) * scale
            db = np.array([e.dbfs for e in ev])
            name = Path(r.path).name if ax is axes[0] else None
            ax.plot(t, db, "o", ms=3.5, color=f"C{k % 10}", alpha=0.8, label=name)
            high = db > limit
            if label != UNFILTERED and high.any():
                ax.plot(t[high], db[high], "x", ms=6, mew=1.5, color="tab:red", zorder=3)
                over = True
        for r in readable:
            if offsets[r.path] + r.start_s > 0:
                ax.axvline((offsets[r.path] + r.start_s) * scale, color="0.6", lw=0.6, zorder=0)
        ax.axhline(limit, color="tab:red", ls="--", lw=1)
        verdict = next((v for v in summary.verdicts if v.label == label), None)
        if verdict is None:
            state = " (for comparison, not judged)"
        elif verdict.passed:
            state = " - passes: every window under the limit"
        else:
            state = " - FAILS: red crosses are windows over the limit" if over else " - FAILS"
        ax.set_title(f"{label}{state}", loc="left", fontsize=10)
        y_low, y_high = ax.get_ylim()
        ax.set_ylim(min(y_low, limit - 3.0), max(y_high, limit + 3.0))
        ax.set_ylabel("aliased, dBFS")
        ax.grid(True, axis="y", alpha=0.3)
    fig.suptitle(
        f"The worst alias windows of every channel; dashed red line: the limit, {limit:.1f} dBFS",
        x=0.01, ha="left", fontsize=10,
    )  # fmt: skip
    if 1 < len(readable) <= LEGEND_FILES:
        axes[0].legend(title="file", fontsize=7, title_fontsize=8, loc="upper left",
                       bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)  # fmt: skip
    axes[-1].set_xlabel(
        "time through the archive, files one after another (" + ("h" if hours else "s") + ")"
    )
    with atomic_path(path, protect=protect) as tmp:
        fig.savefig(tmp, dpi=DPI, format="png")
    return path


def _fmt(value: float | None, digits: int = 1) -> str:
    return "-" if value is None or not math.isfinite(value) else f"{value:.{digits}f}"


def _sections(
    results: Sequence[FileResult], summary: ArchiveSummary, spec: ScanSpec, figure: Path
) -> list[ReportSection]:
    limit = summary.limit_dbfs
    verdict_rows = [(v.label, "PASS" if v.passed else "FAIL", v.text()) for v in summary.verdicts]
    intro = [
        f"{summary.files} files, {summary.recording_s:.1f} s of recording, ADC at "
        f"{spec.adc_rate_hz:g} Hz, band of interest up to {spec.band_hz:g} Hz.",
        f"A candidate fails where, in any {_window(results)} window of any channel, the power "
        f"its filtered signal folds into the band rises above {limit:.1f} dBFS (the ideal "
        f"quantization noise of a {spec.bits}-bit ADC, 6.02 N + 1.76 dB, or the rejection "
        "given).",
    ]
    sections = [
        ReportSection(
            "Verdict per candidate", intro, [(("candidate", "verdict", "where"), verdict_rows)]
        ),  # fmt: skip
        ReportSection(
            "Worst alias events over time",
            figures=[figure],
            captions=[_caption(results)],
        ),  # fmt: skip
    ]
    for label in spec.labels:
        rows: list[tuple[str, ...]] = [
            (x.file, x.channel, _fmt(x.event.time_s, 2), _fmt(x.event.source_hz, 0),
             _fmt(x.event.alias_hz, 0), _fmt(x.event.dbfs),
             "-" if x.event.peak is None else f"{x.event.peak:.3g}")
            for x in worst_events(results, label, TOP_EVENTS)
        ]  # fmt: skip
        head: tuple[str, ...] = ("file", "channel", "time s", "from Hz", "lands at Hz", "dBFS",
                                 "peak (unit)")  # fmt: skip
        if all(row[-1] == "-" for row in rows):  # no sensor unit given: leave the column out
            head, rows = head[:-1], [row[:-1] for row in rows]
        sections.append(ReportSection(f"Worst events: {label}", tables=[(head, rows)]))
    per_file = []
    for r in results:
        if r.error is not None:
            per_file.append((r.path, "-", "unreadable", r.error))
            continue
        for ch in r.channels:
            cells = [f"{lab} {_fmt(ch.worst_dbfs[lab])} dBFS" for lab in spec.labels]
            verdicts = ", ".join(
                f"{lab}: {'PASS' if ok else 'FAIL'}" for lab, ok in ch.passed.items()
            )
            per_file.append((r.path, ch.name, verdicts, "; ".join(cells)))
    sections.append(
        ReportSection(
            "Every file and channel",
            [f"Worst short-time aliased power per stream ({UNFILTERED} first)."],
            [(("file", "channel", "verdicts", "worst"), per_file)],
        )
    )
    notes = [f"{r.path}: {r.note}" for r in results if r.note]
    if notes or summary.unreadable:
        paras = notes + [f"{f}: {reason}" for f, reason in summary.unreadable]
        sections.append(ReportSection("Notes and files that could not be read", paras))
    return sections


def _caption(results: Sequence[FileResult]) -> str:
    files = sum(r.error is None for r in results)
    colours = (
        "colours tell the files apart (legend)" if 1 < files <= LEGEND_FILES
        else "colours change from file to file" if files > 1 else ""
    )  # fmt: skip
    return (
        f"Each point is one of the {_window(results)} windows where a channel of a file folded "
        "the most into the band, at its time through the archive (the files one after another, "
        f"thin grey lines between them){'; ' + colours if colours else ''}. Dashed red: the "
        "limit; red crosses: windows over it, where a candidate fails."
    )


def _window(results: Sequence[FileResult]) -> str:
    w = next((r.window_s for r in results if r.error is None), 0.0)
    return f"{w * 1000:.0f} ms"
