"""Offline rendering: a recording through the digital twin, block by block, into files.

The recording is read in blocks (:func:`filtertwin.files.recordings.read_blocks`), every block goes
through all filters of the twin at once (:class:`filtertwin.digital.engine.CascadeRunner`), and the
input as heard, each filter's output and, for a crossover, the sum of the ways are written as
they come. Memory depends on the block size, never on the length of the recording.

When the twin runs oversampled, :class:`filtertwin.digital.resample.StreamResampler` resamples
the stream up and each filter's output down with the FIR design of
``scipy.signal.resample_poly`` (Kaiser window, beta 5, 10 zero crossings per side at the lower
rate) and carries its state across blocks, so the output does not depend on the block size.
Their combined delay (:attr:`TwinStream.delay_frames`) is removed, so every output lines up
with the input sample for sample.

Outputs are written under temporary names and renamed only when every output is complete;
a failure leaves none of them behind.
"""

from __future__ import annotations

import math
import queue
import re
import threading
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import soundfile

from filtertwin.digital.engine import CascadeRunner
from filtertwin.digital.resample import Downsampler, Upsampler
from filtertwin.digital.resample import delay_frames as resample_delay_frames
from filtertwin.digital.spectra import Spectrum, WelchAccumulator, segment_frames
from filtertwin.digital.twin import Twin
from filtertwin.errors import UserInputError
from filtertwin.files import outputs, recordings
from filtertwin.files.recordinginfo import RecordingInfo

if TYPE_CHECKING:
    from filtertwin.circuit.noise import CircuitNoiseSource

__all__ = [
    "PlannedOutput",
    "RenderResult",
    "RenderSettings",
    "StageClip",
    "TwinStream",
    "WrittenFile",
    "output_kind",
    "plan_outputs",
    "refuse_input_overwrite",
    "render",
    "render_array",
]

SUBTYPES = {"float": "FLOAT", "pcm24": "PCM_24", "pcm16": "PCM_16"}
FORMATS = {"wav": "WAV", "flac": "FLAC"}
RESERVED_NAMES = ("before", "sum")

Progress = Callable[[int, int], None]


# --- streaming resampling ----------------------------------------------------------------


class TwinStream:
    """All filters of a twin as one stream: input-rate blocks in, aligned outputs out.

    Parameters
    ----------
    twin : Twin
        From :func:`filtertwin.digital.twin.build_twin`; oversampled twins get resampling.
    channels : int
        Channels of the signal.
    max_frames : int
        Largest block that will be passed to :meth:`process`.
    clip : bool
        Model the amplifier output swing and slew rate (the twin's clip levels and slew
        steps); False runs linear.

    Attributes
    ----------
    delay_frames : int
        Input-rate delay of the up- and down-sampler in series (0 without oversampling),
        removed from the output.

    Notes
    -----
    Without oversampling :meth:`process` returns exactly as many frames as it was given;
    with oversampling the first :attr:`delay_frames` are held back and come out of
    :meth:`flush`, so the concatenated output always has the input's length.
    """

    def __init__(self, twin: Twin, channels: int, max_frames: int, *, clip: bool = True) -> None:
        self.twin = twin
        self.channels = channels
        self.max_frames = max_frames
        factor = twin.oversampling
        levels = twin.clip_levels() if clip else None
        steps = twin.slew_steps() if clip else None
        self._runner = CascadeRunner(
            twin.chains(), channels, max_frames * factor, clip_levels=levels, slew_steps=steps
        )
        self._up: Upsampler | None = None
        self._down: Downsampler | None = None
        self.delay_frames = 0
        if factor > 1:
            phase = twin.resampling
            self._up = Upsampler(factor, channels, max_frames, phase)
            self._down = Downsampler(
                factor, len(twin.filters), channels, max_frames * factor, phase
            )
            self.delay_frames = resample_delay_frames(factor, phase)
        self._skip = self.delay_frames

    @property
    def clip_counts(self) -> np.ndarray:
        """Samples limited to the amplifier swing, ``(n_filters, max_sections)``, cumulative."""
        return np.array(self._runner.clip_counts)

    @property
    def slew_counts(self) -> np.ndarray:
        """Samples limited to the amplifier slew rate, ``(n_filters, max_sections)``, at the
        twin's rate, cumulative."""
        return np.array(self._runner.slew_counts)

    def process(self, block: np.ndarray) -> np.ndarray:
        """Filter ``(frames, channels)``; returns ``(n_filters, frames_out, channels)``.

        Without oversampling the result is a view that the next call overwrites.
        """
        if self._up is None or self._down is None:
            return self._runner.process(block)
        high = self._runner.process(self._up.process(block))  # (n, frames * L, channels)
        low = self._down.process(high)
        skip = min(self._skip, low.shape[1])
        self._skip -= skip
        return low[:, skip:]

    def flush(self) -> np.ndarray:
        """The held-back last frames, ``(n_filters, frames, channels)``; none at 1x."""
        n = len(self.twin.filters)
        if self._up is None or not self.delay_frames:
            return np.zeros((n, 0, self.channels))
        pieces = []
        remaining = self.delay_frames
        while remaining:
            frames = min(remaining, self.max_frames)
            pieces.append(self.process(np.zeros((frames, self.channels))).copy())
            remaining -= frames
        return np.concatenate(pieces, axis=1)


def render_array(
    twin: Twin, signal: np.ndarray, block_frames: int, *, clip: bool = True
) -> np.ndarray:
    """Filter a whole in-memory signal through every filter of the twin, block by block.

    Parameters
    ----------
    twin : Twin
        The digital twin.
    signal : numpy.ndarray
        ``(frames, channels)`` at the twin's input rate.
    block_frames : int
        Frames per block (the result does not depend on it).
    clip : bool
        Model the amplifier output swing.

    Returns
    -------
    numpy.ndarray
        ``(n_filters, frames, channels)`` float64.
    """
    signal = np.asarray(signal, dtype=np.float64)
    stream = TwinStream(twin, signal.shape[1], block_frames, clip=clip)
    pieces = [
        stream.process(signal[i : i + block_frames]).copy()
        for i in range(0, len(signal), block_frames)
    ]
    pieces.append(stream.flush())
    return np.concatenate(pieces, axis=1)


# --- output planning ---------------------------------------------------------------------


@dataclass(frozen=True)
class RenderSettings:
    """How to render.

    Attributes
    ----------
    block_frames : int
        Frames read and filtered at a time.
    audio_format : str
        ``"wav"`` or ``"flac"`` (audio inputs; sensor inputs give float WAV or CSV).
    subtype : str or None
        ``"float"``, ``"pcm24"`` or ``"pcm16"``; default float for WAV, pcm24 for FLAC.
    clip : bool
        Model the amplifier output swing.
    spectra : bool
        Accumulate the Welch PSD of every output.
    """

    block_frames: int = 16384
    audio_format: str = "wav"
    subtype: str | None = None
    clip: bool = True
    spectra: bool = True


@dataclass(frozen=True)
class PlannedOutput:
    """One output file: ``role`` is ``"before"``, ``"filter"`` or ``"sum"``."""

    role: str
    name: str
    path: Path


def _file_stem(name: str, taken: set[str]) -> str:
    stem = re.sub(r"[^A-Za-z0-9_.-]+", "-", name).strip(".-") or "filter"
    base, k = stem, 2
    while stem.lower() in taken:
        stem, k = f"{base}-{k}", k + 1
    taken.add(stem.lower())
    return stem


def output_kind(info: RecordingInfo, settings: RenderSettings) -> tuple[str, str | None]:
    """(suffix, libsndfile subtype) of the outputs for this input; CSV has no subtype.

    Raises
    ------
    UserInputError
        Unknown format or subtype, a pair the format cannot hold, or a format or subtype
        given for a sensor recording.
    """
    fmt = settings.audio_format.lower()
    if fmt not in FORMATS:
        raise UserInputError(f"unknown output format {fmt!r}; use wav or flac")
    if settings.subtype is not None and settings.subtype.lower() not in SUBTYPES:
        raise UserInputError(
            f"unknown sample format {settings.subtype!r}; use float, pcm24 or pcm16"
        )
    if info.kind != "audio":
        if fmt != "wav" or settings.subtype not in (None, "float"):
            raise UserInputError(
                f"{info.path} is a sensor recording: outputs are float WAV (CSV for CSV input);"
                " drop --format and --subtype"
            )
        return (".csv", None) if info.kind == "csv" else (".wav", "FLOAT")
    subtype = SUBTYPES[settings.subtype.lower()] if settings.subtype else None
    subtype = subtype or ("FLOAT" if fmt == "wav" else "PCM_24")
    if not soundfile.check_format(FORMATS[fmt], subtype):
        raise UserInputError(
            f"{fmt.upper()} files cannot hold {settings.subtype} samples; use pcm24 or pcm16"
        )
    return f".{fmt}", subtype


def plan_outputs(
    filter_names: Sequence[str], out_dir: Path, suffix: str
) -> tuple[PlannedOutput, ...]:
    """The files a render writes: before, one per filter, and the sum for 2+ filters.

    Filter names become file names with characters other than letters, digits, ``_.-``
    replaced by ``-``; clashes (also with ``before`` and ``sum``) get ``-2``, ``-3``...
    """
    taken = set(RESERVED_NAMES)
    plan = [PlannedOutput("before", "before", out_dir / f"before{suffix}")]
    for name in filter_names:
        plan.append(PlannedOutput("filter", name, out_dir / f"{_file_stem(name, taken)}{suffix}"))
    if len(filter_names) > 1:
        plan.append(PlannedOutput("sum", "sum", out_dir / f"sum{suffix}"))
    return tuple(plan)


def refuse_input_overwrite(paths: Iterable[Path], input_path: Path) -> None:
    """Refuse output paths that name the input file.

    Raises
    ------
    UserInputError
        One line naming the clash and the fix.
    """
    source = Path(input_path).resolve()
    for path in paths:
        if Path(path).resolve() == source:
            raise UserInputError(
                f"output {path} would overwrite the input {input_path}; choose another --out folder"
            )


# --- writing -----------------------------------------------------------------------------


@dataclass(frozen=True)
class WrittenFile:
    """An output file and its levels.

    Attributes
    ----------
    role, name, path
        As planned (:class:`PlannedOutput`).
    frames, channels : int
        Size of the file.
    peak : tuple of float
        Largest absolute sample per channel, full scale = 1.
    over_full_scale : int
        Samples beyond full scale (clipped in the file when its format is PCM).
    subtype : str or None
        libsndfile subtype, None for CSV.
    """

    role: str
    name: str
    path: Path
    frames: int
    channels: int
    peak: tuple[float, ...]
    over_full_scale: int
    subtype: str | None

    @property
    def peak_dbfs(self) -> float:
        """Largest peak over the channels in dBFS (-inf for silence)."""
        top = max(self.peak)
        return 20 * math.log10(top) if top > 0 else -math.inf


@dataclass(frozen=True)
class StageClip:
    """Samples the amplifier model limited at one stage output (summed over channels): to
    its swing (clipping) or to its slew rate (slewing, counted at the twin's rate)."""

    filter: str
    stage: int
    samples: int


@dataclass(frozen=True)
class RenderResult:
    """What a render wrote and saw.

    Attributes
    ----------
    source : Path
        The input recording.
    rate_hz : float
        Its sample rate (and the outputs').
    frames, channels : int
        Its size.
    oversampling : int
        Factor the twin ran at.
    files : tuple of WrittenFile
        Every output, in plan order.
    clips : tuple of StageClip
        Stages whose output reached the amplifier swing (empty: no clipping).
    slews : tuple of StageClip
        Stages whose output reached the amplifier slew rate, samples at the twin's rate
        (empty: no slewing).
    spectra : tuple of Spectrum
        Welch PSD of each file, in the order of ``files`` (empty when not accumulated).
    elapsed_s : float
        Wall-clock time of the render.
    """

    source: Path
    rate_hz: float
    frames: int
    channels: int
    oversampling: int
    files: tuple[WrittenFile, ...]
    clips: tuple[StageClip, ...]
    spectra: tuple[Spectrum, ...] = ()
    elapsed_s: float = 0.0
    slews: tuple[StageClip, ...] = ()


_WRITE_QUEUE_BLOCKS = 4  # blocks waiting per output file: bounded memory


class _Output:
    """One planned output being written, with its peak and over-full-scale counters."""

    def __init__(self, planned: PlannedOutput, info: RecordingInfo, subtype: str | None) -> None:
        self.planned = planned
        self.subtype = subtype
        self.peak = np.zeros(info.channels)
        self.over = 0
        self.writer: outputs.SafeWriter | outputs.CsvWriter
        if subtype is None:
            self.writer = outputs.CsvWriter(
                planned.path, info.rate_hz, info.channel_names, protect=[info.path]
            )
        else:
            self.writer = outputs.SafeWriter(
                planned.path, info.rate_hz, info.channels, subtype=subtype, protect=[info.path]
            )
        self._failure: BaseException | None = None
        self._queue: queue.Queue[np.ndarray | None] = queue.Queue(maxsize=_WRITE_QUEUE_BLOCKS)
        self._thread = threading.Thread(target=self._drain, name=f"write {planned.name}")
        self._thread.start()

    def write(self, block: np.ndarray) -> None:
        """Queue a copy of ``block`` for the writer thread (blocks while the queue is full)."""
        self._raise_failure()
        self._queue.put(np.array(block, copy=True))

    def stop(self) -> None:
        """End the writer thread without waiting for its queue (after a failure)."""
        if self._thread.is_alive():
            self._failure = self._failure or RuntimeError("render stopped")
            self._queue.put(None)
            self._thread.join()

    def finish(self) -> None:
        """Wait until every queued block is written; re-raise a writer failure."""
        self._queue.put(None)
        self._thread.join()
        self._raise_failure()

    def _raise_failure(self) -> None:
        if self._failure is not None:
            raise self._failure

    def _drain(self) -> None:
        # a thread per output: libsndfile writes release the GIL, so files are written while
        # the runner (nogil) filters the next block
        while (block := self._queue.get()) is not None:
            if self._failure is None:
                try:
                    self._write_now(block)
                except BaseException as exc:  # handed to the main thread by finish()/write()
                    self._failure = exc

    def _write_now(self, block: np.ndarray) -> None:
        if len(block):
            magnitude = np.abs(block)
            for c in range(len(self.peak)):  # per channel: far faster than max(axis=0)
                self.peak[c] = max(self.peak[c], magnitude[:, c].max())
            if magnitude.max() > 1.0:
                self.over += int(np.count_nonzero(magnitude > 1.0))
            self.writer.write(block)

    def written(self) -> WrittenFile:
        p = self.planned
        return WrittenFile(
            p.role, p.name, p.path, self.writer.frames, len(self.peak),
            tuple(float(v) for v in self.peak), self.over, self.subtype,
        )  # fmt: skip


def _stage_clips(twin: Twin, counts: np.ndarray) -> tuple[StageClip, ...]:
    clips = []
    for i, ft in enumerate(twin.filters):
        per_stage: dict[int, int] = {}
        for k, stage in enumerate(ft.stage_of_section):
            per_stage[stage] = per_stage.get(stage, 0) + int(counts[i, k])
        clips += [StageClip(ft.name, s, n) for s, n in sorted(per_stage.items()) if n]
    return tuple(clips)


def render(
    twin: Twin,
    info: RecordingInfo,
    plan: Sequence[PlannedOutput],
    subtype: str | None,
    settings: RenderSettings = RenderSettings(),  # noqa: B008 (frozen)
    progress: Progress | None = None,
    noise: CircuitNoiseSource | None = None,
) -> RenderResult:
    """Stream a recording through the twin and write every planned output.

    Parameters
    ----------
    twin : Twin
        Built at ``info.rate_hz`` (any oversampling).
    info : RecordingInfo
        The validated input (:func:`filtertwin.files.recordings.inspect`).
    plan : sequence of PlannedOutput
        From :func:`plan_outputs` with the twin's filter names, in order.
    subtype : str or None
        libsndfile subtype of the audio outputs; None writes CSV (:func:`output_kind`).
    settings : RenderSettings
        Block size, amplifier swing model, spectra.
    progress : callable, optional
        Called as ``progress(frames_done, frames_total)`` after every block.
    noise : CircuitNoiseSource, optional
        The circuit's own noise, added to every filter output (and so to the sum).

    Returns
    -------
    RenderResult

    Raises
    ------
    UserInputError
        An output that would overwrite the input, or an input that changed while read.
        On any error no output of this render is left behind.
    """
    refuse_input_overwrite((p.path for p in plan), info.path)
    stream = TwinStream(twin, info.channels, settings.block_frames, clip=settings.clip)
    started = time.perf_counter()  # after the kernels are compiled or loaded
    outputs: list[_Output] = []
    done: list[Path] = []
    try:
        for planned in plan:
            outputs.append(_Output(planned, info, subtype))
        spectra = _accumulators(plan, info, settings.spectra)
        _stream(stream, info, outputs, spectra, settings.block_frames, progress, noise)
        for out in outputs:
            out.finish()
        for out in outputs:
            out.writer.close()
            done.append(out.planned.path)
    except BaseException:
        for out in outputs:
            out.stop()
            out.writer.discard()
        for path in done:
            path.unlink(missing_ok=True)
        raise
    return RenderResult(
        info.path, info.rate_hz, info.frames, info.channels, twin.oversampling,
        tuple(out.written() for out in outputs), _stage_clips(twin, stream.clip_counts),
        tuple(acc.result() for acc in spectra), time.perf_counter() - started,
        _stage_clips(twin, stream.slew_counts),
    )  # fmt: skip


def _accumulators(
    plan: Sequence[PlannedOutput], info: RecordingInfo, wanted: bool
) -> list[WelchAccumulator]:
    if not wanted:
        return []
    nperseg = segment_frames(info.rate_hz, info.frames)
    return [WelchAccumulator(info.rate_hz, info.channels, nperseg) for _ in plan]


def _stream(
    stream: TwinStream,
    info: RecordingInfo,
    outputs: list[_Output],
    spectra: list[WelchAccumulator],
    block_frames: int,
    progress: Progress | None,
    noise: CircuitNoiseSource | None = None,
) -> None:
    n = len(stream.twin.filters)

    def emit(index: int, block: np.ndarray) -> None:
        outputs[index].write(block)
        if spectra:
            spectra[index].update(block)

    def emit_filtered(filtered: np.ndarray) -> None:
        if noise is not None:
            filtered = filtered + noise.next(filtered.shape[1])
        for i in range(n):
            emit(1 + i, filtered[i])
        if n > 1:
            emit(1 + n, filtered.sum(axis=0))

    done = 0
    for block in recordings.read_blocks(info, block_frames):
        emit(0, block)
        emit_filtered(stream.process(block))
        done += len(block)
        if progress is not None:
            progress(done, info.frames)
    emit_filtered(stream.flush())
