"""`filtertwin alias` over a sensor archive: several files, folders or patterns, every
channel, any length, several candidate filters, serially, on Dask's local scheduler or on a
cluster.

``alias`` hands over to :func:`run` when it is given more than one recording, a folder or a
pattern, a recording with several channels or longer than the single check reads at once, a
segment, another candidate, a worker count or a cluster. Computation lives in
:mod:`filtertwin.archive`, the written report in :mod:`filtertwin.report.archive`.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path
from typing import Any, TextIO

from filtertwin.commands.options import hz, positive
from filtertwin.commands.progress import ProgressLine
from filtertwin.errors import UserInputError

__all__ = ["add_options", "render_each", "run", "wants_archive"]


def add_options(p: Any) -> None:
    """The archive options of ``alias``."""
    g = p.add_argument_group("archives (several files, folders, patterns, every channel)")
    g.add_argument(
        "--candidate", action="append", default=[], metavar="DESIGN",
        help="another design whose anti-alias filter is compared (repeat for more)",
    )  # fmt: skip
    g.add_argument(
        "--segment", type=_segment, metavar="START:END",
        help="read only this time range of every file, in seconds (e.g. 10:70, 30:, :5)",
    )  # fmt: skip
    g.add_argument(
        "--workers", type=positive(int, "--workers"), metavar="N",
        help="files checked side by side on this machine (default: one per CPU)",
    )  # fmt: skip
    g.add_argument(
        "--cluster", metavar="ADDRESS",
        help="run the files on a Dask cluster, e.g. tcp://127.0.0.1:8786 (needs "
        "filtertwin[cluster]; the workers must see the files at the same paths)",
    )  # fmt: skip
    g.add_argument(
        "--recorded-as", choices=("fraction", "counts", "volts", "sensor"),
        help="what the numbers in the files are: fractions of full scale, raw ADC counts, "
        "volts, or the sensor's unit (default: raw counts when the data are whole numbers "
        "far above 1, else fractions)",
    )  # fmt: skip
    g.add_argument(
        "--sensitivity", metavar="V/UNIT",
        help="the sensor's sensitivity, e.g. '100 mV/g' or '10 V/(m/s)': levels in its unit",
    )  # fmt: skip
    g.add_argument(
        "--full-scale", type=_volts, metavar="VOLTS",
        help="the ADC's full-scale input (peak), e.g. '2.4 V' (default: the design's)",
    )  # fmt: skip
    g.add_argument(
        "--events", type=positive(int, "--events"), default=5, metavar="N",
        help="worst events kept per file, channel and filter (default 5)",
    )  # fmt: skip


def _segment(text: str) -> tuple[float | None, float | None]:
    start, sep, end = text.partition(":")
    try:
        lo = float(start) if start.strip() else None
        hi = float(end) if end.strip() else None
    except ValueError:
        lo = hi = -1.0
    if not sep or (lo is not None and lo < 0) or (hi is not None and hi <= (lo or 0.0)):
        raise argparse.ArgumentTypeError(
            f"must be START:END in seconds with END after START, got {text!r}; e.g. 10:70"
        )
    return lo, hi


def _volts(text: str) -> float:
    from filtertwin.circuit import units

    try:
        value = units.parse_quantity(text, "V")
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"must be a positive voltage, got {text!r}; e.g. 2.4V")
    return value


def wants_archive(args: argparse.Namespace) -> bool:
    """True unless ``alias`` was given one short single-channel recording and one design."""
    from filtertwin.archive.discover import is_pattern
    from filtertwin.checks.alias import MAX_FRAMES
    from filtertwin.commands.options import column
    from filtertwin.files import recordings

    if len(args.recording) != 1 or args.candidate or args.segment or args.cluster:
        return True
    if args.workers or args.recorded_as or args.sensitivity or args.full_scale:
        return True
    path = args.recording[0]
    if Path(path).is_dir() or (is_pattern(path) and not Path(path).exists()):
        return True
    info = recordings.inspect(
        path, rate_hz=args.rate, column=column(args.column), jitter_limit=args.max_jitter / 100
    )
    return info.channels != 1 or info.frames > MAX_FRAMES


def run(args: argparse.Namespace) -> int:
    """Check every file of the archive; print the verdicts; write the report.

    Exit status: 0 when every file was read and every candidate passes on every file; 1 when
    a candidate fails somewhere or a file could not be read (the count is printed).
    """
    from filtertwin.archive.discover import find_recordings
    from filtertwin.archive.summary import summarize
    from filtertwin.archive.tasks import run_tasks
    from filtertwin.commands.options import out_folder
    from filtertwin.report.archive import write_archive_report

    if getattr(args, "suggest", False) or getattr(args, "save_suggestion", None):
        raise UserInputError(
            "--suggest searches designs for one recording; run it on one file and one channel"
        )
    spec = _spec(args)
    paths = find_recordings(args.recording)
    out = out_folder(args.out)
    bar = _Progress(sys.stderr, paths)
    try:
        results = run_tasks(
            paths, spec, workers=args.workers, address=args.cluster, progress=bar.update
        )
    finally:
        bar.close()
    summary = summarize(results, spec)
    protect = [*paths, *(Path(c.design.spec.source) for c in spec.candidates)]
    written = write_archive_report(out, results, summary, spec, protect=protect)
    if args.json:
        print(json.dumps(summary.to_dict() | {"written": {k: str(v) for k, v in
                                                          written.items()}}, indent=2))  # fmt: skip
    else:
        print(_text(results, summary, spec, written))
    if summary.unreadable:
        print(f"{len(summary.unreadable)} of {len(paths)} files could not be read (see above)",
              file=sys.stderr)  # fmt: skip
        return 1
    return 0 if all(v.passed for v in summary.verdicts) else 1


def _spec(args: argparse.Namespace) -> Any:
    from filtertwin.archive.calibration import parse_sensitivity
    from filtertwin.archive.scan import ScanSpec
    from filtertwin.checks.tolerance import passband_edges_hz
    from filtertwin.commands.options import column

    candidates = _candidates([args.design, *args.candidate], args.filter)
    adc = args.adc_rate
    band = args.band
    if band is None:
        band = min(min(passband_edges_hz(c.design.filter(c.filter_name))[1], adc / 2)
                   for c in candidates)  # fmt: skip
    if band > adc / 2:
        raise UserInputError(
            f"band of interest {band:g} Hz is above the ADC's Nyquist frequency {adc / 2:g} Hz; "
            "lower --band or raise --adc-rate"
        )
    bits = args.bits if args.bits is not None else 16
    if not 1 <= bits <= 32:
        raise UserInputError(f"ADC resolution {bits} bits is outside 1..32; give --bits 1 to 32")
    options = tuple(
        (name, getattr(args, attr)) for attr, name in (("max_droop", "max_droop_db"),)
        if getattr(args, attr, None) is not None
    )  # fmt: skip
    start, end = args.segment or (None, None)
    full_scale = args.full_scale
    if full_scale is None and args.recorded_as in ("volts", "sensor") or args.sensitivity:
        full_scale = full_scale or candidates[0].design.spec.full_scale_v
    return ScanSpec(
        tuple(candidates), adc, float(band), bits, args.reject_db, options, args.rate,
        column(args.column), start, end, args.recorded_as, full_scale,
        parse_sensitivity(args.sensitivity) if args.sensitivity else None,
        args.max_jitter / 100, args.events,
    )  # fmt: skip


def _candidates(designs: list[str], filter_name: str | None) -> list[Any]:
    """Every anti-alias filter of every design (the one named with --filter, where given)."""
    from filtertwin.archive.scan import Candidate
    from filtertwin.circuit.design import load

    found = []
    for text in designs:
        design = load(text)
        names = [f.name for f in design.filters if f.response != "highpass"]
        if filter_name is not None and filter_name in names:
            names = [filter_name]
        if not names:
            raise UserInputError(f"{text}: the design has no low-pass or band-pass filter to check")
        stem = Path(text).stem
        found += [(stem if len(names) == 1 else f"{stem}:{n}", design, n) for n in names]
    labels = [label for label, _, _ in found]
    return [
        Candidate(label if labels.count(label) == 1 else f"{label} ({i + 1})", design, name)
        for i, (label, design, name) in enumerate(found)
    ]


class _Progress(ProgressLine):
    """A one-line bar over files and bytes on a terminal; silent otherwise."""

    def __init__(self, stream: TextIO, paths: list[Path]) -> None:
        super().__init__(stream)
        self.files = len(paths)
        self.bytes = sum(p.stat().st_size for p in paths)
        self.done_files = self.done_bytes = self.unreadable = 0

    def update(self, result: Any) -> None:
        self.done_files += 1
        self.done_bytes += result.bytes
        self.unreadable += result.error is not None
        if not self.active:
            return
        frac = self.done_bytes / self.bytes if self.bytes else self.done_files / self.files
        bad = f", {self.unreadable} unreadable" if self.unreadable else ""
        self.draw(
            frac,
            f"{self.done_files}/{self.files} files, {_mb(self.done_bytes)} of {_mb(self.bytes)}"
            f"{bad}, {time.monotonic() - self.started:.0f} s",
        )


def _mb(n: int) -> str:
    return f"{n / 1e6:.1f} MB"


def _text(results: Any, summary: Any, spec: Any, written: dict[str, Path]) -> str:
    from filtertwin.archive.summary import worst_events

    read = [r for r in results if r.error is None]
    lines = [
        f"anti-alias check of {summary.files} files ({summary.recording_s:.1f} s of recording, "
        f"{sum(len(r.channels) for r in read)} channels); ADC {hz(spec.adc_rate_hz)}, band 0 to "
        f"{hz(spec.band_hz)}",
        f"limit: aliased power in any {read[0].window_s * 1000:.0f} ms window at most "
        f"{summary.limit_dbfs:.1f} dBFS" if read else "no file could be read",
    ]  # fmt: skip
    cals = {r.calibration.describe() for r in read if r.calibration}
    lines += [f"levels: {c}" for c in sorted(cals)]
    lines.append("")
    for v in summary.verdicts:
        lines.append(f"candidate '{v.label}': {v.text()}")
    for v in summary.verdicts:
        events = worst_events(read, v.label, 3)
        if events:
            lines.append(f"worst events with '{v.label}':")
        for x in events:
            e = x.event
            peak = "" if e.peak is None else f", {e.peak:.3g} {read[0].calibration.unit} peak"
            lines.append(
                f"  {x.file} {x.channel} at {e.time_s:8.2f} s: {hz(e.source_hz)} lands at "
                f"{hz(e.alias_hz)}, {e.dbfs:.1f} dBFS{peak}"
            )
    for r in read:
        if r.note:
            lines.append(f"note: {r.path} {r.note}")
    for path, reason in summary.unreadable:
        lines.append(f"unreadable: {reason}" if reason.startswith(path) else f"{path}: {reason}")
    lines.append("")
    lines += [f"wrote {p}" for p in written.values()]
    return "\n".join(lines)


def render_each(args: argparse.Namespace, render_one: Any) -> int:
    """``render`` of several files, folders or patterns: each file into ``--out/STEM/``.

    A file that fails is reported in one line and the others go on. Returns the worst exit
    status of the renders, or 1 when a file failed (the count is printed).
    """
    import copy

    from filtertwin.archive.discover import find_recordings

    paths = find_recordings(args.input)
    stems: set[str] = set()
    status, failed = 0, 0
    for path in paths:
        stem = path.stem
        while stem in stems:
            stem += "_"
        stems.add(stem)
        one = copy.copy(args)
        one.input, one.out = str(path), str(Path(args.out) / stem)
        print(f"== {path} -> {one.out}")
        try:
            status = max(status, render_one(one))
        except UserInputError as exc:
            print(f"error: {exc}", file=sys.stderr)
            failed += 1
    if failed:
        print(f"{failed} of {len(paths)} files could not be rendered (see above)",
              file=sys.stderr)  # fmt: skip
        return max(status, 1)
    return status
