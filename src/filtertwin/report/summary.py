"""The report of a render: figures, report.html and summary.json in the output folder.

:func:`write_render_report` is the one entry point the ``render`` command uses. The pieces
are public for scripts and for the checks: :func:`summary_dict` (the JSON content),
:func:`design_sections` (stage and parts tables of any design) and :func:`render_sections`.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from filtertwin import __version__
from filtertwin.circuit import units
from filtertwin.circuit.design import Design
from filtertwin.circuit.noise import DesignNoise, design_noise
from filtertwin.digital.render import RenderResult, WrittenFile
from filtertwin.digital.twin import FIDELITY_TOL_DB, FIDELITY_TOL_DEG, Twin
from filtertwin.files.outputs import atomic_path
from filtertwin.files.recordinginfo import RecordingInfo
from filtertwin.report import figures
from filtertwin.report.design_text import BOM_COLUMNS, bom_rows, design_dict, noise_dict
from filtertwin.report.html import CAUTION, ReportSection, write_html

if TYPE_CHECKING:
    from filtertwin.checks.crossover import CrossoverCheck
    from filtertwin.checks.tolerance import ToleranceResult

__all__ = [
    "crossover_section",
    "tolerance_section",
    "design_sections",
    "render_sections",
    "summary_dict",
    "write_json",
    "write_render_report",
]

FIGURES_FOLDER = "figures"
REPORT_NAME = "report.html"
SUMMARY_NAME = "summary.json"
_PARTS = ("R1", "R2", "C1", "C2", "RF", "RG")


def _dbfs(value: float) -> float | None:
    return 20 * math.log10(value) if value > 0 else None


def _dbfs_text(value: float) -> str:
    return f"{20 * math.log10(value):+.1f}" if value > 0 else "silent"


def _relative(path: Path, folder: Path) -> str:
    try:
        return Path(os.path.relpath(path, folder)).as_posix()
    except ValueError:  # another drive
        return str(path)


def _file_dict(f: WrittenFile, folder: Path) -> dict[str, Any]:
    return {
        "role": f.role,
        "name": f.name,
        "path": _relative(f.path, folder),
        "frames": f.frames,
        "channels": f.channels,
        "subtype": f.subtype,
        "peak_dbfs": _dbfs(max(f.peak)),
        "peak_dbfs_per_channel": [_dbfs(p) for p in f.peak],
        "samples_over_full_scale": f.over_full_scale,
    }


def summary_dict(
    result: RenderResult,
    info: RecordingInfo,
    design: Design,
    twin: Twin,
    folder: Path,
    figure_paths: Sequence[Path] = (),
    *,
    build: str = "nominal",
    extra: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Everything about a render, JSON-ready (SI units, paths relative to ``folder``).

    Parameters
    ----------
    result : RenderResult
        From :func:`filtertwin.digital.render.render`.
    info : RecordingInfo
        The input.
    design, twin
        What was rendered through.
    folder : Path
        The output folder; file paths are given relative to it.
    figure_paths : sequence of Path
        Figures written.
    build : str
        ``"nominal"`` or ``"worst"`` (the parts the design was rendered with).
    extra : dict, optional
        More top-level entries (e.g. a tolerance analysis).

    Returns
    -------
    dict
        Keys: ``tool``, ``version``, ``design``, ``input``, ``twin``, ``render``, ``files``,
        ``figures``, ``report``, ``clipping``, ``caution`` (and those of ``extra``). Peak
        levels are dBFS (None for silence).
    """
    fidelity = {
        ft.name: {
            "max_db": ft.fidelity.max_db,
            "max_deg": ft.fidelity.max_deg,
            "at_hz": ft.fidelity.at_hz,
            "band_hz": list(ft.fidelity.band_hz),
            "sections_db": ft.fidelity.sections_db,
            "resampling_db": ft.fidelity.resampling_db,
            "within_tolerance": ft.fidelity.within(FIDELITY_TOL_DB, FIDELITY_TOL_DEG),
        }
        for ft in twin.filters
    }
    out: dict[str, Any] = {
        "tool": "filtertwin render",
        "version": __version__,
        "design": {"title": design.title, "source": str(design.spec.source), "build": build},
        "input": {
            "path": str(info.path),
            "kind": info.kind,
            "rate_hz": info.rate_hz,
            "channels": info.channels,
            "channel_names": list(info.channel_names),
            "frames": info.frames,
            "duration_s": info.duration_s,
            "subtype": info.subtype,
        },
        "twin": {
            "rate_hz": twin.rate_hz,
            "oversampling": twin.oversampling,
            "resampling": twin.resampling if twin.oversampling > 1 else None,
            "fidelity": fidelity,
        },
        "render": {
            "elapsed_s": result.elapsed_s,
            "real_time_factor": info.duration_s / result.elapsed_s if result.elapsed_s else None,
        },
        "files": [_file_dict(f, folder) for f in result.files],
        "figures": [_relative(p, folder) for p in figure_paths],
        "report": None,
        "summary": SUMMARY_NAME,
        "clipping": [
            {"filter": c.filter, "stage": c.stage, "samples": c.samples} for c in result.clips
        ],
        "slewing": [
            {"filter": c.filter, "stage": c.stage, "samples": c.samples, "at_rate_hz": twin.rate_hz}
            for c in result.slews
        ],
        "caution": CAUTION,
    }
    out.update(extra or {})
    return out


def write_json(
    path: str | os.PathLike[str], data: Any, *, protect: Iterable[str | os.PathLike[str]] = ()
) -> Path:
    """Write ``data`` as indented UTF-8 JSON under a temporary name, then rename it."""
    text = json.dumps(data, indent=2, allow_nan=False) + "\n"
    with atomic_path(path, protect=protect) as temporary:
        temporary.write_text(text, encoding="utf-8")
    return Path(path)


def design_sections(design: Design, twin: Twin | None = None) -> list[ReportSection]:
    """One section per filter: its stage table (target and as built) and its parts table.

    Built from :func:`filtertwin.report.design_text.design_dict` (SI units), so the report
    shows what ``filtertwin design --json`` prints.
    """
    data = design_dict(design, twin)
    sections = [overview_section(design)]
    for f in data["filters"]:
        stage_rows = [_stage_row(s) for s in f["stages"]]
        parts_rows = [
            [str(s["index"])] + [_part(name, s["parts"].get(name)) for name in _PARTS]
            for s in f["stages"]
        ]
        gain_db = 20 * math.log10(abs(f["passband_gain"]))  # from design_dict: plain data
        paragraphs = [
            f"{f['response']}, {f['description']}; passband gain {gain_db:+.2f} dB"
            + (", polarity inverted" if f["polarity"] < 0 else "")
        ]
        sections.append(
            ReportSection(
                f"Filter '{f['name']}': stages and parts",
                paragraphs,
                tables=[(_STAGE_HEADER, stage_rows), (("stage", *_PARTS), parts_rows)],
            )
        )
    sections.append(parts_list_section(design))
    return sections


def overview_section(design: Design) -> ReportSection:
    """The amplifier, the part series, tolerances and ranges, and every design warning."""
    amp = design.amplifier
    sp = design.spec.parts
    r_lo, r_hi = sp.resistor_range_ohm
    c_lo, c_hi = sp.capacitor_range_f
    paragraphs = [
        "Amplifier: "
        + (
            f"{amp.description}, output swing +/-{amp.swing_v:g} V, open-loop output "
            f"resistance {amp.output_resistance_ohm:g} ohm"
            if amp
            else "ideal (no gain-bandwidth, swing or output-resistance limits)"
        ),
        f"Parts: resistors {sp.resistor_series} +/-{100 * sp.resistor_tolerance:g} % "
        f"({units.format_letter_code(r_lo, 'R')} to {units.format_letter_code(r_hi, 'R')}), "
        f"gain resistors {sp.gain_series}, capacitors {sp.capacitor_series} "
        f"+/-{100 * sp.capacitor_tolerance:g} % ({units.format_letter_code(c_lo, 'C')} to "
        f"{units.format_letter_code(c_hi, 'C')}); full scale {design.spec.full_scale_v:g} V.",
    ]
    warnings = [f"Warning: {w}" for w in design.warnings] or ["Warnings: none."]
    return ReportSection("Design: amplifier, parts and warnings", paragraphs + warnings)


def parts_list_section(design: Design) -> ReportSection:
    """The parts list, as ``design --bom`` writes it."""
    columns = [c for c in BOM_COLUMNS if c != "value_si"]
    rows = [[row[c] for c in columns] for row in bom_rows(design)]
    return ReportSection(
        "Parts list",
        [
            "Every part, as `filtertwin design --bom FILE.csv` writes it (designator: filter "
            "number . stage . part)."
        ],  # fmt: skip
        tables=[(tuple(columns), rows)],
    )


_STAGE_HEADER = (
    "stage", "type", "topology", "target f0", "target Q", "built f0", "built Q",
    "f0 error %", "Q error %", "gain K", "internal peak dB", "clips at input dBFS",
)  # fmt: skip


def _stage_row(s: dict[str, Any]) -> list[str]:
    target, built, err = s["target"], s["built"], s.get("error_pct")
    kind = ("low-pass " if s["response"] == "lowpass" else "high-pass ") + str(s["order"])
    clip = s["clip_input_dbfs"]
    return [
        str(s["index"]),
        kind,
        s["topology"],
        units.format_si(target["f0_hz"], "Hz") if target else "given by parts",
        _q(target["q"]) if target else "",
        units.format_si(built["f0_hz"], "Hz"),
        _q(built["q"]),
        f"{err['f0']:+.2f}" if err else "",
        f"{err['q']:+.2f}" if err and err["q"] is not None else "",
        f"{built['gain']:.3f}",
        f"{s['peak_gain_db']:+.2f}",
        "" if clip is None else f"{clip:+.1f}",
    ]


def _q(q: float | None) -> str:
    return "-" if q is None else f"{q:.3f}"


def _part(name: str, value: float | None) -> str:
    return "-" if value is None else units.format_letter_code(value, name[0])


def render_sections(
    result: RenderResult,
    info: RecordingInfo,
    design: Design,
    twin: Twin,
    folder: Path,
    figure_paths: dict[str, Path],
    *,
    build: str = "nominal",
    extra_sections: Sequence[ReportSection] = (),
) -> list[ReportSection]:
    """Sections about the render: input and twin, checks with verdicts, files, figures.

    ``extra_sections`` (e.g. a tolerance analysis) come right after the checks.
    """
    what = "worst build of the tolerance analysis" if build == "worst" else "nominal parts"
    source = ReportSection(
        "Input and twin",
        [
            f"{info.path.name}: {info.kind}, {info.channels} channel(s), "
            f"{units.format_si(info.rate_hz, 'Hz')}, {info.frames} frames "
            f"({info.duration_s:.3f} s). Rendered with the {what}, twin at "
            f"{units.format_si(twin.rate_hz, 'Hz')} ({twin.oversampling}x oversampling, "
            f"{twin.resampling_words()}), in {result.elapsed_s:.2f} s.",
        ],
    )
    level = "dBFS" if info.kind == "audio" else "dB re 1 unit"
    files = ReportSection(
        "Files written",
        [f"Peak levels are sample peaks in {level} (full scale = 1)."],
        tables=[(
            ("file", "role", "channels", "frames", "format", f"peak {level} per channel",
             "samples over full scale"),
            [(_relative(f.path, folder), f.role, f.channels, f.frames, f.subtype or "CSV",
              " / ".join(_dbfs_text(p) for p in f.peak), f.over_full_scale)
             for f in result.files],
        )],
    )  # fmt: skip
    checks = ReportSection(
        "Checks",
        [
            f"Twin fidelity passes within {FIDELITY_TOL_DB:g} dB and {FIDELITY_TOL_DEG:g} degrees"
            " of the analog model where it is within 60 dB of its peak. The amplifier model"
            " limits each stage output to the amplifier's swing and its rate of change to the"
            " slew rate (counted at the twin's rate); limited samples are listed.",
        ],
        tables=[(("check", "filter", "result", "verdict"), _check_rows(result, twin))],
    )
    sections = [source, checks, *extra_sections, files]
    if "spectra" in figure_paths:
        sections.append(
            ReportSection(
                "Spectra before and after",
                ["Welch power spectral density of the input and of every output, averaged"
                 " over channels, and each output relative to the input."],
                figures=[figure_paths["spectra"]],
                captions=["Top: power spectral density (Welch). Bottom: output over input."],
            )
        )  # fmt: skip
    if "response" in figure_paths:
        sections.append(
            ReportSection(
                "Analog model and digital twin",
                ["Exact analog response of the parts with the amplifier model against the"
                 " digital twin as a render plays it (its sections and, when oversampled, the"
                 " resampling filters around them), up to the input's Nyquist frequency."],
                figures=[figure_paths["response"]],
                captions=["Analog model solid, twin dashed; bottom right: twin error in dB."],
            )
        )  # fmt: skip
    return sections + design_sections(design, twin)


def _check_rows(result: RenderResult, twin: Twin) -> list[tuple[str, str, str, str]]:
    from filtertwin.checks import verdicts  # the same verdicts the terminal prints and exits on

    return verdicts.rows(verdicts.render_verdicts(result, twin))


def crossover_section(check: CrossoverCheck, figure: Path | None = None) -> ReportSection:
    """The crossover check of a rendered multi-way design: crossover points, sum, polarity."""
    rows = [
        (f"{c.lower} / {c.upper}", f"{c.f_hz:.1f}", f"{c.level_db:+.2f}", f"{c.sum_db:+.2f}",
         f"{c.phase_diff_deg:+.1f}")
        for c in check.crossovers
    ]  # fmt: skip
    lo, hi = check.band_hz
    return ReportSection(
        f"Crossover check: {check.verdict}",
        [
            f"The ways summed (analog as-built model, polarity included) deviate at most "
            f"{check.max_dev_db:.3f} dB from {check.reference_db:+.2f} dB between {lo:g} and "
            f"{hi:g} Hz (at {check.max_dev_at_hz:.0f} Hz); the verdict allows "
            f"{check.tolerance_db:g} dB.",
            f"Polarity: {check.polarity.advice()}",
        ],
        tables=[(("ways", "crossover Hz", "each way dB", "sum dB", "phase difference deg"), rows)],
        figures=[figure] if figure is not None else [],
        captions=["Each way, their sum, and the phase of each way."],
    )


def tolerance_section(result: ToleranceResult, figure: Path | None = None) -> ReportSection:
    """The tolerance analysis behind a worst-build render: yield per filter and the envelope.

    Parameters
    ----------
    result : filtertwin.checks.tolerance.ToleranceResult
        The analysis whose worst build was rendered.
    figure : Path, optional
        Its envelope figure (``filtertwin.report.check_figures.tolerance_figure``).
    """
    dist = "uniform" if result.distribution == "uniform" else "Gaussian (tolerance = 3 sigma)"
    rows = [
        (ft.name, f"{100 * ft.yield_fraction:.1f} %", f"{ft.worst_deviation_db:.2f}",
         "yes" if ft.nominal_passes else "no")
        for ft in result.filters
    ]  # fmt: skip
    return ReportSection(
        "Tolerance builds (the rendered build is the worst)",
        [
            f"{result.builds} builds, parts drawn {dist} within R +/-"
            f"{100 * result.resistor_tolerance:g} % and C +/-{100 * result.capacitor_tolerance:g}"
            f" %, seed {result.seed}. Rendered: build {result.worst_build}, the build furthest"
            f" from nominal ({result.worst_deviation_db:.2f} dB). Yield of the whole design"
            f" (every filter inside its mask): {100 * result.yield_fraction:.1f} %.",
        ],
        tables=[(("filter", "yield", "worst deviation dB", "nominal inside mask"), rows)],
        figures=[figure] if figure is not None else [],
        captions=["Envelope of the builds' magnitude response, the nominal and the worst build."],
    )


def noise_section(noise: DesignNoise) -> ReportSection:
    """The circuit's noise at every output, as a table (see :mod:`filtertwin.circuit.noise`)."""
    lo, hi = noise.band_hz
    weighting = ", A-weighted figures per IEC 61672-1" if noise.weighted else ""
    text = (
        f"Output noise of the circuit from {units.format_si(lo, 'Hz', 3)} to "
        f"{units.format_si(hi, 'Hz', 3)}{weighting}: every resistor's thermal noise 4kTR at "
        f"{noise.temperature_k - 273.15:g} C and the amplifier's voltage and current noise, "
        "through each stage's node equations and the stages after it. dBFS: a full-scale sine "
        "is 0 dBFS. SNR: a full-scale input sine in the passband over the noise. Dynamic "
        "range: the largest output no stage clips at over the noise."
    )
    rows = []
    for n in (*noise.filters, *(() if noise.sum is None else (noise.sum,))):
        rows.append((
            n.name, units.format_si(n.rms_v, "V", 4),
            "-" if n.rms_a_v is None else units.format_si(n.rms_a_v, "V", 4),
            _with_weighted(n.level_dbfs, n.level_a_dbfs), _with_weighted(n.snr_db, n.snr_a_db),
            "-" if n.dynamic_range_db is None else f"{n.dynamic_range_db:.1f}",
            f"{n.stage_words()} ({100 * n.dominant_stage_share:.0f} %)",
            f"{n.source_words()} ({100 * n.dominant_source_share:.0f} %)",
        ))  # fmt: skip
    header = (
        "output", "noise rms", "A-weighted", "dBFS", "SNR dB", "dynamic range dB",
        "largest stage", "largest source",
    )  # fmt: skip
    return ReportSection("Circuit noise", [text], tables=[(header, rows)])


def _with_weighted(value: float, weighted: float | None) -> str:
    return f"{value:.1f}" + ("" if weighted is None else f" (A {weighted:.1f})")


def noise_summary(noise: DesignNoise) -> dict[str, Any]:
    """The noise figures for ``summary.json`` (see ``design --json``)."""
    return {
        "temperature_k": noise.temperature_k,
        "band_hz": list(noise.band_hz),
        "a_weighted": noise.weighted,
        "filters": {n.name: noise_dict(n) for n in noise.filters},
        "sum": None if noise.sum is None else noise_dict(noise.sum),
    }


def write_render_report(
    folder: Path,
    result: RenderResult,
    info: RecordingInfo,
    design: Design,
    twin: Twin,
    *,
    build: str = "nominal",
    extra_sections: Sequence[ReportSection] = (),
    extra_figures: Sequence[Path] = (),
    extra_summary: dict[str, Any] | None = None,
    with_report: bool = True,
) -> list[Path]:
    """Write the figures, ``report.html`` and ``summary.json`` of a render into ``folder``.

    Parameters
    ----------
    folder : Path
        The output folder (exists).
    result, info, design, twin
        The render and what it ran on.
    build : str
        ``"nominal"`` or ``"worst"``.
    extra_sections : sequence of ReportSection
        Added after the checks (e.g. a tolerance analysis).
    extra_figures : sequence of Path
        Figures already written by the caller, listed in the summary.
    extra_summary : dict, optional
        Added to ``summary.json``.
    with_report : bool
        False writes only ``summary.json`` (no figures, no HTML).

    Returns
    -------
    list of Path
        Every file written, ``summary.json`` last. On an error, those written are removed.
    """
    noise = design_noise(design, twin.filters[0].fidelity.band_hz if twin.filters else None)
    extra_sections = [*extra_sections, noise_section(noise)]
    extra_summary = {**(extra_summary or {}), "noise": noise_summary(noise)}
    written: list[Path] = []
    figure_folder = folder / FIGURES_FOLDER
    made_folder = with_report and not figure_folder.exists()
    try:
        shown: dict[str, Path] = {}
        if with_report:
            figure_folder.mkdir(exist_ok=True)
            shown = _figures(figure_folder, result, info, design, twin, written)
            sections = render_sections(
                result, info, design, twin, folder, shown, build=build,
                extra_sections=extra_sections,
            )  # fmt: skip
            title = f"{design.title}: render of {info.path.name}"
            written.append(write_html(folder / REPORT_NAME, title, sections, protect=[info.path]))
        data = summary_dict(
            result, info, design, twin, folder, [*shown.values(), *extra_figures],
            build=build, extra=extra_summary,
        )  # fmt: skip
        data["report"] = REPORT_NAME if with_report else None
        written.append(write_json(folder / SUMMARY_NAME, data, protect=[info.path]))
    except BaseException:
        for path in written:
            path.unlink(missing_ok=True)
        if made_folder and figure_folder.is_dir() and not any(figure_folder.iterdir()):
            figure_folder.rmdir()
        raise
    return written


def _figures(
    where: Path,
    result: RenderResult,
    info: RecordingInfo,
    design: Design,
    twin: Twin,
    written: list[Path],
) -> dict[str, Path]:
    shown: dict[str, Path] = {}
    if result.spectra:
        labels = ["input (before)"] + [f.name for f in result.files[1:]]
        unit = "FS" if info.kind == "audio" else "unit"
        path = figures.spectra_figure(
            where / "spectra.png", list(zip(labels, result.spectra, strict=True)),
            f"Spectra of {info.path.name} before and after\n{design.title}", unit=unit,
            twin=twin,
        )  # fmt: skip
        written.append(path)
        shown["spectra"] = path
    path = figures.response_figure(
        where / "response.png", design, twin, f"{design.title}: analog model and digital twin"
    )
    written.append(path)
    shown["response"] = path
    return shown
