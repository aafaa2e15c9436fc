"""Design files (TOML) -> validated, frozen spec objects.

Validation happens here, once. Every error is a :class:`UserInputError` whose one line names
the file, the field, the rule and a fix. Past this module the data is trusted.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from filtertwin.circuit import eseries, units
from filtertwin.errors import UserInputError

RESPONSES = ("lowpass", "highpass", "bandpass")
ALIGNMENTS = ("butterworth", "bessel", "chebyshev", "linkwitz-riley")
TOPOLOGIES = ("unity", "equal", "gain")
STAGE_ORDERS = ("lowest-q-first", "highest-q-first", "as-listed")
BESSEL_NORMS = ("mag", "phase", "delay")
POLARITIES = ("normal", "inverted")


@dataclass(frozen=True)
class AmplifierSpec:
    """Amplifier figures as given (SI units); ``preset`` names the starting point."""

    preset: str | None
    gbw_hz: float
    swing_v: float
    slew_v_per_s: float
    noise_v_per_rthz: float
    noise_a_per_rthz: float
    open_loop_gain: float
    description: str
    output_resistance_ohm: float = 0.0


@dataclass(frozen=True)
class PartsSpec:
    resistor_series: str = "E96"
    capacitor_series: str = "E12"
    gain_series: str = "E96"
    resistor_tolerance: float = 0.01
    capacitor_tolerance: float = 0.05
    resistor_range_ohm: tuple[float, float] = (1e3, 100e3)
    capacitor_range_f: tuple[float, float] = (100e-12, 1e-6)
    temperature_k: float = 298.15  # of the parts, for their thermal noise (25 degrees C)


@dataclass(frozen=True)
class SectionTarget:
    """An explicit target section: order 2 with f0 and Q, or order 1 with its corner."""

    f0_hz: float
    q: float  # nan for a first-order section

    @property
    def order(self) -> int:
        return 1 if math.isnan(self.q) else 2


@dataclass(frozen=True)
class BuiltStageSpec:
    """A stage given by its parts (an existing circuit)."""

    response: str
    topology: str
    parts: dict[str, float]

    @property
    def order(self) -> int:
        return 2 if "R2" in self.parts else 1


@dataclass(frozen=True)
class FilterSpec:
    name: str
    response: str
    kind: str  # "alignment" | "sections" | "built"
    alignment: str | None = None
    order: int | None = None
    corner_hz: tuple[float, ...] = ()  # one corner, or (lower, upper) for a band-pass
    ripple_db: float | None = None
    bessel_norm: str = "mag"
    topology: str = "unity"
    gain: float = 1.0
    stage_order: str = "lowest-q-first"
    polarity: int = 1
    sections: tuple[SectionTarget, ...] = ()
    built: tuple[BuiltStageSpec, ...] = ()


@dataclass(frozen=True)
class DesignSpec:
    source: str
    title: str
    parts: PartsSpec
    amplifier: AmplifierSpec | None
    full_scale_v: float
    filters: tuple[FilterSpec, ...] = field(default_factory=tuple)


class _Ctx:
    """Where in the file we are, to build one-line errors."""

    def __init__(self, source: str, where: str = "") -> None:
        self.source = source
        self.where = where

    def at(self, name: str) -> _Ctx:
        return _Ctx(self.source, f"{self.where}.{name}" if self.where else name)

    def fail(self, problem: str, fix: str) -> UserInputError:
        place = f"field '{self.where}'" if self.where else "top level"
        return UserInputError(f"{self.source}: {place}: {problem}; {fix}")


def _check_keys(table: dict[str, Any], allowed: tuple[str, ...], ctx: _Ctx) -> None:
    for key in table:
        if key not in allowed:
            raise ctx.at(key).fail("unknown field", f"valid fields here: {', '.join(allowed)}")


def _choice(value: Any, choices: tuple[str, ...], ctx: _Ctx) -> str:
    text = str(value).strip().lower()
    if text not in choices:
        raise ctx.fail(f"unknown value {value!r}", f"use one of: {', '.join(choices)}")
    return text


def _quantity(value: Any, unit: str, ctx: _Ctx, example: str) -> float:
    try:
        number = units.parse_quantity(value, unit)
    except units.ValueTextError as exc:  # one fix: the field's own example
        raise ctx.fail(exc.problem, f"write it like {example}") from None
    except (ValueError, TypeError) as exc:
        raise ctx.fail(f"{exc}", f"write it like {example}") from None
    if not math.isfinite(number) or number <= 0:
        raise ctx.fail(
            f"must be a positive {unit} value, got {value!r}", f"write it like {example}"
        )
    return number


def _percent(value: Any, ctx: _Ctx) -> float:
    text = str(value).strip()
    try:
        number = float(text[:-1]) / 100 if text.endswith("%") else float(text)
    except ValueError:
        raise ctx.fail(f"tolerance {value!r} is not a number", 'write it like "1%"') from None
    if not 0 <= number < 0.5:
        raise ctx.fail(f"tolerance {value!r} is outside 0..50 %", 'write it like "1%"')
    return number


def _gain(value: Any, ctx: _Ctx) -> float:
    if isinstance(value, str) and value.strip().lower().endswith("db"):
        try:
            db = float(value.strip()[:-2])
        except ValueError:
            raise ctx.fail(
                f"gain {value!r} is not a number", 'write it like "6 dB" or 2.0'
            ) from None
        return 10 ** (db / 20)
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ctx.fail(f"gain {value!r} is not a number", 'write it like "6 dB" or 2.0')
    if not math.isfinite(value) or value <= 0:
        raise ctx.fail(f"gain must be positive, got {value!r}", 'write it like "6 dB" or 2.0')
    return float(value)


def _series(value: Any, ctx: _Ctx) -> str:
    text = str(value).strip().upper()
    if text not in eseries.SERIES_NAMES:
        raise ctx.fail(
            f"unknown part series {value!r}", f"use one of: {', '.join(eseries.SERIES_NAMES)}"
        )
    return text


def _range(value: Any, unit: str, ctx: _Ctx, example: str) -> tuple[float, float]:
    if not isinstance(value, list) or len(value) != 2:
        raise ctx.fail("must be a list of two values [low, high]", f"write it like {example}")
    lo = _quantity(value[0], unit, ctx, example)
    hi = _quantity(value[1], unit, ctx, example)
    if lo >= hi:
        raise ctx.fail(f"low end {value[0]!r} is not below high end {value[1]!r}", "swap them")
    return lo, hi


def _parts(table: dict[str, Any], ctx: _Ctx) -> PartsSpec:
    allowed = (
        "resistors",
        "capacitors",
        "gain_resistors",
        "resistor_tolerance",
        "capacitor_tolerance",
        "resistor_range",
        "capacitor_range",
        "temperature_c",
    )
    _check_keys(table, allowed, ctx)
    r_series = _series(table.get("resistors", "E96"), ctx.at("resistors"))
    c_series = _series(table.get("capacitors", "E12"), ctx.at("capacitors"))
    g_series = _series(table.get("gain_resistors", r_series), ctx.at("gain_resistors"))
    r_tol = table.get("resistor_tolerance", eseries.default_tolerance(r_series))
    c_tol = table.get("capacitor_tolerance", eseries.default_tolerance(c_series))
    r_range = table.get("resistor_range", ["1k", "100k"])
    c_range = table.get("capacitor_range", ["100p", "1u"])
    return PartsSpec(
        resistor_series=r_series,
        capacitor_series=c_series,
        gain_series=g_series,
        resistor_tolerance=_percent(r_tol, ctx.at("resistor_tolerance")),
        capacitor_tolerance=_percent(c_tol, ctx.at("capacitor_tolerance")),
        resistor_range_ohm=_range(r_range, "ohm", ctx.at("resistor_range"), '["1k", "100k"]'),
        capacitor_range_f=_range(c_range, "F", ctx.at("capacitor_range"), '["100p", "1u"]'),
        temperature_k=_temperature_k(table.get("temperature_c", 25.0), ctx.at("temperature_c")),
    )


def _temperature_k(value: Any, ctx: _Ctx) -> float:
    """Degrees Celsius -> kelvin, within the range parts are rated for."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not -55 <= value <= 155:
        raise ctx.fail(
            f"must be a number of degrees C from -55 to 155, got {value!r}", "use e.g. 25"
        )
    return float(value) + 273.15


def _amplifier(table: dict[str, Any], ctx: _Ctx) -> AmplifierSpec:
    from filtertwin.circuit.sallenkey import AMPLIFIER_PRESETS

    allowed = (
        "preset",
        "gbw",
        "swing",
        "slew",
        "noise_voltage",
        "noise_current",
        "open_loop_gain_db",
        "output_resistance",
    )
    _check_keys(table, allowed, ctx)
    preset_name = table.get("preset")
    if preset_name is not None:
        if preset_name not in AMPLIFIER_PRESETS:
            raise ctx.at("preset").fail(
                f"unknown amplifier preset {preset_name!r}",
                f"use one of: {', '.join(AMPLIFIER_PRESETS)}, or give gbw, swing and slew",
            )
        base = AMPLIFIER_PRESETS[preset_name]
    else:
        missing = [k for k in ("gbw", "swing", "slew") if k not in table]
        if missing:
            raise ctx.fail(
                f"missing {', '.join(missing)}",
                f"give them, or a preset ({', '.join(AMPLIFIER_PRESETS)})",
            )
        base = None

    def figure(key: str, unit: str, example: str, default: float | None) -> float:
        if key not in table:
            assert default is not None
            return default
        text = table[key]
        if isinstance(text, str):
            for suffix in _DENSITY_SUFFIXES:
                if text.replace(" ", "").endswith(suffix):
                    text = text.replace(" ", "")[: -len(suffix)]
        return _quantity(text, unit, ctx.at(key), example)

    gbw = figure("gbw", "Hz", '"10 MHz"', base.gbw_hz if base else None)
    swing = figure("swing", "V", '"13 V"', base.swing_v if base else None)
    if "slew" in table:
        slew = _slew(table["slew"], ctx.at("slew"))
    else:
        assert base is not None  # without a preset, gbw, swing and slew are all given (above)
        slew = base.slew_v_per_s
    en = figure("noise_voltage", "V", '"4 nV/rtHz"', base.noise_v_per_rthz if base else 10e-9)
    inoise = figure("noise_current", "A", '"1 pA/rtHz"', base.noise_a_per_rthz if base else 1e-12)
    if "open_loop_gain_db" in table:
        a0_db = table["open_loop_gain_db"]
        if isinstance(a0_db, bool) or not isinstance(a0_db, int | float) or not 40 <= a0_db <= 200:
            raise ctx.at("open_loop_gain_db").fail(
                f"must be a number of dB from 40 to 200, got {a0_db!r}", "use e.g. 110"
            )
        a0 = 10 ** (a0_db / 20)
    else:
        a0 = base.open_loop_gain if base else 1e5
    if "output_resistance" in table:
        ro = _output_resistance(table["output_resistance"], ctx.at("output_resistance"))
    else:
        ro = base.output_resistance_ohm if base else DEFAULT_OUTPUT_RESISTANCE_OHM
    changed = base is None or any(k in table for k in allowed if k != "preset")
    description = base.description if base and not changed else _describe(gbw, base)
    return AmplifierSpec(preset_name, gbw, swing, slew, en, inoise, a0, description, ro)


# common practice (no single source): open-loop output resistance of a general op-amp
# is tens of ohms to a few hundred; used when the figures are given without a preset
DEFAULT_OUTPUT_RESISTANCE_OHM = 50.0


def _output_resistance(value: Any, ctx: _Ctx) -> float:
    """Open-loop output resistance in ohm, 0 allowed (an ideal output)."""
    if not isinstance(value, bool) and isinstance(value, int | float) and value == 0:
        return 0.0
    ro = _quantity(value, "ohm", ctx, '"50 ohm"')
    if ro > 10e3:
        raise ctx.fail(
            f"open-loop output resistance {value!r} is above 10 kOhm, beyond any op-amp",
            'give the figure in ohm, e.g. "50 ohm"',
        )
    return ro


_DENSITY_SUFFIXES = ("/rtHz", "/sqrt(Hz)", "/\u221aHz", "/rthz")


def _slew(value: Any, ctx: _Ctx) -> float:
    """Slew rate in V/s from "7 V/us", "7V/µs" or "7e6 V/s"."""
    text = str(value).replace(" ", "")
    scale = 1.0
    for suffix, factor in (("V/us", 1e6), ("V/\u00b5s", 1e6), ("V/\u03bcs", 1e6), ("V/s", 1.0)):
        if text.endswith(suffix):
            text, scale = text[: -len(suffix)], factor
            break
    else:
        raise ctx.fail(f"slew rate {value!r} has no unit", 'write it like "7 V/us"')
    try:
        number = float(text) * scale
    except ValueError:
        raise ctx.fail(f"slew rate {value!r} is not a number", 'write it like "7 V/us"') from None
    if not math.isfinite(number) or number <= 0:
        raise ctx.fail(f"slew rate must be positive, got {value!r}", 'write it like "7 V/us"')
    return number


def _describe(gbw_hz: float, base: Any) -> str:
    kind = base.description.split(",")[0] if base else "amplifier"
    return f"{kind}, {units.format_si(gbw_hz, 'Hz', 3)} (custom figures)"


FILTER_KEYS = (
    "name",
    "response",
    "alignment",
    "order",
    "corner",
    "ripple_db",
    "bessel_norm",
    "topology",
    "gain",
    "stage_order",
    "polarity",
    "section",
    "stage",
)


def _filter(table: dict[str, Any], index: int, ctx: _Ctx) -> FilterSpec:
    name = str(table.get("name", f"filter{index + 1}"))
    fctx = _Ctx(ctx.source, f"filter[{index + 1}] ('{name}')")
    _check_keys(table, FILTER_KEYS, fctx)
    if "response" not in table:
        raise fctx.at("response").fail("missing", f"add response = one of {', '.join(RESPONSES)}")
    response = _choice(table["response"], RESPONSES, fctx.at("response"))
    topology = _choice(table.get("topology", "unity"), TOPOLOGIES, fctx.at("topology"))
    gain = _gain(table["gain"], fctx.at("gain")) if "gain" in table else 1.0
    if "gain" in table and topology != "gain":
        raise fctx.at("gain").fail(
            f"a passband gain needs topology 'gain' (topology here is '{topology}')",
            'set topology = "gain" or remove gain',
        )
    if gain < 1.0:
        raise fctx.at("gain").fail(
            f"gain {gain:.4g} is below 1, which non-inverting stages cannot give",
            "use a gain of at least 1 (0 dB) and an input divider for less",
        )
    common = dict(
        name=name,
        response=response,
        topology=topology,
        gain=gain,
        stage_order=_choice(
            table.get("stage_order", "lowest-q-first"), STAGE_ORDERS, fctx.at("stage_order")
        ),
        polarity=-1 if _choice(table.get("polarity", "normal"), POLARITIES, fctx.at("polarity"))
        == "inverted" else 1,
    )  # fmt: skip
    kinds = [k for k in ("alignment", "section", "stage") if k in table]
    if len(kinds) != 1:
        raise fctx.fail(
            "needs exactly one of: alignment (with order and corner), [[filter.section]] "
            f"targets, or [[filter.stage]] parts (found {', '.join(kinds) or 'none'})",
            "see the design file reference in the README",
        )
    if kinds[0] == "stage":
        built = tuple(
            _built_stage(s, response, topology, fctx.at(f"stage[{i + 1}]"))
            for i, s in enumerate(_table_list(table["stage"], fctx.at("stage")))
        )
        return FilterSpec(kind="built", built=built, **common)  # type: ignore[arg-type]
    if kinds[0] == "section":
        if response == "bandpass":
            raise fctx.at("response").fail(
                "explicit sections need response lowpass or highpass",
                "write a band-pass as one high-pass and one low-pass filter",
            )
        sections = tuple(
            _section(s, fctx.at(f"section[{i + 1}]"))
            for i, s in enumerate(_table_list(table["section"], fctx.at("section")))
        )
        return FilterSpec(kind="sections", sections=sections, **common)  # type: ignore[arg-type]
    return _aligned(table, response, fctx, common)


def _aligned(table: dict[str, Any], response: str, fctx: _Ctx, common: dict) -> FilterSpec:
    alignment = _choice(table["alignment"], ALIGNMENTS, fctx.at("alignment"))
    if "order" not in table:
        raise fctx.at("order").fail("missing", "add order = 1 .. 10")
    order = table["order"]
    if isinstance(order, bool) or not isinstance(order, int) or not 1 <= order <= 10:
        raise fctx.at("order").fail(
            f"order must be a whole number 1 to 10, got {order!r}", "fix it"
        )
    if alignment == "linkwitz-riley" and order not in (2, 4, 8):
        raise fctx.at("order").fail(
            f"Linkwitz-Riley order must be 2, 4 or 8, got {order}", "choose 2, 4 or 8"
        )
    if "corner" not in table:
        raise fctx.at("corner").fail("missing", 'add corner = "1 kHz" (band-pass: ["300", "3k"])')
    corner = _corners(table["corner"], response, fctx.at("corner"))
    ripple = None
    if alignment == "chebyshev":
        if "ripple_db" not in table:
            raise fctx.at("ripple_db").fail(
                "Chebyshev needs a passband ripple", "add ripple_db = 0.5"
            )
        ripple = table["ripple_db"]
        if isinstance(ripple, bool) or not isinstance(ripple, int | float) or not 0 < ripple <= 6:
            raise fctx.at("ripple_db").fail(
                f"ripple must be a number of dB in (0, 6], got {ripple!r}", "use e.g. 0.5"
            )
    norm = _choice(table.get("bessel_norm", "mag"), BESSEL_NORMS, fctx.at("bessel_norm"))
    return FilterSpec(
        kind="alignment",
        alignment=alignment,
        order=order,
        corner_hz=corner,
        ripple_db=float(ripple) if ripple is not None else None,
        bessel_norm=norm,
        **common,
    )


def _corners(value: Any, response: str, ctx: _Ctx) -> tuple[float, ...]:
    if response == "bandpass":
        if not isinstance(value, list) or len(value) != 2:
            raise ctx.fail(
                "a band-pass needs two corners [lower, upper]", 'write corner = ["300", "3k"]'
            )
        lo = _quantity(value[0], "Hz", ctx, '["300 Hz", "3 kHz"]')
        hi = _quantity(value[1], "Hz", ctx, '["300 Hz", "3 kHz"]')
        if lo >= hi:
            raise ctx.fail(
                f"band-pass corners are reversed or equal (lower {value[0]!r}, upper {value[1]!r})",
                "put the lower corner first",
            )
        return (lo, hi)
    if isinstance(value, list):
        raise ctx.fail(f"a {response} takes one corner, got a list", 'write corner = "1 kHz"')
    return (_quantity(value, "Hz", ctx, '"1 kHz"'),)


def _table_list(value: Any, ctx: _Ctx) -> list[dict[str, Any]]:
    if not isinstance(value, list) or not value or not all(isinstance(v, dict) for v in value):
        raise ctx.fail(
            "must be one or more tables", "write each as [[filter.section]] / [[filter.stage]]"
        )
    return value


def _section(table: dict[str, Any], ctx: _Ctx) -> SectionTarget:
    _check_keys(table, ("f0", "q"), ctx)
    if "f0" not in table:
        raise ctx.at("f0").fail("missing", 'add f0 = "1 kHz"')
    f0 = _quantity(table["f0"], "Hz", ctx.at("f0"), '"1 kHz"')
    if "q" not in table:
        return SectionTarget(f0, math.nan)
    q = table["q"]
    if isinstance(q, bool) or not isinstance(q, int | float) or not 0.1 <= q <= 50:
        raise ctx.at("q").fail(
            f"Q must be a number from 0.1 to 50, got {q!r}", "use e.g. q = 0.707"
        )
    return SectionTarget(f0, float(q))


_PART_UNITS = {"R1": "ohm", "R2": "ohm", "RF": "ohm", "RG": "ohm", "C1": "F", "C2": "F"}


def _built_stage(table: dict[str, Any], response: str, topology: str, ctx: _Ctx) -> BuiltStageSpec:
    _check_keys(table, ("response", "topology", *_PART_UNITS), ctx)
    stage_response = _choice(table.get("response", response), RESPONSES, ctx.at("response"))
    if stage_response == "bandpass":
        raise ctx.at("response").fail(
            "each stage of a band-pass is a lowpass or a highpass", "set response per stage"
        )
    stage_topology = _choice(table.get("topology", topology), TOPOLOGIES, ctx.at("topology"))
    parts = {}
    for key, unit in _PART_UNITS.items():
        if key in table:
            example = '"10k"' if unit == "ohm" else '"22n"'
            parts[key] = _quantity(table[key], unit, ctx.at(key), example)
    needed = ["R1", "C1"] + (["R2", "C2"] if ("R2" in parts or "C2" in parts) else [])
    if stage_topology != "unity":
        needed += ["RF", "RG"]
    missing = [k for k in needed if k not in parts]
    if missing:
        raise ctx.fail(
            f"missing part {', '.join(missing)} for a {stage_topology} stage",
            "give R1, C1 (and R2, C2 for second order; RF, RG for a stage with gain)",
        )
    if stage_topology == "unity" and ("RF" in parts or "RG" in parts):
        raise ctx.fail("RF/RG given on a unity-gain stage", 'set topology = "gain" or remove them')
    return BuiltStageSpec(stage_response, stage_topology, parts)


DESIGN_KEYS = ("title", "parts", "amplifier", "signal", "filter")


def parse_design(data: dict[str, Any], source: str) -> DesignSpec:
    """Validate a decoded TOML document (``source`` names it in error messages)."""
    ctx = _Ctx(source)
    _check_keys(data, DESIGN_KEYS, ctx)
    parts = _parts(data.get("parts", {}), ctx.at("parts"))
    amp = _amplifier(data["amplifier"], ctx.at("amplifier")) if "amplifier" in data else None
    signal = data.get("signal", {})
    _check_keys(signal, ("full_scale",), ctx.at("signal"))
    full_scale = _quantity(
        signal.get("full_scale", "1 V"), "V", ctx.at("signal.full_scale"), '"2 V"'
    )
    if "filter" not in data:
        raise ctx.at("filter").fail("the design has no filter", "add at least one [[filter]] table")
    tables = _table_list(data["filter"], ctx.at("filter"))
    filters = tuple(_filter(t, i, ctx) for i, t in enumerate(tables))
    names = [f.name for f in filters]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise ctx.at("filter").fail(
            f"filter name {dupes[0]!r} is used twice", "give each filter its own name"
        )
    return DesignSpec(
        source, str(data.get("title", Path(source).stem)), parts, amp, full_scale, filters
    )


def load_design(path: str | Path) -> DesignSpec:
    """Read and validate a design file.

    Raises
    ------
    UserInputError
        The file is missing, unreadable, not TOML, or breaks a rule of the schema.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise UserInputError(f"{path}: no such design file; check the path") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise UserInputError(
            f"{path}: cannot read the design file ({exc}); check the file"
        ) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise UserInputError(f"{path}: not valid TOML ({exc}); fix the syntax there") from None
    return parse_design(data, str(path))
