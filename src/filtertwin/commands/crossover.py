"""`filtertwin crossover`: do the ways of a 2- or 3-way crossover add up to a flat sum?

Prints each crossover point, the sum's largest deviation and polarity advice; exit 0 PASS,
1 FAIL. With --out, writes a figure of the ways and their sum.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from filtertwin.commands.options import frequency_hz, hz

# the defaults of filtertwin.checks.crossover, repeated: every start registers every command,
# and importing the check (design, scipy) would add about 0.7 s to each; a test checks that
# they agree
DEFAULT_BAND_HZ = (20.0, 20000.0)
DEFAULT_TOLERANCE_DB = 1.0


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "crossover",
        help="check how the ways of a crossover add up (sum, phase at crossover, polarity)",
        description=(
            "Sum the ways of a 2- or 3-way crossover (the design's filters, ordered by "
            "frequency) as the drivers would add, using the exact analog as-built model with "
            "polarity; report the crossover frequencies, the phase difference there, the "
            "sum's largest deviation from flat, and whether another polarity would be "
            "flatter. Exit status 0 PASS, 1 FAIL, 2 bad input."
        ),
    )
    p.add_argument("design", help="design file (TOML) or the name of a packaged example")
    lo, hi = DEFAULT_BAND_HZ
    p.add_argument(
        "--band", nargs=2, type=frequency_hz, metavar=("LO", "HI"), default=DEFAULT_BAND_HZ,
        help=f"band where the sum must be flat (default {lo:g} Hz to {hi:g} Hz)",
    )  # fmt: skip
    p.add_argument(
        "--tolerance-db", type=float, default=DEFAULT_TOLERANCE_DB, metavar="DB",
        help=f"largest deviation of the sum that passes (default {DEFAULT_TOLERANCE_DB:g} dB)",
    )  # fmt: skip
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.add_argument("--out", metavar="DIR", help="write a figure of the ways and the sum here")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from filtertwin.checks.crossover import check_crossover
    from filtertwin.circuit.design import load

    design = load(args.design)
    lo, hi = args.band
    check = check_crossover(design, band_hz=(lo, hi), tolerance_db=args.tolerance_db)
    files = {}
    if args.out:
        from filtertwin.files import outputs
        from filtertwin.report.check_figures import crossover_figure

        with outputs.OutputRun(args.out) as written:  # a failure leaves nothing behind
            target = written.folder / f"{Path(design.spec.source).stem}-crossover.png"
            path = crossover_figure(check, target, protect=[design.spec.source])
            files["figure"] = str(written.add(path))
    if args.json:
        print(json.dumps(check.to_dict() | {"design": design.spec.source, "files": files},
                         indent=2))  # fmt: skip
    else:
        print(_text(check, design.title, files))
    return 0 if check.passed else 1


def _text(check: Any, title: str, files: dict[str, str]) -> str:
    lo, hi = check.band_hz
    current = check.polarity.in_words(check.polarity.current)
    pol = ", ".join(f"'{n}' {w}" for n, w in current.items())
    lines = [
        f"crossover check of {title}",
        f"ways, low to high: {pol}",
        "",
        f"  {'crossover':>20s} {'at':>11s} {'each way':>9s} {'sum':>8s} {'phase diff':>11s}",
    ]
    for c in check.crossovers:
        pair = f"{c.lower} / {c.upper}"
        lines.append(
            f"  {pair:>20s} {hz(c.f_hz):>11s} {c.level_db:7.2f} dB {c.sum_db:+6.2f} dB "
            f"{c.phase_diff_deg:+9.1f} deg"
        )
    lines += [
        "",
        f"sum, {hz(lo)} to {hz(hi)}: largest deviation {check.max_dev_db:.3f} dB at "
        f"{hz(check.max_dev_at_hz)} (re {check.reference_db:+.2f} dB, the ways' passband gain)",
        f"polarity: {check.polarity.advice()}",
        f"verdict: {check.verdict} (flat within {check.tolerance_db:g} dB)",
    ]
    lines += [f"wrote {path}" for path in files.values()]
    return "\n".join(lines)
