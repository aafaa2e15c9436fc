"""Pieces shared by the sub-commands: option types (argparse ``type=`` functions), the
output folder and frequencies in printed text.

A bad value becomes one line through the parser's ``error`` (see ``cli.OneLineParser``):
what is wrong with which option, and how to write it. Heavy modules are imported inside the
functions, so that building the parser stays fast.
"""

from __future__ import annotations

import argparse
import math
from collections.abc import Callable
from pathlib import Path
from typing import Any

from filtertwin.digital.factors import FACTOR_WORDS, OVERSAMPLING_FACTORS


def frequency_hz(text: str) -> float:
    """A positive frequency or rate: "48000", "8k", "2.2 kHz"."""
    from filtertwin.circuit import units

    try:
        value = units.parse_quantity(text, "Hz")
    except (ValueError, TypeError) as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"must be a positive frequency, got {text!r}; e.g. 8k")
    return value


def oversampling(text: str) -> int | str:
    """Twin oversampling: one of :data:`filtertwin.digital.factors.OVERSAMPLING_FACTORS`, or
    auto."""
    if text == "auto":
        return text
    if text in {str(f) for f in OVERSAMPLING_FACTORS}:
        return int(text)
    raise argparse.ArgumentTypeError(f"must be {FACTOR_WORDS} or auto, got {text!r}")


RESAMPLING_HELP = (
    "phase of the resampling filters of an oversampled twin: linear (default; their delay is "
    "removed, outputs line up with the input) or causal (minimum phase: nothing comes out "
    "before the input does, for step and impulse studies; the output lags a little)"
)


def add_resampling(parser: Any) -> None:
    """The ``--resampling linear|causal`` option (:data:`filtertwin.digital.resample.PHASES`)."""
    parser.add_argument(
        "--resampling", choices=("linear", "causal"), default="linear", help=RESAMPLING_HELP
    )


def positive(kind: Callable[[str], Any], what: str) -> Callable[[str], Any]:
    """A positive number of the given kind (int or float)."""

    def parse(text: str) -> Any:
        try:
            value = kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{what} must be a number, got {text!r}") from None
        if not value > 0:
            raise argparse.ArgumentTypeError(f"{what} must be positive, got {text!r}")
        return value

    return parse


DEFAULT_MAX_JITTER_PCT = 1.0
"""Largest deviation of a CSV time step from the typical one (same as
``filtertwin.files.recordings.inspect``'s default 0.01)."""


def add_max_jitter(parser: argparse.ArgumentParser) -> None:
    """The ``--max-jitter PCT`` option of the commands that read CSV sensor tables."""
    parser.add_argument(
        "--max-jitter", type=positive(float, "--max-jitter"), metavar="PCT",
        default=DEFAULT_MAX_JITTER_PCT,
        help="largest deviation of a CSV time step from the typical one, in percent "
        f"(default {DEFAULT_MAX_JITTER_PCT:g}); a logger with an uneven clock needs more",
    )  # fmt: skip


def column(text: str | None) -> str | int | None:
    """A CSV column or channel: a 0-based index or a name."""
    return int(text) if text is not None and text.isdigit() else text


def out_folder(text: str) -> Path:
    """The ``--out`` folder, created if missing.

    Raises
    ------
    UserInputError
        ``text`` names a file.
    """
    from filtertwin.files.outputs import prepare_folder

    prepare_folder(text, "--out")
    return Path(text)


def hz(value_hz: float) -> str:
    """A frequency for printed text: four significant digits and an SI prefix ("2.200 kHz")."""
    from filtertwin.circuit.units import format_si

    return format_si(value_hz, "Hz", 4)
