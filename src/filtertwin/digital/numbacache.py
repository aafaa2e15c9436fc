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

PACKAGE_DIRS = (Path(__file__).parent, Path(__file__).parent.parent / "live")
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
    """Make sure numba (and matplotlib) have cache folders they can write; one notice line
    when a temporary folder stands in.

    Parameters
    ----------
    environ : mapping, optional
        The environment to read and set (default ``os.environ``).
    package_dirs : iterable of Path
        Folders of the modules whose kernels are cached.

    Returns
    -------
    str or None
        None when their own places work (or ``NUMBA_CACHE_DIR`` / ``MPLCONFIGDIR`` are set);
        else the notice.
    """
    env = os.environ if environ is None else environ
    numba_ok = bool(env.get("NUMBA_CACHE_DIR")) or all(
        _can_write(d / "__pycache__") for d in package_dirs
    )
    home_cache = user_cache_dir(env)
    numba_ok = numba_ok or _can_write(home_cache)
    plot_config = matplotlib_config_dir(env)
    plots_ok = bool(env.get("MPLCONFIGDIR")) or _can_write(plot_config)
    if numba_ok and plots_ok:
        return None
    try:
        folder = tempfile.mkdtemp(prefix="filtertwin-cache-")
    except OSError:
        if numba_ok:
            return None  # matplotlib makes do on its own
        _compile_without_cache()
        return (
            "note: no folder can hold numba's compiled kernels (not the installed package, "
            f"{home_cache} nor a temporary folder), so they are compiled without a cache; set "
            "NUMBA_CACHE_DIR to a writable folder to keep them"
        )
    atexit.register(shutil.rmtree, folder, ignore_errors=True)  # nothing left behind
    what, where, names = [], [], []
    if not numba_ok:
        env["NUMBA_CACHE_DIR"] = os.path.join(folder, "numba")
        what.append("numba's compiled kernels")
        where.append(f"the installed package nor {home_cache}")
        names.append("NUMBA_CACHE_DIR")
    if not plots_ok:
        env["MPLCONFIGDIR"] = os.path.join(folder, "matplotlib")
        what.append("matplotlib's font cache")
        where.append(str(plot_config))
        names.append("MPLCONFIGDIR")
    return (
        f"note: neither {' nor '.join(where)} can be written, so {' and '.join(what)} go to "
        f"the temporary {folder} (made again each run); set {' and '.join(names)} to a "
        "writable folder to keep them"
    )


def matplotlib_config_dir(environ: MutableMapping[str, str]) -> Path:
    """matplotlib's configuration and cache folder on Linux: ``$XDG_CONFIG_HOME/matplotlib``
    or ``~/.config/matplotlib``."""
    base = environ.get("XDG_CONFIG_HOME") or os.path.join(os.path.expanduser("~"), ".config")
    return Path(base) / "matplotlib"


def _compile_without_cache() -> None:
    """Make ``cache=True`` a no-op: numba would refuse to compile with nowhere to cache."""
    from numba.core.dispatcher import Dispatcher

    Dispatcher.enable_caching = lambda self: None  # type: ignore[method-assign]
