"""`filtertwin alias`: does the anti-alias filter protect this ADC from this recording?

Prints the verdict (exit 0 PASS, 1 FAIL), writes the two ADC captures and a figure.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from filtertwin.commands import alias_archive
from filtertwin.commands.options import column, frequency_hz, hz, out_folder
from filtertwin.errors import UserInputError

DEFAULT_OUT = "filtertwin-alias"
DEFAULT_BITS = 16


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
        help="top of the band of interest (default: the filter's corner, at most ADC rate / 2)",
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
    alias_archive.add_options(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from filtertwin import outputs, recordings
    from filtertwin.checks.alias import check_alias
    from filtertwin.design import load
    from filtertwin.report.check_figures import alias_figure

    if alias_archive.wants_archive(args):
        return alias_archive.run(args)
    design = load(args.design)
    adc_rate, band = args.adc_rate, args.band
    info = recordings.inspect(args.recording[0], rate_hz=args.rate, column=column(args.column))
    if info.channels != 1:
        names = ", ".join(info.channel_names)
        raise UserInputError(
            f"{info.path}: has {info.channels} channels ({names}); choose one with --column"
        )
    samples = recordings.read_all(info)[:, 0]
    check, captures = check_alias(
        design, samples, info.rate_hz, adc_rate, filter_name=args.filter, band_hz=band,
        bits=args.bits if args.bits is not None else DEFAULT_BITS, reject_db=args.reject_db,
    )  # fmt: skip

    out = out_folder(args.out)
    protect = [info.path, Path(design.spec.source)]
    stem = info.path.stem
    files = {}
    for label, data in (("without_filter", captures.without_filter),
                        ("with_filter", captures.with_filter)):  # fmt: skip
        name = f"{stem}-adc-{label.replace('_', '-')}"
        if info.kind == "csv":
            path = out / f"{name}.csv"
            outputs.write_csv(path, data, captures.rate_hz, info.channel_names, protect=protect)
        else:
            path = out / f"{name}.wav"
            with outputs.SafeWriter(path, captures.rate_hz, 1, subtype="FLOAT",
                                    protect=protect) as writer:  # fmt: skip
                writer.write(data)
        files[label] = str(path)
    files["figure"] = str(alias_figure(check, out / f"{stem}-alias.png", protect=protect))

    if args.json:
        summary = check.to_dict() | {"recording": str(info.path), "files": files}
        print(json.dumps(summary, indent=2))
    else:
        print(_text(check, info, files))
    return 0 if check.passed else 1


def _text(check: Any, info: Any, files: dict[str, str]) -> str:
    lines = [
        f"anti-alias check of filter '{check.filter_name}'",
        f"recording: {info.path} ({hz(info.rate_hz)}, {info.duration_s:.3f} s, "
        f"{info.channel_names[0]})",
        f"ADC: {hz(check.adc_rate_hz)} (Nyquist {hz(check.adc_rate_hz / 2)}); band of interest "
        f"0 to {hz(check.band_hz)}",
        f"required: {check.required_db:.2f} dB at {hz(check.attenuation_at_hz)} "
        f"(ADC rate - band): {check.requirement}",
        f"attenuation there (analog as-built model): {check.attenuation_db:.2f} dB",
        f"verdict: {check.verdict}, margin {check.margin_db:+.2f} dB",
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
            lines.append(
                f"  {hz(c.source_hz):>11s} {hz(c.alias_hz):>11s} {c.without_filter_db:9.1f} "
                f"{c.with_filter_db:9.1f} {c.filter_db:8.1f}{where}"
            )
    else:
        lines.append("no distinct components above the ADC's Nyquist frequency (only noise)")
    lines.append("")
    lines.append(f"twin oversampling: {check.oversampling}x; ADC captures at "
                 f"{hz(check.capture_rate_hz)}")  # fmt: skip
    lines += [f"wrote {path}" for path in files.values()]
    return "\n".join(lines)
