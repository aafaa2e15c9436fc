"""Sub-commands beyond `design` and `examples`, one module each.

Each module has a ``register(subparsers)`` function that adds its parser and sets ``func``.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

REGISTRY: list[Callable[[Any], None]] = []
