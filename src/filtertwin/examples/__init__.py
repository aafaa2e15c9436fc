"""Packaged example design files (invented scenarios), usable by name from any folder."""

from __future__ import annotations

import shutil
from importlib import resources
from pathlib import Path

from filtertwin.errors import UserInputError

INVENTED_NOTE = (
    "packaged example designs (every one an invented scenario: no real product, board or "
    "recording):"
)


def _folder() -> Path:
    return Path(str(resources.files(__package__)))


def names() -> list[str]:
    return sorted(p.stem for p in _folder().glob("*.toml"))


def path_of(name: str) -> Path:
    return _folder() / f"{name}.toml"


def listing() -> list[tuple[str, str]]:
    """(name, first comment line) of every example."""
    out = []
    for name in names():
        first = path_of(name).read_text(encoding="utf-8").splitlines()[0]
        out.append((name, first.lstrip("# ").strip()))
    return out


def resolve(arg: str) -> Path:
    """A design argument: an existing file, or the name of a packaged example."""
    path = Path(arg)
    if path.exists() or "/" in arg or arg.endswith(".toml"):
        return path
    if arg in names():
        return path_of(arg)
    raise UserInputError(f"{arg}: no such design file or example; examples: {', '.join(names())}")


def copy_to(folder: Path) -> list[Path]:
    """Copy every example into ``folder`` (created if missing); all or nothing."""
    from filtertwin.files.outputs import OutputRun, atomic_path

    with OutputRun(folder, "--copy") as written:
        for name in names():
            target = folder / f"{name}.toml"
            if target.exists():
                raise UserInputError(f"{target}: already exists; choose an empty folder")
            with atomic_path(target) as temporary:
                shutil.copyfile(path_of(name), temporary)
            written.add(target)
    return written.files
