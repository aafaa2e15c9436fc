"""Command line: argument parsing, exit codes and printing. No computation lives here.

Exit status: 0 success, 1 a check failed (a verdict of FAIL), 2 bad input (one line on
stderr, no traceback).
"""

from __future__ import annotations

import argparse
import csv
import json
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any, NoReturn

from filtertwin import __version__
from filtertwin.commands.options import add_resampling, frequency_hz, oversampling
from filtertwin.digital.factors import FACTOR_WORDS
from filtertwin.errors import UserInputError

SAFETY_NOTE = (
    "Safety: loud playback harms hearing and drivers, and full-range or low-frequency signal "
    "destroys tweeters. Start quiet. Mains-powered builds follow local electrical codes."
)


def cmd_design(args: argparse.Namespace) -> int:
    from filtertwin.circuit.design import load
    from filtertwin.circuit.noise import design_noise
    from filtertwin.digital.twin import build_twin
    from filtertwin.files.outputs import atomic_path
    from filtertwin.report.design_text import BOM_COLUMNS, bom_rows, design_dict, design_table

    design = load(args.design)
    twin = (
        build_twin(design, args.rate, oversampling=args.oversample, resampling=args.resampling)
        if args.rate
        else None
    )
    noise = design_noise(design, noise_band(args.noise_band, args.rate))
    if args.bom:
        with atomic_path(args.bom, protect=[design.spec.source]) as tmp:
            with open(tmp, "w", encoding="utf-8", newline="") as fh:
                writer = csv.DictWriter(fh, fieldnames=BOM_COLUMNS, lineterminator="\n")
                writer.writeheader()
                writer.writerows(bom_rows(design))
    if args.json:
        print(json.dumps(design_dict(design, twin, noise), indent=2))
    else:
        print(design_table(design, twin, noise))
        if args.bom:
            print(f"\nparts list written to {args.bom}")
    return 0


def noise_band(given: list[float] | None, rate_hz: float | None) -> tuple[float, float] | None:
    """The band of the noise figures: as given, the twin's band at a sensor rate, or None
    (the audio band)."""
    from filtertwin.digital.twin import default_band_hz
    from filtertwin.errors import UserInputError

    if given:
        lo, hi = given
        if lo >= hi:
            raise UserInputError(
                f"--noise-band {lo:g} {hi:g}: the low end is not below the high end; swap them"
            )
        return lo, hi
    if rate_hz and rate_hz < 32000:
        return default_band_hz(rate_hz)
    return None


def cmd_examples(args: argparse.Namespace) -> int:
    from filtertwin import examples

    if args.copy:
        for path in examples.copy_to(Path(args.copy)):
            print(f"wrote {path}")
        return 0
    print(examples.INVENTED_NOTE)
    for name, summary in examples.listing():
        print(f"  {name:<26s} {summary}")
    print("\nuse a name wherever a design file goes, e.g. `filtertwin design bookshelf-2way`;")
    print("`filtertwin examples --copy DIR` copies the files to edit them.")
    return 0


class OneLineParser(argparse.ArgumentParser):
    """An argument parser whose errors are one line (what, which option, see --help), exit 2."""

    def error(self, message: str) -> NoReturn:
        self.exit(2, f"{self.prog}: {message}; see '{self.prog} --help'\n")


def build_parser() -> argparse.ArgumentParser:
    parser = OneLineParser(
        prog="filtertwin",
        description=(
            "Design Sallen-Key active filters with real parts, model the circuit as built, "
            "and hear or measure it on your own recordings through a digital twin."
        ),
        epilog=SAFETY_NOTE,
    )
    parser.add_argument("--version", action="version", version=f"filtertwin {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("design", help="stages, parts and as-built response of a design file")
    p.add_argument("design", help="design file (TOML) or the name of a packaged example")
    p.add_argument("--json", action="store_true", help="print JSON (SI units) instead of tables")
    p.add_argument("--bom", metavar="FILE.csv", help="write the parts list as CSV")
    p.add_argument(
        "--rate", type=frequency_hz, help="also build the digital twin at this rate (Hz)"
    )
    p.add_argument(
        "--oversample",
        type=oversampling,
        default=1,
        help=f"twin oversampling: {FACTOR_WORDS} or auto",
    )
    p.add_argument(
        "--noise-band", nargs=2, type=frequency_hz, metavar=("LO", "HI"),
        help="band of the noise figures (default 20 Hz to 20 kHz, also A-weighted; with a "
        "--rate below 32 kHz, the twin's band)",
    )  # fmt: skip
    add_resampling(p)
    p.set_defaults(func=cmd_design)

    p = sub.add_parser("examples", help="list the packaged example designs")
    p.add_argument("--copy", metavar="DIR", help="copy the example files into DIR")
    p.set_defaults(func=cmd_examples)

    for register in _extra_commands():
        register(sub)
    return parser


def _extra_commands() -> list[Callable[[Any], None]]:
    """Commands that live in their own modules register themselves here."""
    from filtertwin import commands

    return commands.registrars()


def main(argv: Sequence[str] | None = None) -> int:
    from filtertwin.digital.numbacache import choose_cache_dir

    notice = choose_cache_dir()  # before any numba import
    if notice:
        print(f"filtertwin: {notice}", file=sys.stderr)
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as done:  # --help, --version, or a bad option (one line printed)
        return int(done.code or 0)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args))
    except UserInputError as exc:
        print(f"filtertwin: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("filtertwin: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader went away (e.g. `| head`): stop quietly, as command-line tools do
        sys.stderr.close()
        return 0
    except OSError as exc:  # a file the commands did not foresee: still one line, exit 2
        if exc.filename is None:
            raise
        why = exc.strerror or type(exc).__name__
        print(f"filtertwin: {exc.filename}: {why}; check the path and that you may use it",
              file=sys.stderr)  # fmt: skip
        return 2
