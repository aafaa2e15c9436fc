"""Live edits of a candidate: one part of one stage, or the corner of a filter.

Both go through the tested design path: the filter's spec is replaced
(:func:`dataclasses.replace`) and the whole design rebuilt with
:func:`~filtertwin.circuit.design.build_design`.

* A part edit turns the filter into one given by its parts (``kind = "built"``, one
  :class:`~filtertwin.circuit.spec.BuiltStageSpec` per stage, with the stages' present parts and one
  of them changed): ``part low 2 C1 +1`` steps C1 of stage 2 of the low way one value up
  its E-series (the design's capacitor series; resistors R1, R2 use the resistor series,
  RF, RG the gain series), ``part low 2 C1 22n`` sets it to 22 nF.
* A corner edit changes the corner of a filter given by an alignment (``corner low 2.5k``;
  a band-pass takes two corners, ``corner mid 350 2.8k``); the parts are chosen again.

Command words (script lines or typed after the key ``e``)::

    part [WAY] [STAGE] PART CHANGE     WAY may be left out for a one-filter candidate,
                                       STAGE for a one-stage filter
    corner [WAY] HZ [HZ]
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass

from filtertwin.circuit import eseries, units
from filtertwin.circuit.design import Design, Filter, Stage, build_design, with_built_filters
from filtertwin.circuit.spec import FilterSpec
from filtertwin.errors import UserInputError

PART_NAMES = ("R1", "R2", "C1", "C2", "RF", "RG")
_STEPS = re.compile(r"^[+-]\d+$")


@dataclass(frozen=True)
class PartEdit:
    """A parsed ``part`` command (way and stage None when left out)."""

    way: str | None
    stage: int | None
    part: str
    change: str


@dataclass(frozen=True)
class CornerEdit:
    """A parsed ``corner`` command (way None when left out)."""

    way: str | None
    corners_hz: tuple[float, ...]


def parse_part(args: Sequence[str]) -> PartEdit:
    """Read the arguments of ``part [WAY] [STAGE] PART CHANGE``.

    Raises
    ------
    UserInputError
        If the part name is not one of R1 R2 C1 C2 RF RG or the stage is not a number.
    """
    words = list(args)
    if not 2 <= len(words) <= 4:
        raise UserInputError("use 'part [WAY] [STAGE] PART CHANGE', e.g. 'part low 2 C1 +1'")
    change = words.pop()
    part = words.pop().upper()
    if part not in PART_NAMES and change.upper() in PART_NAMES:
        raise UserInputError(
            f"the change of {change.upper()} is missing: add a step (+1, -2) or a value "
            f"(22n, 10k), e.g. 'part low 2 {change.upper()} +1'"
        )
    if part not in PART_NAMES and len(args) == 2 and args[1].isdigit():
        raise UserInputError(
            f"'part {' '.join(args)}' names no part: use 'part [WAY] [STAGE] PART CHANGE' "
            f"with PART one of {', '.join(PART_NAMES)}, e.g. 'part low 2 C1 +1'"
        )
    if part not in PART_NAMES:
        raise UserInputError(
            f"{part!r} is not a part name; use one of {', '.join(PART_NAMES)} "
            "(e.g. 'part low 2 C1 +1')"
        )
    stage = None
    if words and words[-1].isdigit():
        stage = int(words.pop())
    elif len(words) == 2:
        raise UserInputError(f"stage {words[1]!r} is not a stage number; e.g. 'part low 2 C1 +1'")
    way = words.pop() if words else None
    return PartEdit(way, stage, part, change)


def parse_corner(args: Sequence[str]) -> CornerEdit:
    """Read the arguments of ``corner [WAY] HZ [HZ]``.

    Raises
    ------
    UserInputError
        If a corner is not a frequency.
    """
    words = list(args)
    way = None
    if words and not words[0][:1].isdigit() and not words[0].startswith("."):
        way = words.pop(0)
    if not 1 <= len(words) <= 2:
        raise UserInputError("use 'corner [WAY] HZ [HZ]', e.g. 'corner low 2.5k'")
    corners = []
    for word in words:
        try:
            corners.append(units.parse_quantity(word, "Hz"))
        except ValueError as error:
            raise UserInputError(f"corner {word!r}: {error}") from None
    return CornerEdit(way, tuple(corners))


def _series_of(design: Design, part: str) -> str:
    parts = design.spec.parts
    if part in ("C1", "C2"):
        return parts.capacitor_series
    return parts.gain_series if part in ("RF", "RG") else parts.resistor_series


def new_value(design: Design, part: str, old: float, change: str) -> float:
    """The part's new value: ``+N``/``-N`` steps along its E-series, or a value to set.

    Raises
    ------
    UserInputError
        If the change is neither a step count nor a value in the part's unit.
    """
    if _STEPS.match(change):
        return eseries.step(old, _series_of(design, part), int(change))
    unit = "F" if part.startswith("C") else "ohm"
    try:
        value = units.parse_quantity(change, unit)
    except ValueError as error:
        raise UserInputError(
            f"{part} change {change!r}: {error}; or step it, e.g. +1 or -2"
        ) from None
    if not value > 0:
        raise UserInputError(f"{part} must be positive, got {change!r}")
    return value


def _stage(f: Filter, stage: int | None) -> Stage:
    if stage is None:
        if len(f.stages) != 1:
            raise UserInputError(
                f"filter '{f.name}' has {len(f.stages)} stages; say which, "
                f"e.g. 'part {f.name} 1 {next(iter(f.stages[0].circuit.parts()))} +1'"
            )
        return f.stages[0]
    if not 1 <= stage <= len(f.stages):
        raise UserInputError(
            f"filter '{f.name}' has stages 1 to {len(f.stages)}, there is no stage {stage}"
        )
    return f.stages[stage - 1]


def _replace_filter(design: Design, new: FilterSpec) -> Design:
    filters = tuple(new if f.name == new.name else f for f in design.spec.filters)
    return build_design(dataclasses.replace(design.spec, filters=filters))


def edit_part(design: Design, filter_name: str, edit: PartEdit) -> tuple[Design, Stage, float]:
    """Rebuild the design with one part of one stage changed.

    Returns
    -------
    design : Design
        The rebuilt design (the filter is now given by its parts).
    old_stage : Stage
        The stage before the change.
    value : float
        The part's new value (ohm or F).

    Raises
    ------
    UserInputError
        If the stage or the part does not exist, or the change cannot be read.
    """
    f = design.filter(filter_name)
    stage = _stage(f, edit.stage)
    parts = stage.circuit.parts()
    if edit.part not in parts:
        raise UserInputError(
            f"stage {stage.index} of '{f.name}' has no {edit.part}; "
            f"its parts are {', '.join(parts)}"
        )
    value = new_value(design, edit.part, parts[edit.part], edit.change)
    new_parts = [
        s.circuit.with_parts(**{edit.part: value}).parts() if s is stage else s.circuit.parts()
        for s in f.stages
    ]
    return with_built_filters(design, {f.name: new_parts}), stage, value


def edit_corner(
    design: Design,
    filter_name: str,
    corners_hz: tuple[float, ...],
    original: FilterSpec | None = None,
) -> Design:
    """Rebuild the design with a filter's corner moved (parts chosen again).

    Parameters
    ----------
    original : FilterSpec, optional
        The filter as first loaded: a filter given by an alignment whose parts were edited
        since is designed again from it (the part edits are replaced).

    Raises
    ------
    UserInputError
        If the filter is not given by an alignment, or the number of corners is wrong.
    """
    f = design.filter(filter_name)
    spec = f.spec
    if spec.kind == "built" and original is not None and original.kind == "alignment":
        spec = original
    if spec.kind != "alignment":
        how = "its parts" if spec.kind == "built" else "its sections"
        raise UserInputError(
            f"filter '{f.name}' is given by {how}, so it has no corner to move; "
            "corner works on filters given by an alignment"
        )
    wanted = 2 if f.response == "bandpass" else 1
    if len(corners_hz) != wanted:
        example = "corner mid 350 2.8k" if wanted == 2 else f"corner {f.name} 2.5k"
        raise UserInputError(
            f"filter '{f.name}' ({f.response}) takes {wanted} corner(s), got "
            f"{len(corners_hz)}; e.g. '{example}'"
        )
    if wanted == 2 and not corners_hz[0] < corners_hz[1]:
        raise UserInputError("a band-pass takes its lower corner first, e.g. 'corner mid 350 2.8k'")
    return _replace_filter(design, dataclasses.replace(spec, corner_hz=tuple(corners_hz)))


def describe_stage(stage: Stage) -> str:
    """As-built f0 and Q of a stage, e.g. "f0 2.994 kHz, Q 0.541"."""
    text = f"f0 {units.format_si(stage.built.f0_hz, 'Hz')}"
    if not math.isnan(stage.built.q):
        text += f", Q {stage.built.q:.3f}"
    return text


def format_part(part: str, value: float) -> str:
    """A part value in the IEC 60062 letter code, e.g. "C1 = 22n"."""
    return f"{part} = {units.format_letter_code(value, 'C' if part.startswith('C') else 'R')}"
