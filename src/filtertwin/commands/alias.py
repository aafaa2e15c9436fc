"""`filtertwin alias`: does the anti-alias filter protect this ADC from this recording?

Prints the verdict (exit 0 PASS, 1 FAIL), writes the two ADC captures and a figure.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from filtertwin.commands import alias_archive
from filtertwin.commands.options import (
    add_max_jitter,
    column,
    frequency_hz,
    hz,
    positive,
)
from filtertwin.errors import UserInputError

DEFAULT_OUT = "filtertwin-alias"
DEFAULT_BITS = 16
DEFAULT_MAX_DROOP_DB = 3.0
DEFAULT_BUILDS = 500
DEFAULT_MIN_YIELD_PCT = 99.0
"""Same as :data:`filtertwin.checks.droop.DEFAULT_MAX_DROOP_DB` (a test keeps them equal; the
parser does not import numpy)."""


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "alias",
        help="check an anti-alias filter: what an ADC captures from a recording, with and "
        "without the filter",
        description=(
            "Sample a recording (made well above the ADC's rate) with an ideal ADC, with and "
            "without the design's filter; report the power that folds into the band of "
            "interest, the strongest aliases, and whether the filter's attenuation at "
            "(ADC rate - band) reaches the ADC's dynamic range (6.02 N + 1.76 dB) or the "
            "rejection given. Exit status 0 PASS, 1 FAIL, 2 bad input."
        ),
    )
    p.add_argument("design", help="design file (TOML) or the name of a packaged example")
    p.add_argument(
        "recording", nargs="+",
        help="WAV/FLAC, CSV (time column or --rate) or NPY (--rate); several files, folders or "
        "patterns check a whole archive",
    )  # fmt: skip
    p.add_argument(
        "--adc-rate", required=True, type=frequency_hz, metavar="HZ", help="the ADC's sample rate"
    )
    need = p.add_mutually_exclusive_group()
    need.add_argument(
        "--bits", type=int, metavar="N",
        help=f"ADC resolution; the filter must reach 6.02 N + 1.76 dB (default {DEFAULT_BITS})",
    )  # fmt: skip
    need.add_argument("--reject-db", type=float, metavar="X", help="required attenuation, dB")
    p.add_argument(
        "--band", type=frequency_hz, metavar="HZ",
        help="top of the band of interest (default: where the filter droops --max-droop, at "
        "most its corner and ADC rate / 2)",
    )  # fmt: skip
    p.add_argument(
        "--max-droop", type=positive(float, "--max-droop"), metavar="DB",
        default=DEFAULT_MAX_DROOP_DB,
        help=f"largest droop (or peaking rise) allowed over the band, dB from the passband "
        f"gain (default "
        f"{DEFAULT_MAX_DROOP_DB:g}: the half-power edge of a passband; an amplitude-accuracy "
        "spec sets it tighter, e.g. 0.1)",
    )  # fmt: skip
    p.add_argument(
        "--out", metavar="DIR", default=DEFAULT_OUT,
        help=f"folder for the captures and the figure (default ./{DEFAULT_OUT}/)",
    )  # fmt: skip
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.add_argument("--filter", metavar="NAME", help="the anti-alias filter (designs with several)")
    p.add_argument(
        "--rate", type=frequency_hz, metavar="HZ",
        help="sample rate of a CSV without time column or NPY",
    )  # fmt: skip
    p.add_argument("--column", metavar="NAME", help="CSV column or audio/NPY channel to read")
    add_max_jitter(p)
    what = p.add_argument_group("what would pass")
    what.add_argument(
        "--suggest", action="store_true",
        help="also search alignments, orders 1-10 and corners for low-pass designs (on this "
        "design's parts and amplifier) that meet the requirement and --max-droop, and print "
        "them fewest amplifiers first",
    )  # fmt: skip
    what.add_argument(
        "--builds", type=positive(int, "--builds"), metavar="N", default=DEFAULT_BUILDS,
        help=f"tolerance builds per suggested design (default {DEFAULT_BUILDS})",
    )  # fmt: skip
    what.add_argument(
        "--min-yield", type=positive(float, "--min-yield"), metavar="PCT",
        default=DEFAULT_MIN_YIELD_PCT,
        help=f"share of builds that must pass for a design to be suggested (default "
        f"{DEFAULT_MIN_YIELD_PCT:g} %%)",
    )  # fmt: skip
    what.add_argument(
        "--save-suggestion", metavar="FILE",
        help="write the first suggested design to FILE (a new design file, never overwritten)",
    )  # fmt: skip
    alias_archive.add_options(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from filtertwin.checks.alias import check_alias
    from filtertwin.circuit.design import load
    from filtertwin.files import outputs, recordings
    from filtertwin.report.check_figures import alias_figure

    if alias_archive.wants_archive(args):
        return alias_archive.run(args)
    design = load(args.design)
    adc_rate, band = args.adc_rate, args.band
    info = recordings.inspect(
        args.recording[0], rate_hz=args.rate, column=column(args.column),
        jitter_limit=args.max_jitter / 100,
    )  # fmt: skip
    if info.channels != 1:
        names = ", ".join(info.channel_names)
        raise UserInputError(
            f"{info.path}: has {info.channels} channels ({names}); choose one with --column"
        )
    samples = recordings.read_all(info)[:, 0]
    check, captures = check_alias(
        design, samples, info.rate_hz, adc_rate, filter_name=args.filter, band_hz=band,
        bits=args.bits if args.bits is not None else DEFAULT_BITS, reject_db=args.reject_db,
        max_droop_db=args.max_droop,
    )  # fmt: skip

    protect = [info.path, Path(design.spec.source)]
    stem = info.path.stem
    files = {}
    with outputs.OutputRun(args.out) as written:  # a failure or Ctrl-C leaves nothing behind
        out = written.folder
        for label, data in (("without_filter", captures.without_filter),
                            ("with_filter", captures.with_filter)):  # fmt: skip
            name = f"{stem}-adc-{label.replace('_', '-')}"
            if info.kind == "csv":
                path = out / f"{name}.csv"
                outputs.write_csv(path, data, captures.rate_hz, info.channel_names,
                                  protect=protect)  # fmt: skip
            else:
                path = out / f"{name}.wav"
                with outputs.SafeWriter(path, captures.rate_hz, 1, subtype="FLOAT",
                                        protect=protect) as writer:  # fmt: skip
                    writer.write(data)
            files[label] = str(written.add(path))  # noted once written: never an input
        figure = alias_figure(check, out / f"{stem}-alias.png", protect=protect)
        files["figure"] = str(written.add(figure))

    suggestions = _suggest(args, design, check, protect) if args.suggest else None
    if args.json:
        summary = check.to_dict() | {
            "recording": str(info.path),
            "column": info.channel_names[0],
            "files": files,
        }
        if suggestions is not None:
            summary["suggestions"] = [x.to_dict() for x in suggestions[0]]
            summary["saved_design"] = suggestions[1]
        print(json.dumps(summary, indent=2))
    else:
        print(_text(check, info, files))
        if suggestions is not None:
            print(_suggestion_text(check, args, *suggestions))
    return 0 if check.passed else 1


def _text(check: Any, info: Any, files: dict[str, str]) -> str:
    d = check.droop
    lines = [
        f"anti-alias check of filter '{check.filter_name}'",
        f"recording: {info.path} ({hz(info.rate_hz)}, {info.duration_s:.3f} s, "
        f"column {info.channel_names[0]})",
        f"ADC: {hz(check.adc_rate_hz)} (Nyquist {hz(check.adc_rate_hz / 2)}); band of interest "
        f"0 to {hz(check.band_hz)}",
        f"required: {check.required_db:.2f} dB at {hz(check.attenuation_at_hz)} "
        f"(ADC rate - band): {check.requirement}",
        f"attenuation there (analog as-built model): {check.attenuation_db:.2f} dB, "
        f"margin {check.margin_db:+.2f} dB",
        f"band edge {hz(d.band_hz)}: gain {d.edge_gain_db:+.2f} dB, phase "
        f"{d.edge_phase_deg:.1f} deg, group delay {_seconds(d.edge_delay_s)}; largest droop "
        f"{d.max_droop_db:.2f} dB at {hz(d.max_droop_at_hz)} (limit {d.limit_db:g} dB)",
        f"verdict: {check.verdict}" + "".join(f"; {r}" for r in check.reasons()),
        f"power folding into the band, re in-band signal: without filter "
        f"{check.aliased_without_db:.1f} dB, with filter {check.aliased_with_db:.1f} dB",
        "",
    ]
    if check.components:
        lines.append("strongest components above the ADC's Nyquist frequency (dB re in-band "
                     "signal; filter = analog model's gain there):")  # fmt: skip
        lines.append(f"  {'source':>11s} {'lands at':>11s} {'without':>9s} {'with':>9s} "
                     f"{'filter':>8s}")  # fmt: skip
        for c in check.components:
            where = "  in band" if c.in_band else ""
            note = f"  ({c.note}; model: {c.expected_with_db:.1f})" if c.note else ""
            lines.append(
                f"  {hz(c.source_hz):>11s} {hz(c.alias_hz):>11s} {c.without_filter_db:9.1f} "
                f"{c.with_filter_db:9.1f} {c.filter_db:8.1f}{where}{note}"
            )
    else:
        lines.append("no distinct components above the ADC's Nyquist frequency (only noise)")
    lines.append("")
    sp = check.spectrum
    short = " (as fine as the recording's length allows)" if sp.limited_by_length else ""
    lines.append(f"spectra: {hz(sp.bin_hz)} bins{short}, Kaiser window with sidelobes "
                 f"{sp.sidelobe_db:.0f} dB down")  # fmt: skip
    lines.append(check.twin.describe())
    lines.append(f"ADC captures at {hz(check.capture_rate_hz)}")
    lines += [f"wrote {path}" for path in files.values()]
    return "\n".join(lines)


def _suggest(
    args: argparse.Namespace, design: Any, check: Any, protect: list[Path]
) -> tuple[tuple[Any, ...], str | None]:
    """The search, and the first design written where asked."""
    from filtertwin.checks.suggest import design_toml, suggest_designs, write_design

    if args.min_yield > 100:
        raise UserInputError(f"--min-yield {args.min_yield:g} is above 100 %; give e.g. 99")
    found = suggest_designs(
        check.adc_rate_hz, check.band_hz, check.required_db, max_droop_db=args.max_droop,
        base=design, builds=args.builds, min_yield=args.min_yield / 100,
    )  # fmt: skip
    saved = None
    if args.save_suggestion and found:
        text = design_toml(found[0], design)
        saved = str(write_design(args.save_suggestion, text, tuple(protect)))
    return found, saved


def _suggestion_text(check: Any, args: argparse.Namespace, found: Any, saved: str | None) -> str:
    head = (
        f"\nwhat would pass: low-pass designs on this design's parts and amplifier with "
        f"{check.required_db:.1f} dB at {hz(check.attenuation_at_hz)}, droop <= "
        f"{args.max_droop:g} dB to {hz(check.band_hz)}, and {args.min_yield:g} % of "
        f"{args.builds} tolerance builds passing"
    )
    if not found:
        return (
            f"{head}:\n  none up to order 10 with these parts; raise the ADC rate, narrow "
            "--band, allow more droop (--max-droop) or widen the part ranges"
        )
    lines = [head + " (fewest amplifiers first, then margin):"]
    lines.append(f"  {'alignment':<18s} {'order':>5s} {'corner':>11s} {'amps':>4s} "
                 f"{'atten dB':>8s} {'margin':>7s} {'droop':>6s} {'yield':>6s}")  # fmt: skip
    for s in found:
        lines.append(
            f"  {s.label:<18s} {s.order:5d} {hz(s.corner_hz):>11s} {s.amplifiers:4d} "
            f"{s.attenuation_db:8.1f} {s.margin_db:+7.1f} {s.droop_db:6.2f} "
            f"{100 * s.yield_fraction:5.1f}%"
            + ("" if s.topology == "unity" else f"  ({s.topology})")
        )
    if saved:
        lines.append(f"wrote {saved} (the first design): try it with filtertwin design {saved}")
    elif not args.save_suggestion:
        lines.append("(--save-suggestion FILE writes the first one as a design file)")
    return "\n".join(lines)


def _seconds(value_s: float) -> str:
    from filtertwin.circuit.units import format_si

    return format_si(value_s, "s", 4)
