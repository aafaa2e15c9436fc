"""`filtertwin render`: a recording through the twin into files, with spectra and a report.

Everything that can be wrong with the input or the output folder is checked before the
first output file is created; after that, an error removes every output of this run.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path
from typing import Any, TextIO

from filtertwin.commands.options import (
    add_max_jitter,
    add_resampling,
    column,
    frequency_hz,
    oversampling,
)
from filtertwin.commands.progress import ProgressLine
from filtertwin.digital.factors import FACTOR_WORDS, OVERSAMPLING_FACTORS
from filtertwin.errors import UserInputError

SAFETY_LINE = (
    "Caution: loud playback harms hearing and drivers; check the levels before playing the "
    "outputs, and start quiet."
)
PROGRESS_AFTER_S = 2.0
"""Show the progress bar only for renders that take longer than this."""
PROGRESS_EVERY_S = 0.2


def register(subparsers: Any) -> None:
    """Add the ``render`` sub-command."""
    p = subparsers.add_parser(
        "render",
        help="render a recording through the twin: before/after files, spectra, report",
        description=(
            "Stream a recording through the digital twin of a design and write the input as "
            "heard (before), every filter's output and, for a crossover, the sum of the ways, "
            "with spectra, the twin against the analog model, report.html and summary.json. "
            + SAFETY_LINE
        ),
    )
    p.add_argument("design", help="design file (TOML) or the name of a packaged example")
    p.add_argument(
        "input", nargs="+",
        help="recording: WAV/FLAC audio, or a CSV/NPY sensor capture; several files, folders "
        "or patterns render each into its own sub-folder of --out",
    )  # fmt: skip
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created if missing)")
    p.add_argument("--format", choices=("wav", "flac"), default="wav", help="audio output format")
    p.add_argument(
        "--subtype", choices=("float", "pcm24", "pcm16"),
        help="sample format of audio outputs (default float for WAV, pcm24 for FLAC)",
    )  # fmt: skip
    p.add_argument(
        "--block", type=_block, default=16384, metavar="N", help="frames per block (default 16384)"
    )
    p.add_argument(
        "--oversample", type=oversampling, default="auto",
        metavar="|".join(map(str, OVERSAMPLING_FACTORS)) + "|auto",
        help=f"run the twin at a multiple of the input rate ({FACTOR_WORDS}); auto (default) "
        "picks the smallest factor whose fidelity (resampling filters included) is within "
        "0.1 dB and 1 degree",
    )  # fmt: skip
    add_resampling(p)
    p.add_argument(
        "--build", choices=("nominal", "worst"), default="nominal",
        help="render the nominal parts, or the worst build of a tolerance analysis",
    )  # fmt: skip
    p.add_argument(
        "--builds", type=_count, default=500, metavar="N",
        help="tolerance builds for --build worst (default 500)",
    )  # fmt: skip
    p.add_argument(
        "--seed", type=_seed, default=1, metavar="S",
        help="random seed of the tolerance builds and of --circuit-noise (default 1)",
    )  # fmt: skip
    p.add_argument(
        "--rate", type=frequency_hz, metavar="HZ",
        help="sample rate of a sensor capture (NPY, CSV without a time column)",
    )  # fmt: skip
    p.add_argument(
        "--column", metavar="NAME|INDEX",
        help="the one channel or CSV column to render (default all)",
    )  # fmt: skip
    add_max_jitter(p)
    p.add_argument(
        "--circuit-noise", action="store_true",
        help="add the circuit's own noise (resistors and amplifier) to every filter output, "
        "shaped to its computed density at its true level against full scale",
    )  # fmt: skip
    p.add_argument(
        "--no-report", action="store_true",
        help="write the audio and summary.json only (no spectra, figures, HTML)",
    )  # fmt: skip
    p.set_defaults(func=cmd_render)


def _block(text: str) -> int:
    if not text.isdigit() or not 1 <= int(text) <= 2**20:
        raise argparse.ArgumentTypeError(
            f"must be a whole number of frames, 1 to 1048576, got {text}"
        )
    return int(text)


def _seed(text: str) -> int:
    if not text.isdigit():
        raise argparse.ArgumentTypeError(f"must be a whole number >= 0, got {text}")
    return int(text)


def _count(text: str) -> int:
    if not text.isdigit() or int(text) < 2:
        raise argparse.ArgumentTypeError(f"must be a whole number >= 2, got {text}")
    return int(text)


class _ProgressBar(ProgressLine):
    """A one-line bar on a terminal after the first seconds; silent when not a terminal."""

    def __init__(self, stream: TextIO, rate_hz: float) -> None:
        super().__init__(stream)
        self.rate_hz = rate_hz
        self.last = 0.0

    def __call__(self, done: int, total: int) -> None:
        now = time.monotonic()
        if not self.active or now - self.started < PROGRESS_AFTER_S:
            return
        if now - self.last < PROGRESS_EVERY_S and done < total:
            return
        self.last = now
        fraction = done / max(total, 1)
        self.draw(
            fraction,
            f"{100 * fraction:5.1f} %  {done / self.rate_hz:8.1f} of {total / self.rate_hz:.1f} s",
        )


def cmd_render(args: argparse.Namespace) -> int:
    """Run ``filtertwin render``; returns the exit status (0, or 1 when a verdict of
    :func:`filtertwin.checks.verdicts.render_verdicts` fails: fidelity, amplifier swing, PCM
    clip)."""
    from filtertwin.files import recordings

    if isinstance(args.input, list):
        if len(args.input) > 1 or not Path(args.input[0]).is_file():
            from filtertwin.commands.alias_archive import render_each

            return render_each(args, cmd_render)
        args.input = args.input[0]
    info = recordings.inspect(
        args.input, rate_hz=args.rate, column=column(args.column),
        jitter_limit=args.max_jitter / 100,
    )  # fmt: skip

    from filtertwin import examples
    from filtertwin.circuit.design import build_design
    from filtertwin.circuit.spec import load_design
    from filtertwin.digital import render
    from filtertwin.digital.twin import build_twin
    from filtertwin.report import summary

    design = build_design(load_design(examples.resolve(args.design)))
    tolerance = None
    if args.build == "worst":
        from filtertwin.checks.tolerance import run_tolerance, worst_build_design

        tolerance = run_tolerance(design, args.builds, seed=args.seed)
        design = worst_build_design(design, tolerance)
    twin = build_twin(
        design, info.rate_hz, oversampling=args.oversample, resampling=args.resampling
    )
    settings = render.RenderSettings(
        block_frames=args.block, audio_format=args.format, subtype=args.subtype,
        spectra=not args.no_report,
    )  # fmt: skip
    suffix, subtype = render.output_kind(info, settings)
    folder = Path(args.out)
    if folder.exists() and not folder.is_dir():
        raise UserInputError(f"--out {folder} is a file, not a folder; give a folder name")
    plan = render.plan_outputs([f.name for f in twin.filters], folder, suffix)
    reported = [folder / summary.REPORT_NAME, folder / summary.SUMMARY_NAME]
    figure_dir = folder / summary.FIGURES_FOLDER
    reported += [
        figure_dir / f"{name}.png" for name in ("spectra", "response", "tolerance", "crossover")
    ]
    render.refuse_input_overwrite([p.path for p in plan] + reported, info.path)

    from filtertwin.files.outputs import prepare_folder

    made = [figure_dir] if not figure_dir.exists() else []  # deepest first
    made += prepare_folder(folder, "--out")  # one line, exit 2, when it cannot be written
    audio: list[Path] = []
    extra: list[Path] = []  # figures of the checks, drawn here
    try:
        bar = _ProgressBar(sys.stderr, info.rate_hz)
        noise = None
        if args.circuit_noise:
            from filtertwin.circuit.noise import CircuitNoiseSource

            names = [f.name for f in twin.filters]
            noise = CircuitNoiseSource(design, names, info.rate_hz, info.channels, seed=args.seed)
        try:
            result = render.render(
                twin, info, plan, subtype, settings, progress=bar, noise=noise
            )  # fmt: skip
        finally:
            bar.close()
        audio = [f.path for f in result.files]
        sections: list[Any] = []
        extra_summary: dict[str, Any] = {"circuit_noise_added": noise is not None}
        if tolerance is not None:
            extra_summary["tolerance"] = tolerance.to_dict()
            if not args.no_report:
                sections.append(_tolerance_section(tolerance, figure_dir, info.path, extra))
        crossover = _crossover(design)
        if crossover is not None:
            extra_summary["crossover"] = crossover.to_dict()
            if not args.no_report:
                sections.append(_crossover_section(crossover, figure_dir, info.path, extra))
        written = summary.write_render_report(
            folder, result, info, design, twin, build=args.build, extra_sections=sections,
            extra_figures=extra, extra_summary=extra_summary, with_report=not args.no_report,
        )  # fmt: skip
    except BaseException:  # leave nothing of this run behind (the report removes its own)
        _remove(audio + extra, made)
        raise
    _print_summary(result, twin, design, folder, extra + written)
    if noise is not None:
        print(
            "circuit noise: added to every filter output at its computed level (see the "
            "report's 'Circuit noise' table)"
        )
    return _print_verdicts(result, twin)


def _print_verdicts(result: Any, twin: Any) -> int:
    """Print each filter's fidelity, then every verdict of the render; the exit status."""
    from filtertwin.checks import verdicts
    from filtertwin.report.design_text import fidelity_line

    for ft in twin.filters:
        print(f"fidelity of filter '{ft.name}':")
        print(fidelity_line(ft, twin))
    found = verdicts.render_verdicts(result, twin)
    for line in verdicts.lines(found):
        print(line)
    return verdicts.exit_status(found)


def _remove(files: list[Path], folders: list[Path]) -> None:
    """Delete ``files``, then each of ``folders`` (deepest first) that is left empty."""
    for path in files:
        path.unlink(missing_ok=True)
    for folder in folders:
        if folder.is_dir() and not any(folder.iterdir()):
            folder.rmdir()


def _crossover(design: Any) -> Any:
    """The crossover check of a design whose filters are the ways of a crossover, else None."""
    from filtertwin.checks.crossover import check_crossover

    if len(design.filters) < 2:
        return None
    try:
        return check_crossover(design)
    except UserInputError:  # filters that do not cross over (e.g. unrelated candidates)
        return None


def _crossover_section(check: Any, figure_dir: Path, source: Path, written: list[Path]) -> Any:
    """Draw the crossover figure into ``figure_dir`` (noted in ``written``); its section."""
    from filtertwin.report.check_figures import crossover_figure
    from filtertwin.report.summary import crossover_section

    figure_dir.mkdir(exist_ok=True)
    path = crossover_figure(check, figure_dir / "crossover.png", protect=[source])
    written.append(path)
    return crossover_section(check, path)


def _tolerance_section(result: Any, figure_dir: Path, source: Path, written: list[Path]) -> Any:
    """Draw the tolerance envelope into ``figure_dir`` (noted in ``written``); its section."""
    from filtertwin.report.check_figures import tolerance_figure
    from filtertwin.report.summary import tolerance_section

    figure_dir.mkdir(exist_ok=True)
    path = tolerance_figure(result, figure_dir / "tolerance.png", protect=[source])
    written.append(path)
    return tolerance_section(result, path)


def _print_summary(result: Any, twin: Any, design: Any, folder: Path, written: list[Path]) -> None:
    seconds = result.frames / result.rate_hz
    speed = seconds / result.elapsed_s if result.elapsed_s else math.inf
    over = f", twin at {twin.rate_hz:g} Hz ({twin.oversampling}x)" if twin.oversampling > 1 else ""
    print(
        f"rendered {result.source.name} ({seconds:.1f} s, {result.channels} ch, "
        f"{result.rate_hz:g} Hz) through '{design.title}'{over} in {result.elapsed_s:.2f} s "
        f"({speed:.3g}x real time) into {folder}"
    )
    width = max(len(f.path.name) for f in result.files)
    for f in result.files:
        level = f"peak {f.peak_dbfs:+6.1f} dBFS" if math.isfinite(f.peak_dbfs) else "silent"
        note = ""
        if f.over_full_scale:
            kept = "clipped in the file" if (f.subtype or "").startswith("PCM") else "kept (float)"
            note = f"  ({f.over_full_scale} samples over full scale, {kept})"
        print(f"  {f.path.name:<{width}s}  {f.role:<6s}  {level}{note}")
    if written:
        print("  " + ", ".join(Path(p).relative_to(folder).as_posix() for p in written))
    if result.clips:
        for c in result.clips:
            print(
                f"clipping: filter '{c.filter}' stage {c.stage}: {c.samples} samples reached the"
                " amplifier swing"
            )
    else:
        print("clipping: none in the amplifier model")
    rate = f"{twin.rate_hz / 1e3:g} kHz"
    for c in result.slews:
        print(
            f"slewing: filter '{c.filter}' stage {c.stage}: {c.samples} samples (at {rate}) "
            "limited to the amplifier slew rate"
        )
    if not result.slews:
        print("slewing: none in the amplifier model")
    print(SAFETY_LINE)
