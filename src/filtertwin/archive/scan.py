"""One archive task: a whole recording through every candidate filter, in blocks.

:func:`scan_file` reads the file once in blocks (memory set by the block size, never by the
length of the file), runs every candidate's digital twin over all its channels (the GIL-free
:class:`~filtertwin.digital.engine.CascadeRunner` through
:class:`~filtertwin.digital.render.TwinStream`), and
measures the short-time aliased power of the unfiltered and every filtered stream
(:mod:`filtertwin.archive.windows`). It then reads the stretch around the file's worst moment
(at most :data:`CHECK_FRAMES` frames) and runs the single-recording check,
:func:`filtertwin.checks.alias.check_alias`, on every channel for every candidate: the figures
``filtertwin alias`` gives for one recording.

A file that cannot be read gives a :class:`FileResult` with its one-line reason instead of
raising, so the rest of the archive goes on.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from filtertwin.archive.calibration import (
    Calibration,
    Sensitivity,
    looks_like_counts,
    make_calibration,
)
from filtertwin.archive.windows import Event, EventKeeper, PooledSeries, WindowPlan, plan_windows
from filtertwin.checks.alias import alias_frequency, check_alias, ideal_dynamic_range_db
from filtertwin.circuit.design import Design
from filtertwin.digital.render import TwinStream
from filtertwin.digital.twin import Twin, build_twin
from filtertwin.errors import UserInputError
from filtertwin.files import recordings
from filtertwin.files.recordinginfo import RecordingInfo

__all__ = [
    "CHECK_FRAMES",
    "UNFILTERED",
    "Candidate",
    "ChannelResult",
    "FileResult",
    "ScanSpec",
    "scan_file",
]

CHECK_FRAMES = 2**18
"""Longest stretch the single-recording check sees (5.1 s at 51.2 kHz), around the worst moment."""
UNFILTERED = "without filter"
"""Label of the stream the ADC would capture with no filter."""


@dataclass(frozen=True)
class Candidate:
    """One candidate anti-alias filter: ``filter_name`` of ``design``, shown as ``label``."""

    label: str
    design: Design
    filter_name: str


@dataclass(frozen=True)
class ScanSpec:
    """Everything a task needs besides the file (plain data, sent to every worker).

    Attributes
    ----------
    candidates : tuple of Candidate
    adc_rate_hz, band_hz : float
        The ADC's rate; top of the band of interest (one band for every candidate).
    bits : int
    reject_db : float or None
        Required rejection instead of the ADC's dynamic range.
    check_options : tuple of (str, object)
        Further keyword arguments of :func:`~filtertwin.checks.alias.check_alias`.
    rate_hz : float or None
        Rate of CSV files without a time column and of NPY files.
    column : str or int or None
        The one channel to read (default every channel).
    start_s, end_s : float or None
        The segment of every file to read (seconds from its start).
    recorded_as : str or None
        What the numbers are (None: recognise raw counts, else fractions of full scale).
    full_scale_v : float or None
    sensitivity : Sensitivity or None
    jitter_limit : float
        Largest deviation of a CSV time step from the typical one, as a fraction.
    events : int
        Worst events kept per channel and stream.
    block_frames : int
    check_frames : int
    """

    candidates: tuple[Candidate, ...]
    adc_rate_hz: float
    band_hz: float
    bits: int = 16
    reject_db: float | None = None
    check_options: tuple[tuple[str, Any], ...] = ()
    rate_hz: float | None = None
    column: str | int | None = None
    start_s: float | None = None
    end_s: float | None = None
    recorded_as: str | None = None
    full_scale_v: float | None = None
    sensitivity: Sensitivity | None = None
    jitter_limit: float = 0.01
    events: int = 5
    block_frames: int = 65536
    check_frames: int = CHECK_FRAMES

    @property
    def required_db(self) -> float:
        """Required rejection: the ADC's ideal dynamic range 6.02 N + 1.76 dB, or as given."""
        return self.reject_db if self.reject_db is not None else ideal_dynamic_range_db(self.bits)

    @property
    def labels(self) -> tuple[str, ...]:
        """Stream labels: the unfiltered capture first, then every candidate."""
        return (UNFILTERED, *(c.label for c in self.candidates))


@dataclass(frozen=True)
class AliasEvent:
    """A worst moment: folding power in one window of one channel of one stream."""

    time_s: float
    source_hz: float
    alias_hz: float
    dbfs: float
    peak: float | None

    def to_dict(self) -> dict[str, Any]:
        return {
            "time_s": self.time_s,
            "source_hz": self.source_hz,
            "alias_hz": self.alias_hz,
            "dbfs": self.dbfs,
            "peak_in_unit": self.peak,
        }


@dataclass(frozen=True)
class ChannelResult:
    """One channel of one file.

    Attributes
    ----------
    name : str
    events : dict
        Stream label -> worst events, strongest first.
    worst_dbfs : dict
        Stream label -> highest short-time folding power in dBFS (-300 when none).
    passed : dict
        Candidate label -> no window's folding power above the limit.
    checks : dict
        Candidate label -> the single-recording check's figures (``AliasCheck.to_dict()``)
        on the stretch around the worst moment, or ``{"error": reason}``.
    series : dict
        Stream label -> short-time folding power in dBFS, one point per ``series_step_s``.
    """

    name: str
    events: dict[str, tuple[AliasEvent, ...]]
    worst_dbfs: dict[str, float]
    passed: dict[str, bool]
    checks: dict[str, dict[str, Any]]
    series: dict[str, tuple[float, ...]]

    def to_dict(self) -> dict[str, Any]:
        return {
            "channel": self.name,
            "worst_dbfs": self.worst_dbfs,
            "pass": self.passed,
            "events": {k: [e.to_dict() for e in v] for k, v in self.events.items()},
            "checks": self.checks,
            "series_dbfs": {k: list(v) for k, v in self.series.items()},
        }


@dataclass(frozen=True)
class FileResult:
    """One file of the archive: its channels' results, or why it could not be read."""

    path: str
    bytes: int
    error: str | None = None
    kind: str = ""
    rate_hz: float = 0.0
    start_s: float = 0.0
    duration_s: float = 0.0
    window_s: float = 0.0
    series_step_s: float = 0.0
    stretch_s: tuple[float, float] = (0.0, 0.0)
    calibration: Calibration | None = None
    note: str | None = None
    channels: tuple[ChannelResult, ...] = field(default_factory=tuple)

    @property
    def failed_to_read(self) -> bool:
        return self.error is not None

    def to_dict(self) -> dict[str, Any]:
        if self.error is not None:
            return {"file": self.path, "bytes": self.bytes, "error": self.error}
        cal = self.calibration
        return {
            "file": self.path,
            "bytes": self.bytes,
            "kind": self.kind,
            "rate_hz": self.rate_hz,
            "start_s": self.start_s,
            "duration_s": self.duration_s,
            "window_s": self.window_s,
            "series_step_s": self.series_step_s,
            "check_stretch_s": list(self.stretch_s),
            "values": None if cal is None else cal.describe(),
            "unit": None if cal is None or cal.to_unit is None else cal.unit,
            "note": self.note,
            "channels": [c.to_dict() for c in self.channels],
        }


def scan_file(path: str | Path, spec: ScanSpec) -> FileResult:
    """Run one recording of the archive through every candidate.

    Parameters
    ----------
    path : str or Path
    spec : ScanSpec

    Returns
    -------
    FileResult
        With ``error`` set (one line) when the file cannot be read or checked.
    """
    path = Path(path)
    size = path.stat().st_size if path.is_file() else 0
    try:
        return _first_alone(path, size, spec)
    except UserInputError as exc:
        return FileResult(str(path), size, error=str(exc))
    except (OSError, ValueError, RuntimeError) as exc:
        reason = " ".join(str(exc).split())
        return FileResult(str(path), size, error=f"{path}: cannot be read ({reason})")


_FIRST = threading.Lock()
_WARM: set[tuple[str, ...]] = set()
"""Candidates whose compiled kernels this process has run once (numba compiles a kernel on
its first call; two threads compiling the same one at once fail)."""


def _first_alone(path: Path, size: int, spec: ScanSpec) -> FileResult:
    """Scan; the first file of a process with these candidates runs alone (it compiles)."""
    key = spec.labels
    if key in _WARM:
        return _scan(path, size, spec)
    with _FIRST:
        if key not in _WARM:
            result = _scan(path, size, spec)
            _WARM.add(key)
            return result
    return _scan(path, size, spec)


def _segment(info: RecordingInfo, spec: ScanSpec) -> tuple[int, int]:
    start = 0 if spec.start_s is None else round(spec.start_s * info.rate_hz)
    end = info.frames if spec.end_s is None else min(info.frames, round(spec.end_s * info.rate_hz))
    if start >= info.frames:
        raise UserInputError(
            f"{info.path}: the segment starts at {spec.start_s:g} s, after the end of the file "
            f"({info.duration_s:.6g} s); choose an earlier start"
        )
    return start, end


def _scan(path: Path, size: int, spec: ScanSpec) -> FileResult:
    info = recordings.inspect(
        path, rate_hz=spec.rate_hz, column=spec.column, jitter_limit=spec.jitter_limit
    )
    if spec.adc_rate_hz > info.rate_hz * (1 + 1e-9):
        raise UserInputError(
            f"{path} is sampled at {info.rate_hz:g} Hz, below the ADC rate "
            f"{spec.adc_rate_hz:g} Hz, so it cannot show what folds; leave it out"
        )
    start, end = _segment(info, spec)
    plan = plan_windows(info.rate_hz, spec.adc_rate_hz, spec.band_hz)
    if end - start < plan.frames:
        raise UserInputError(
            f"{path}: the segment holds {end - start} frames, fewer than one "
            f"{plan.frames}-frame window; choose a longer segment"
        )
    streamed = _Streams(info, spec, plan, start / info.rate_hz)
    first = True
    for block in _segment_blocks(info, spec.block_frames, start, end):
        if first:
            streamed.calibrate(block)
            first = False
        streamed.push(block)
    streamed.finish()
    cal = streamed.calibration
    assert cal is not None
    stretch = _stretch(streamed.worst_window * plan.frames, end - start, spec.check_frames)
    samples = _read_stretch(info, spec.block_frames, start + stretch[0], start + stretch[1])
    channels = []
    for c, name in enumerate(info.channel_names):
        checks = {cand.label: _check(cand, samples[:, c], info.rate_hz, spec)
                  for cand in spec.candidates}  # fmt: skip
        channels.append(streamed.channel_result(c, name, checks))
    return FileResult(
        str(path), size, None, info.kind, info.rate_hz, start / info.rate_hz,
        (end - start) / info.rate_hz, plan.seconds, streamed.series[0].step_s,
        ((start + stretch[0]) / info.rate_hz, (start + stretch[1]) / info.rate_hz),
        cal, streamed.note, tuple(channels),
    )  # fmt: skip


class _Streams:
    """The unfiltered stream and one filtered stream per candidate, cut into windows."""

    def __init__(
        self, info: RecordingInfo, spec: ScanSpec, plan: WindowPlan, start_s: float
    ) -> None:
        self.info, self.spec, self.plan, self.start_s = info, spec, plan, start_s
        ch = info.channels
        self.twins = [
            TwinStream(_twin(c, info.rate_hz), ch, spec.block_frames, clip=False)
            for c in spec.candidates
        ]
        n = 1 + len(self.twins)
        self.pending: list[list[np.ndarray]] = [[] for _ in range(n)]
        self.count = [0] * n
        self.done = [0] * n
        gap = 2 * plan.seconds
        self.keepers = [[EventKeeper(spec.events, gap) for _ in range(ch)] for _ in range(n)]
        self.series = [PooledSeries(plan.seconds) for _ in range(n)]
        self.worst = np.full((n, ch), 0.0)
        self.worst_window = 0
        self._worst_raw = -1.0
        self.calibration: Calibration | None = None
        self.note: str | None = None

    def calibrate(self, block: np.ndarray) -> None:
        spec = self.spec
        recorded = spec.recorded_as
        peak = looks_like_counts(block) if recorded is None else None
        if recorded is None:
            recorded = "counts" if peak is not None else "fraction"
        self.calibration = make_calibration(
            recorded, bits=spec.bits, full_scale_v=spec.full_scale_v,
            sensitivity=spec.sensitivity, guessed=peak is not None,
        )  # fmt: skip
        if peak is not None:
            self.note = (
                f"holds raw ADC counts (whole numbers up to {peak:.0f}), taken as a "
                f"{spec.bits}-bit ADC's (full scale {2 ** (spec.bits - 1)} counts); to calibrate "
                "give --recorded-as counts with --bits, --full-scale (V) and --sensitivity "
                "(e.g. '100 mV/g')"
            )

    def push(self, block: np.ndarray) -> None:
        self._feed(0, block)
        for i, twin in enumerate(self.twins, start=1):
            self._feed(i, twin.process(block)[0])

    def finish(self) -> None:
        for i, twin in enumerate(self.twins, start=1):
            self._feed(i, twin.flush()[0])

    def _feed(self, stream: int, piece: np.ndarray) -> None:
        if not len(piece):
            return
        self.pending[stream].append(np.array(piece))
        self.count[stream] += len(piece)
        w = self.plan.frames
        if self.count[stream] < w:
            return
        joined = np.concatenate(self.pending[stream])
        whole = len(joined) // w * w
        self._windows(stream, joined[:whole].reshape(-1, w, joined.shape[1]))
        rest = joined[whole:]
        self.pending[stream] = [rest] if len(rest) else []
        self.count[stream] = len(rest)

    def _windows(self, stream: int, x: np.ndarray) -> None:
        """Consecutive windows ``(windows, frames, channels)`` of one stream."""
        folds, _, sources = self.plan.powers(x)
        for fold, source in zip(folds, sources, strict=True):
            index = self.done[stream]
            self.done[stream] += 1
            t = self.start_s + (index + 0.5) * self.plan.seconds
            for c in range(x.shape[2]):
                self.keepers[stream][c].offer(Event(t, float(fold[c]), float(source[c])))
            self.series[stream].add(fold)
            if stream == 0 and float(fold.max()) > self._worst_raw:
                self._worst_raw = float(fold.max())
                self.worst_window = index
        self.worst[stream] = np.maximum(self.worst[stream], folds.max(axis=0))

    def channel_result(self, c: int, name: str, checks: dict[str, dict[str, Any]]) -> ChannelResult:
        cal = self.calibration
        assert cal is not None
        labels = self.spec.labels
        limit = -self.spec.required_db
        events, worst, passed, series = {}, {}, {}, {}
        for s, label in enumerate(labels):
            events[label] = tuple(
                AliasEvent(
                    e.time_s, e.source_hz,
                    float(_alias(e.source_hz, self.spec.adc_rate_hz)),
                    cal.dbfs(e.power), cal.peak_in_unit(e.power),
                )
                for e in self.keepers[s][c].events
            )  # fmt: skip
            worst[label] = cal.dbfs(float(self.worst[s, c]))
            values = self.series[s].values()
            series[label] = tuple(cal.dbfs(float(v)) for v in values[:, c]) if values.size else ()
            if s:
                passed[label] = worst[label] <= limit
        return ChannelResult(name, events, worst, passed, checks, series)


_TWINS: dict[tuple[int, str, float], tuple[Design, Twin]] = {}
"""Twins built in this process, by (design, filter, rate): the same few serve every file."""
TWINS_KEPT = 64


def _twin(cand: Candidate, rate_hz: float) -> Twin:
    key = (id(cand.design), cand.filter_name, rate_hz)
    kept = _TWINS.get(key)
    if kept is not None and kept[0] is cand.design:
        return kept[1]
    twin = build_twin(cand.design, rate_hz, oversampling="auto", filters=[cand.filter_name])
    if len(_TWINS) >= TWINS_KEPT:
        _TWINS.clear()
    _TWINS[key] = (cand.design, twin)
    return twin


def _alias(f_hz: float, adc_rate_hz: float) -> float:
    return float(alias_frequency(f_hz, adc_rate_hz))


def _segment_blocks(info: RecordingInfo, block_frames: int, start: int, end: int) -> Any:
    """The recording's blocks cut to frames ``start`` .. ``end`` (stops reading after it)."""
    at = 0
    blocks = recordings.read_blocks(info, block_frames)
    try:
        for block in blocks:
            lo, hi = max(start - at, 0), min(end - at, len(block))
            at += len(block)
            if hi > lo:
                yield block[lo:hi]
            if at >= end:
                break
    finally:
        close = getattr(blocks, "close", None)
        if close is not None:
            close()


def _stretch(centre: int, frames: int, longest: int) -> tuple[int, int]:
    """``longest`` frames (at most ``frames``) around ``centre``, inside 0 .. ``frames``."""
    n = min(longest, frames)
    lo = min(max(centre - n // 2, 0), frames - n)
    return lo, lo + n


def _read_stretch(info: RecordingInfo, block_frames: int, start: int, end: int) -> np.ndarray:
    out = np.empty((end - start, info.channels))
    at = 0
    for block in _segment_blocks(info, block_frames, start, end):
        out[at : at + len(block)] = block
        at += len(block)
    return out[:at]


def _check(cand: Candidate, x: np.ndarray, rate_hz: float, spec: ScanSpec) -> dict[str, Any]:
    try:
        check, _ = check_alias(
            cand.design, x, rate_hz, spec.adc_rate_hz, filter_name=cand.filter_name,
            band_hz=spec.band_hz, bits=spec.bits, reject_db=spec.reject_db,
            **dict(spec.check_options),
        )  # fmt: skip
    except UserInputError as exc:
        return {"error": str(exc)}
    return _plain(check.to_dict())


def _plain(value: Any) -> Any:
    """JSON-ready copy: numpy scalars to Python numbers, non-finite floats kept."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return value
    return value
