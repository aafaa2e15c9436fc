"""Option types shared by the sub-commands (argparse ``type=`` functions).

A bad value becomes one line through the parser's ``error`` (see ``cli.OneLineParser``):
what is wrong with which option, and how to write it.
"""

from __future__ import annotations

import argparse
import math
from collections.abc import Callable
from typing import Any


def frequency_hz(text: str) -> float:
    """A positive frequency or rate: "48000", "8k", "2.2 kHz"."""
    from filtertwin import units

    try:
        value = units.parse_quantity(text, "Hz")
    except (ValueError, TypeError) as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"must be a positive frequency, got {text!r}; e.g. 8k")
    return value


def oversampling(text: str) -> int | str:
    """Twin oversampling: 1, 2, 4, 8 or auto."""
    if text == "auto":
        return text
    if text in ("1", "2", "4", "8"):
        return int(text)
    raise argparse.ArgumentTypeError(f"must be 1, 2, 4, 8 or auto, got {text!r}")


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


def column(text: str | None) -> str | int | None:
    """A CSV column or channel: a 0-based index or a name."""
    return int(text) if text is not None and text.isdigit() else text
