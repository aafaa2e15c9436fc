"""Saving an edited candidate as a new design file.

The original file is read again (``tomllib``) and only the edited filters' tables change:
a filter whose parts were edited is written as ``[[filter.stage]]`` tables with the parts
in the IEC 60062 letter code (``R1 = "10k2"``) or, when three figures would round the value,
as a plain number in ohms or farads; a filter whose corner moved keeps its alignment with
the new ``corner``. Everything else (title aside, which says it was edited) is copied.
Comments of the original are not kept. The file is written under a temporary name and
renamed when complete; an existing file, the original above all, is never overwritten.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from filtertwin import units
from filtertwin.design import Design
from filtertwin.errors import UserInputError
from filtertwin.outputs import atomic_path


def _letter_or_number(part: str, value: float) -> str | float:
    code = units.format_letter_code(value, "C" if part.startswith("C") else "R")
    unit = "F" if part.startswith("C") else "ohm"
    try:
        back = units.parse_quantity(code, unit)
    except ValueError:
        return value
    return code if math.isclose(back, value, rel_tol=1e-9) else value


def _filter_table(design: Design, name: str, original: Mapping[str, Any]) -> dict[str, Any]:
    f = design.filter(name)
    table = dict(original)
    if f.spec.kind == "built":
        for key in ("alignment", "order", "corner", "ripple_db", "bessel_norm", "topology",
                    "gain", "section"):  # fmt: skip
            table.pop(key, None)
        table["stage"] = [
            {
                **({"response": s.circuit.response} if f.response == "bandpass" else {}),
                "topology": s.circuit.topology,
                **{k: _letter_or_number(k, v) for k, v in s.circuit.parts().items()},
            }
            for s in f.stages
        ]
    elif f.spec.kind == "alignment":
        corners = [units.format_si(hz, "Hz") for hz in f.spec.corner_hz]
        table["corner"] = corners[0] if len(corners) == 1 else corners
    return table


def _value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, list):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    text = str(value).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{text}"'


def _emit(table: Mapping[str, Any], prefix: str, lines: list[str]) -> None:
    plain = {k: v for k, v in table.items() if not isinstance(v, dict | list) or _scalars(v)}
    for key, value in plain.items():
        lines.append(f"{key} = {_value(value)}")
    for key, value in table.items():
        if key in plain:
            continue
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            lines += ["", f"[{name}]"]
            _emit(value, f"{name}.", lines)
        else:
            for item in value:
                lines += ["", f"[[{name}]]"]
                _emit(item, f"{name}.", lines)


def _scalars(value: Any) -> bool:
    return isinstance(value, list) and not any(isinstance(v, dict) for v in value)


def design_text(design: Design, edited: Sequence[str], note: str) -> str:
    """The TOML text of ``design``, its ``edited`` filters rewritten (see the module doc).

    Raises
    ------
    UserInputError
        If the original file cannot be read again.
    """
    source = Path(design.spec.source)
    try:
        data = tomllib.loads(source.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as error:
        raise UserInputError(
            f"cannot read {source} again to save the edited design ({error}); "
            "keep the original file in place while listening"
        ) from None
    tables = data.get("filter", [])
    for index, table in enumerate(tables):
        name = str(table.get("name", f"filter{index + 1}"))
        if name in edited:
            tables[index] = _filter_table(design, name, table)
    data["title"] = f"{data.get('title', design.spec.title)} (edited while listening)"
    lines = [f"# {line}" for line in note.splitlines()]
    _emit(data, "", lines)
    return "\n".join(lines) + "\n"


def save_design(design: Design, edited: Sequence[str], path: Path, note: str) -> Path:
    """Write the edited design to a new file ``path`` (never over an existing file).

    Raises
    ------
    UserInputError
        If ``path`` exists, its folder does not, or it cannot be written.
    """
    path = Path(path)
    if path.exists():
        raise UserInputError(f"{path} exists already; save the edited design under a new name")
    text = design_text(design, edited, note)
    try:
        with atomic_path(path, protect=[design.spec.source]) as temporary:
            temporary.write_text(text, encoding="utf-8")
    except OSError as error:
        raise UserInputError(
            f"cannot write {path} ({error.strerror}); choose another place"
        ) from None
    return path
