"""Every compiled kernel of the package, the versions it holds, and a lock against new ones.

numba compiles one machine-code version of a kernel per argument type signature (dtype,
dimensions, layout 'C' or 'A', read-only or not; numba documentation, "Types and
signatures"), the first time it is called with it. Compiling takes the interpreter lock for
a fraction of a second to seconds, and loading a version from numba's on-disk cache still
takes milliseconds: during a live session either one stalls the audio callback. So a live
session compiles every version it will use before its stream starts, and none after.

:func:`package_kernels` finds every kernel (numba dispatcher) defined in the package's
modules; :func:`signatures` and :func:`added_signatures` record and compare the versions
they hold (the live-session test runs a stream through every path and checks that nothing
was added). :func:`lock_kernels` turns a missed version into an error instead of a stall;
:func:`kernel_lock_wanted` says whether a session asked for that (``FILTERTWIN_LOCK_KERNELS``,
set by the tests; a user's session never fails on it).
"""

from __future__ import annotations

import importlib
import os
import pkgutil
import sys
from collections.abc import Iterable, Mapping

from numba.core.dispatcher import Dispatcher

LOCK_ENV = "FILTERTWIN_LOCK_KERNELS"
"""Environment variable: "1" makes a live session lock its kernels once they are compiled."""
PACKAGE = "filtertwin"

Signatures = dict[str, frozenset[str]]
"""Kernel name (``module.function``) -> the type signatures it holds, as text."""


def package_kernels(import_all: bool = False) -> dict[str, Dispatcher]:
    """Every numba dispatcher bound at the top level of a ``filtertwin`` module.

    Parameters
    ----------
    import_all : bool
        Import every module of the package first (a test's full census); by default only
        modules already imported are looked at (a session's kernels are all imported).

    Returns
    -------
    dict
        ``module.function`` -> dispatcher, each dispatcher once (under the module that
        defines it).
    """
    if import_all:
        package = importlib.import_module(PACKAGE)
        for info in pkgutil.walk_packages(package.__path__, PACKAGE + "."):
            if not info.name.endswith(".__main__"):  # that one runs the command line
                importlib.import_module(info.name)
    found: dict[str, Dispatcher] = {}
    seen: set[int] = set()
    for name, module in sorted(sys.modules.items()):
        if module is None or not (name == PACKAGE or name.startswith(PACKAGE + ".")):
            continue
        for attribute, value in sorted(vars(module).items()):
            if not isinstance(value, Dispatcher) or id(value) in seen:
                continue
            if value.py_func.__module__ != name:  # imported from elsewhere: listed there
                continue
            seen.add(id(value))
            found[f"{name}.{attribute}"] = value
    return found


def signatures(kernels: Mapping[str, Dispatcher]) -> Signatures:
    """The type signatures each kernel holds now (compiled or loaded from the cache)."""
    return {name: frozenset(str(sig) for sig in k.signatures) for name, k in kernels.items()}


def added_signatures(before: Signatures, after: Signatures) -> Signatures:
    """Signatures in ``after`` that ``before`` did not hold, per kernel (only kernels with any)."""
    added = {name: sigs - before.get(name, frozenset()) for name, sigs in after.items()}
    return {name: sigs for name, sigs in added.items() if sigs}


def lock_kernels(kernels: Iterable[Dispatcher]) -> list[Dispatcher]:
    """Forbid compiling (or loading from the cache) any new version of these kernels.

    A call with a type signature the kernel does not hold then raises ``TypeError`` ("No
    matching definition for argument type(s) ...") where it is made, instead of compiling
    (numba documentation, ``Dispatcher.disable_compile``); a kernel never called before
    gets the same error. Kernels already locked are left as they are. Returns the kernels
    locked here (for :func:`unlock_kernels`).
    """
    locked = []
    for kernel in kernels:
        if kernel._can_compile:  # type: ignore[attr-defined]
            # disable_compile() asserts a version exists; a kernel with none is locked alike
            kernel._can_compile = False  # type: ignore[attr-defined]
            locked.append(kernel)
    return locked


def unlock_kernels(kernels: Iterable[Dispatcher]) -> None:
    """Allow the kernels :func:`lock_kernels` locked to compile again."""
    for kernel in kernels:
        kernel._can_compile = True  # type: ignore[attr-defined]


def kernel_lock_wanted(environ: Mapping[str, str] | None = None) -> bool:
    """True when ``FILTERTWIN_LOCK_KERNELS`` is "1" (tests; never a user's default)."""
    return (os.environ if environ is None else environ).get(LOCK_ENV) == "1"
