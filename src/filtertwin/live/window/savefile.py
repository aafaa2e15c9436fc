"""Writing a design edited while listening as a new design file ("save as").

The original file is read again (TOML) and each filter's table is brought up to date: a
filter given by its parts after a part edit gets one ``[[filter.stage]]`` table per stage
with the parts in the IEC 60062 letter code; a filter whose corner moved gets its new
``corner``. Everything else (parts rules, amplifier, signal, names) is kept as written. The
file is written under a temporary name and renamed when complete, never over an existing
file, and read back through the design loader before it is kept.
"""

from __future__ import annotations

import math
import tomllib
from pathlib import Path
from typing import Any

from filtertwin.circuit import units
from filtertwin.circuit.design import Design, build_design
from filtertwin.circuit.spec import FilterSpec, load_design
from filtertwin.errors import UserInputError
from filtertwin.files.outputs import atomic_path

_BARE = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_-")
_ALIGNMENT_KEYS = ("alignment", "order", "corner", "ripple", "bessel_norm", "section", "gain")


def _key(name: str) -> str:
    return name if name and set(name) <= _BARE else _string(name)


def _string(text: str) -> str:
    escaped = text.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")
    return f'"{escaped}"'


def _value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"TOML here takes finite numbers, got {value}")
        return repr(value)
    if isinstance(value, str):
        return _string(value)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} as a TOML value")


def _table_lines(table: dict[str, Any], path: str, array_item: bool) -> list[str]:
    lines = [f"[[{path}]]" if array_item else f"[{path}]"] if path else []
    nested: list[tuple[str, Any]] = []
    for key, value in table.items():
        if isinstance(value, dict) or (
            isinstance(value, list) and value and all(isinstance(v, dict) for v in value)
        ):
            nested.append((key, value))
        else:
            lines.append(f"{_key(key)} = {_value(value)}")
    for key, value in nested:
        sub = f"{path}.{_key(key)}" if path else _key(key)
        items = [value] if isinstance(value, dict) else value
        for item in items:
            lines.append("")
            lines += _table_lines(item, sub, isinstance(value, list))
    return lines


def dumps(document: dict[str, Any]) -> str:
    """A TOML document of plain tables, arrays of tables and scalar values."""
    return "\n".join(_table_lines(document, "", False)).strip("\n") + "\n"


def _part_text(name: str, value: float) -> str:
    return units.format_letter_code(value, "C" if name.startswith("C") else "R")


def _filter_table(table: dict[str, Any], spec: FilterSpec, design: Design) -> dict[str, Any]:
    table = dict(table)
    if spec.kind == "built":
        for key in (*_ALIGNMENT_KEYS, "stage", "topology", "stage_order"):
            table.pop(key, None)
        stages = []
        for stage in design.filter(spec.name).stages:
            circuit = stage.circuit
            row: dict[str, Any] = {"response": circuit.response, "topology": circuit.topology}
            row.update({k: _part_text(k, v) for k, v in circuit.parts().items()})
            stages.append(row)
        table["stage"] = stages
    elif spec.kind == "alignment":
        corners = [f"{hz:.6g} Hz" for hz in spec.corner_hz]
        table["corner"] = corners[0] if len(corners) == 1 else corners
    return table


def design_document(design: Design) -> dict[str, Any]:
    """The design's original file as a TOML document, with its filters as they are now."""
    source = Path(design.spec.source)
    try:
        document = tomllib.loads(source.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError) as error:
        raise UserInputError(f"save as: cannot read the original {source}: {error}") from None
    tables = document.get("filter", [])
    by_name = {str(t.get("name", f"filter{i + 1}")): t for i, t in enumerate(tables)}
    document["filter"] = [_filter_table(by_name[f.name], f, design) for f in design.spec.filters]
    if not str(document.get("title", "")).endswith("(edited while listening)"):
        document["title"] = f"{design.spec.title} (edited while listening)"
    return document


def save_design(design: Design, path: Path) -> Path:
    """Write ``design`` as a new design file at ``path`` and check it reads back the same.

    Raises
    ------
    UserInputError
        If ``path`` exists (a design file is never overwritten), does not end in ``.toml``,
        or cannot be written; or if the file written does not read back to the same parts.
    """
    path = Path(path)
    if path.suffix != ".toml":
        raise UserInputError(f"save as: {path} must end in .toml, e.g. my-build.toml")
    if path.exists():
        raise UserInputError(f"save as: {path} exists; choose a new name (nothing is overwritten)")
    text = "# Saved by filtertwin listen after live edits.\n" + dumps(design_document(design))
    try:
        with atomic_path(path, protect=[design.spec.source]) as tmp:
            Path(tmp).write_text(text, encoding="utf-8")
            again = build_design(load_design(tmp))
            for old, new in zip(design.filters, again.filters, strict=True):
                for a, b in zip(old.stages, new.stages, strict=True):
                    if a.circuit.parts().keys() != b.circuit.parts().keys() or any(
                        not math.isclose(v, b.circuit.parts()[k], rel_tol=5e-3)
                        for k, v in a.circuit.parts().items()
                    ):
                        raise UserInputError(
                            f"save as: {path} would not read back to the same parts "
                            f"(filter {old.name} stage {a.index}); nothing was written"
                        )
    except OSError as error:
        raise UserInputError(f"save as: cannot write {path}: {error}") from None
    return path
