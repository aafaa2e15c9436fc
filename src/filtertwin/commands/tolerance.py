"""`filtertwin tolerance`: build the design many times with parts drawn within tolerance.

Prints each stage's f0 and Q spread, the yield against a mask and the worst build's parts.
With --out, writes a figure of the envelope. Verdict: the yield against --min-yield
(default 90 %); exit 0 PASS, 1 FAIL, 2 bad input.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from filtertwin.commands.options import frequency_hz, hz
from filtertwin.errors import UserInputError

# the choices and defaults of filtertwin.checks.tolerance, repeated: every start registers
# every command, and importing the check (design, scipy) would add about 0.7 s to each; a test
# checks that they agree
DISTRIBUTIONS = ("uniform", "gaussian")
DEFAULT_RIPPLE_DB = 1.0
DEFAULT_YIELD_PCT = 90.0  # filtertwin.checks.verdicts.DEFAULT_YIELD_TARGET, in percent


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "tolerance",
        help="tolerance builds: response envelope, f0/Q spread, yield and the worst build",
        description=(
            "Build the design N times, each part drawn within its tolerance (uniform, or "
            "Gaussian with the tolerance at 3 sigma); report the response envelope, each "
            "stage's f0 and Q spread, the yield against a mask and the build furthest from "
            "nominal. Default mask per filter: within +/-1 dB of the passband gain up to "
            "0.5 x corner (low-pass; from 2 x corner for a high-pass), and beyond 2 x corner "
            "(0.5 x for a high-pass) at least the nominal attenuation there less 3 dB."
        ),
    )
    p.add_argument("design", help="design file (TOML) or the name of a packaged example")
    p.add_argument("--builds", type=int, required=True, metavar="N", help="number of builds")
    p.add_argument(
        "--distribution", choices=DISTRIBUTIONS, default=DISTRIBUTIONS[0],
        help="uniform within the tolerance (default) or gaussian (tolerance = 3 sigma)",
    )  # fmt: skip
    p.add_argument("--seed", type=int, metavar="S", help="random seed, to repeat a run exactly")
    p.add_argument(
        "--ripple-db", type=float, metavar="X",
        help=f"passband limit, +/- dB around the passband gain (default {DEFAULT_RIPPLE_DB:g})",
    )  # fmt: skip
    p.add_argument("--stop-hz", type=frequency_hz, metavar="F", help="stopband edge frequency")
    p.add_argument("--stop-db", type=float, metavar="Y", help="least stopband attenuation, dB")
    p.add_argument("--filter", metavar="NAME", help="only this filter of the design")
    p.add_argument(
        "--min-yield", type=_percent, default=DEFAULT_YIELD_PCT, metavar="PCT",
        help="verdict: PASS when at least this percentage of builds is inside every mask "
        f"(default {DEFAULT_YIELD_PCT:g})",
    )  # fmt: skip
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.add_argument("--out", metavar="DIR", help="write a figure of the envelope here")
    p.set_defaults(func=run)


def _percent(text: str) -> float:
    try:
        value = float(text.strip().rstrip("%"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a percentage, got {text!r}; e.g. 95") from None
    if not 0 < value <= 100:
        raise argparse.ArgumentTypeError(f"must be above 0 and at most 100, got {text!r}")
    return value


def run(args: argparse.Namespace) -> int:
    from filtertwin.checks import verdicts
    from filtertwin.checks.tolerance import run_tolerance
    from filtertwin.circuit.design import load
    from filtertwin.files import outputs

    design = load(args.design)
    if args.seed is not None and args.seed < 0:
        raise UserInputError(f"--seed {args.seed} must be a whole number >= 0")
    result = run_tolerance(
        design, args.builds, distribution=args.distribution, seed=args.seed,
        ripple_db=args.ripple_db, stop_hz=args.stop_hz,
        stop_db=args.stop_db, filter_name=args.filter,
    )  # fmt: skip
    files = {}
    if args.out:
        from filtertwin.report.check_figures import tolerance_figure

        with outputs.OutputRun(args.out) as written:  # a failure leaves nothing behind
            target = written.folder / f"{Path(design.spec.source).stem}-tolerance.png"
            figure = tolerance_figure(result, target, protect=[design.spec.source])
            files["figure"] = str(written.add(figure))
    found = verdicts.tolerance_verdicts(result.yield_fraction, result.builds, args.min_yield / 100)
    if args.json:
        extra = {
            "design": design.spec.source, "files": files,
            "min_yield": args.min_yield / 100, "verdict": verdicts.overall(found),
        }  # fmt: skip
        print(json.dumps(result.to_dict() | extra, indent=2))
    else:
        print(_text(result, design, files))
        print("\n".join(verdicts.lines(found)))
    return verdicts.exit_status(found)


def _spread(s: Any, fmt: Any) -> str:
    return f"{fmt(s.nominal):>10s} {fmt(s.p1):>10s} .. {fmt(s.p99):<10s} std {fmt(s.std)}"


def _text(result: Any, design: Any, files: dict[str, str]) -> str:
    from filtertwin.circuit.units import format_letter_code

    def q(v: float) -> str:
        return f"{v:.3f}"

    lines = [
        f"tolerance builds of {design.title}",
        f"{result.builds} builds, {result.distribution_note}; "
        f"resistors +/-{100 * result.resistor_tolerance:g} %, "
        f"capacitors +/-{100 * result.capacitor_tolerance:g} %; seed {result.seed} "
        f"(repeat with --seed {result.seed})",
    ]
    for ft in result.filters:
        m = ft.mask
        stops = "; ".join(
            f"at least {s.min_atten_db:.1f} dB down from {hz(s.lo_hz)} to {hz(s.hi_hz)}"
            for s in m.stops
        )
        lines += [
            "",
            f"filter '{ft.name}': yield {100 * ft.yield_fraction:.1f} %; builds deviate up to "
            f"{ft.worst_deviation_db:.2f} dB from nominal",
            f"  mask: within +/-{m.ripple_db:g} dB of {ft.passband_db:+.2f} dB from "
            f"{hz(m.pass_hz[0])} to {hz(m.pass_hz[1])}; {stops}",
        ]
        if not ft.nominal_passes:
            lines.append("  note: the nominal design itself is outside this mask; "
                         "set --ripple-db / --stop-hz / --stop-db to suit it")  # fmt: skip
        lines.append(f"  {'stage':<6s}{'':4s}{'nominal':>10s} {'1 %':>10s} .. 99 %")
        for s in ft.stages:
            lines.append(f"  {s.stage:<6d} f0  {_spread(s.f0_hz, hz)}")
            if s.q is not None:
                lines.append(f"  {'':<6s} Q   {_spread(s.q, q)}")
    lines += [
        "",
        f"yield (every filter inside its mask): {100 * result.yield_fraction:.1f} %",
        f"worst build: number {result.worst_build}, deviating {result.worst_deviation_db:.2f} dB "
        "from nominal; its parts (nominal -> drawn):",
    ]
    checked = {ft.name for ft in result.filters}  # --filter: only that filter's parts
    for filt, parts in zip(design.filters, result.worst_parts, strict=True):
        if filt.name not in checked:
            continue
        for stage, drawn in zip(filt.stages, parts, strict=True):
            nominal = stage.circuit.parts()
            text = "  ".join(
                f"{k} {format_letter_code(nominal[k], k[0])}->{format_letter_code(v, k[0])} "
                f"({100 * (v / nominal[k] - 1):+.1f} %)"
                for k, v in drawn.items()
            )
            lines.append(f"  {filt.name} stage {stage.index}: {text}")
    lines += [f"wrote {path}" for path in files.values()]
    return "\n".join(lines)
