"""Where numba keeps the compiled kernels: a folder that can be written, or a temporary one.

The kernels are compiled with ``cache=True``. numba stores them in ``__pycache__`` beside the
installed package or, failing that, under the user's cache folder; when neither can be
written (a read-only install run by a user without a home folder), it refuses to compile
at all. :func:`choose_cache_dir` runs before numba is imported: it leaves numba alone when one
of its own places works, and otherwise points ``NUMBA_CACHE_DIR`` at a fresh temporary folder
(the kernels are compiled again on every run) and says so in one line; with no temporary
folder either, the kernels are compiled without a cache.
"""

from __future__ import annotations

import atexit
import os
import shutil
import tempfile
from collections.abc import Iterable, MutableMapping
from pathlib import Path

PACKAGE_DIRS = (Path(__file__).parent, Path(__file__).parent / "live")
"""Folders holding modules with cached kernels: numba writes beside each one."""


def _can_write(folder: Path) -> bool:
    """True when ``folder`` can be created and a file written in it (numba's own test)."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
        with tempfile.TemporaryFile(dir=folder):
            pass
    except OSError:
        return False
    return True


def user_cache_dir(environ: MutableMapping[str, str]) -> Path:
    """numba's per-user cache folder on Linux: ``$XDG_CACHE_HOME/numba`` or ``~/.cache/numba``."""
    base = environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "numba"


def choose_cache_dir(
    environ: MutableMapping[str, str] | None = None,
    package_dirs: Iterable[Path] = PACKAGE_DIRS,
) -> str | None:
    """Make sure numba has a cache folder it can write; a one-line notice when it is temporary.

    Parameters
    ----------
    environ : mapping, optional
        The environment to read and set (default ``os.environ``).
    package_dirs : iterable of Path
        Folders of the modules whose kernels are cached.

    Returns
    -------
    str or None
        None when numba's own places work (or ``NUMBA_CACHE_DIR`` is set); else the notice.
    """
    env = os.environ if environ is None else environ
    if env.get("NUMBA_CACHE_DIR"):
        return None
    if all(_can_write(d / "__pycache__") for d in package_dirs):
        return None
    home_cache = user_cache_dir(env)
    if _can_write(home_cache):
        return None
    try:
        folder = tempfile.mkdtemp(prefix="filtertwin-numba-")
    except OSError:
        _compile_without_cache()
        return (
            "note: no folder can hold numba's compiled kernels (not the installed package, "
            f"{home_cache} nor a temporary folder), so they are compiled without a cache; set "
            "NUMBA_CACHE_DIR to a writable folder to keep them"
        )
    env["NUMBA_CACHE_DIR"] = folder
    atexit.register(shutil.rmtree, folder, ignore_errors=True)  # nothing left behind
    return (
        f"note: neither the installed package nor {home_cache} can be written, so numba's "
        f"compiled kernels go to the temporary {folder} (compiled again each run); set "
        "NUMBA_CACHE_DIR to a writable folder to keep them"
    )


def _compile_without_cache() -> None:
    """Make ``cache=True`` a no-op: numba would refuse to compile with nowhere to cache."""
    from numba.core.dispatcher import Dispatcher

    Dispatcher.enable_caching = lambda self: None  # type: ignore[method-assign]
