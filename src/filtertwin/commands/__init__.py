"""Sub-commands beyond `design` and `examples`, one module each.

Each module listed in ``COMMAND_MODULES`` has a ``register(subparsers)`` function that adds
its parser and sets ``func`` (a function of the parsed arguments returning the exit status).
"""

from __future__ import annotations

import importlib
from collections.abc import Callable
from typing import Any

COMMAND_MODULES: tuple[str, ...] = (
    "render",
    "alias",
    "crossover",
    "tolerance",
    "listen",
    "devices",
    "demo",
)


def registrars() -> list[Callable[[Any], None]]:
    return [importlib.import_module(f"filtertwin.commands.{m}").register for m in COMMAND_MODULES]
