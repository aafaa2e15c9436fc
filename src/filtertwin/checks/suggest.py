"""What would pass: anti-alias designs that meet the stopband requirement and the droop limit.

The search runs in three steps, cheapest first:

1. **Ideal-prototype screen.** For every alignment (Butterworth, Bessel normalised to -3 dB
   at its corner, Chebyshev at a few ripples no larger than the droop limit, Linkwitz-Riley
   2/4/8) and order 1 to 10, the normalised prototype gives the lowest corner whose droop
   over the band stays within the limit (never below the band itself: the band must lie in
   the passband) and the highest corner whose attenuation at (ADC rate - band) reaches the
   requirement. Where the first is below the second, the candidate goes on.
2. **Synthesis.** Only the survivors (the lowest few orders of each alignment) are built
   with real parts, the base design's parts rules and amplifier, and checked as built.
3. **Yield.** Each built candidate is drawn ``builds`` times within its part tolerances
   (:func:`filtertwin.checks.tolerance.draw_parts`, vectorised closed-form polynomials);
   a build passes when it meets both the requirement and the droop limit. The same draws,
   moved in frequency, give the yield at nine corners across the screened range; the
   candidate is built again at the best one (the one nearest the middle among equals).

The table is ranked fewest amplifiers first, then stopband margin.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from filtertwin.checks import tolerance
from filtertwin.checks.droop import passband_droop
from filtertwin.circuit import prototypes
from filtertwin.circuit.design import Design, build_design
from filtertwin.errors import UserInputError

__all__ = ["DEFAULT_BUILDS", "DEFAULT_MIN_YIELD", "Suggestion", "suggest_designs", "design_toml"]

DEFAULT_BUILDS = 500
DEFAULT_MIN_YIELD = 0.99
"""A design is suggested when at least 99 % of its tolerance builds pass (common practice
for a production yield target)."""
CHEBYSHEV_RIPPLES_DB = (0.1, 0.5, 1.0)
PER_ALIGNMENT = 2
"""Passing orders kept per alignment (the lowest ones)."""
TRIES_PER_ALIGNMENT = 4
"""Orders synthesised per alignment at most (synthesis is the slow step)."""
GRID_POINTS = 64
CORNER_STEPS = 9
MAX_SUGGESTIONS = 6
"""Rows of the table (each built again with the real amplifier)."""
"""Corners tried across the screened range for the best yield."""


@dataclass(frozen=True)
class Suggestion:
    """One design that would pass.

    Attributes
    ----------
    alignment : str
    ripple_db : float or None
        Chebyshev passband ripple.
    order : int
    corner_hz : float
    amplifiers : int
        Stages (one amplifier each).
    attenuation_db : float
        As-built attenuation at (ADC rate - band).
    margin_db : float
        ``attenuation_db`` minus the requirement.
    droop_db : float
        As-built largest droop over the band.
    yield_fraction : float
        Fraction of tolerance builds that pass.
    builds : int
    topology : str
        Stage topology used ("unity", or "equal" where unity gain cannot reach the Q).
    design : Design
        The built design (not part of :meth:`to_dict`).
    """

    alignment: str
    ripple_db: float | None
    order: int
    corner_hz: float
    amplifiers: int
    attenuation_db: float
    margin_db: float
    droop_db: float
    yield_fraction: float
    builds: int
    topology: str
    design: Design

    @property
    def label(self) -> str:
        if self.alignment == "chebyshev":
            return f"chebyshev {self.ripple_db:g} dB"
        return self.alignment

    def to_dict(self) -> dict[str, Any]:
        return {
            "alignment": self.alignment,
            "ripple_db": self.ripple_db,
            "order": self.order,
            "corner_hz": self.corner_hz,
            "amplifiers": self.amplifiers,
            "attenuation_db": self.attenuation_db,
            "margin_db": self.margin_db,
            "max_droop_db": self.droop_db,
            "yield": self.yield_fraction,
            "builds": self.builds,
            "topology": self.topology,
        }


def _variants(max_droop_db: float) -> list[tuple[str, float | None, tuple[int, ...]]]:
    orders = tuple(range(1, prototypes.MAX_ORDER + 1))
    out: list[tuple[str, float | None, tuple[int, ...]]] = [
        ("butterworth", None, orders),
        ("bessel", None, orders),
    ]
    out += [("chebyshev", r, orders[1:]) for r in CHEBYSHEV_RIPPLES_DB if r <= max_droop_db]
    out.append(("linkwitz-riley", None, prototypes.LINKWITZ_RILEY_ORDERS))
    return out


def _loss_db(poles: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Loss (dB re DC) of the unity-DC all-pole prototype at normalised frequencies ``w``."""
    h = np.prod((-poles)[None, :] / (1j * w[:, None] - poles[None, :]), axis=1)
    return -20 * np.log10(np.abs(h))


def corner_range(
    alignment: str,
    order: int,
    ripple_db: float | None,
    band_hz: float,
    stop_hz: float,
    required_db: float,
    max_droop_db: float,
) -> tuple[float, float]:
    """Lowest corner meeting the droop limit (and at least the band) and highest corner
    meeting the requirement at ``stop_hz``, from the ideal prototype (Hz)."""
    poles = prototypes.prototype_poles(alignment, order, ripple_db=ripple_db, bessel_norm="mag")
    w = np.geomspace(1e-3, 1e3, 6000)
    loss = np.abs(_loss_db(poles, w))
    worst_so_far = np.maximum.accumulate(loss)
    ok = np.nonzero(worst_so_far <= max_droop_db)[0]
    w_droop = float(w[ok[-1]]) if len(ok) else 0.0
    low = max(band_hz / w_droop, band_hz) if w_droop > 0 else math.inf
    short = np.nonzero(loss < required_db)[0]
    w_stop = float(w[short[-1] + 1]) if len(short) and short[-1] + 1 < len(w) else math.inf
    high = stop_hz / w_stop if len(short) else math.inf
    return low, high


def _round3(value: float) -> float:
    digits = 2 - math.floor(math.log10(value))
    return round(value, digits)


def _data(base: Design | None, alignment: str, order: int, ripple: float | None,
          corner_hz: float, name: str, topology: str = "unity",
          amplifier: bool = True) -> dict[str, Any]:  # fmt: skip
    """A design file's content (our schema) for one candidate on the base design's parts."""
    flt: dict[str, Any] = {"name": name, "response": "lowpass", "alignment": alignment,
                           "order": order, "corner": corner_hz, "topology": topology}  # fmt: skip
    if ripple is not None:
        flt["ripple_db"] = ripple
    if alignment == "bessel":
        flt["bessel_norm"] = "mag"
    data: dict[str, Any] = {
        "title": f"Anti-alias low-pass: {alignment} order {order} at {corner_hz:g} Hz "
        "(suggested by filtertwin alias)",
        "filter": [flt],
    }
    if base is None:
        return data
    spec = base.spec
    p = spec.parts
    data["parts"] = {
        "resistors": p.resistor_series,
        "capacitors": p.capacitor_series,
        "gain_resistors": p.gain_series,
        "resistor_tolerance": f"{100 * p.resistor_tolerance:g}%",
        "capacitor_tolerance": f"{100 * p.capacitor_tolerance:g}%",
        "resistor_range": [f"{v:g} ohm" for v in p.resistor_range_ohm],
        "capacitor_range": [f"{v:g} F" for v in p.capacitor_range_f],
    }
    a = spec.amplifier
    if a is not None and amplifier:
        amp: dict[str, Any] = {} if a.preset is None else {"preset": a.preset}
        amp |= {
            "gbw": f"{a.gbw_hz:g} Hz",
            "swing": f"{a.swing_v:g} V",
            "slew": f"{a.slew_v_per_s:g} V/s",
            "noise_voltage": f"{a.noise_v_per_rthz:g} V",
            "noise_current": f"{a.noise_a_per_rthz:g} A",
            "open_loop_gain_db": round(20 * math.log10(a.open_loop_gain), 6),
            "output_resistance": a.output_resistance_ohm,
        }
        data["amplifier"] = amp
    data["signal"] = {"full_scale": f"{spec.full_scale_v:g} V"}
    return data


def _build(data: dict[str, Any]) -> Design:
    from filtertwin.circuit.spec import parse_design

    return build_design(parse_design(data, "<suggestion>"))


TOPOLOGIES = ("unity", "equal")
"""Tried in this order: unity gain where the capacitor ratios reach the Q, else equal parts."""


def _first_buildable(base: Design | None, alignment: str, order: int, ripple: float | None,
                     corner_hz: float, name: str, amplifier: bool = False,
                     topologies: tuple[str, ...] = TOPOLOGIES) -> Design | None:  # fmt: skip
    """The candidate built with the first topology the parts rules reach (None: none).
    Without ``amplifier`` the synthesis assumes an ideal amplifier (fast, for the search)."""
    for topology in topologies:
        try:
            return _build(
                _data(base, alignment, order, ripple, corner_hz, name, topology, amplifier)
            )
        except UserInputError:
            continue
    return None


def _yields(design: Design, band_hz: float, stop_hz: float, required_db: float,
            max_droop_db: float, builds: int, seed: int,
            corners_hz: np.ndarray) -> np.ndarray:  # fmt: skip
    """Fraction of tolerance builds meeting the requirement at ``stop_hz`` and the droop, for
    the design moved to each of ``corners_hz`` (by scaling frequency, as scaling every
    capacitor would: the same draws serve every corner)."""
    filt = design.filters[0]
    corner = float(filt.spec.corner_hz[0])
    draws = tolerance.draw_parts(design, builds, seed=seed)[0]
    f = np.concatenate([np.linspace(band_hz / GRID_POINTS, band_hz, GRID_POINTS), [stop_hz]])
    scaled = np.concatenate([f * corner / c for c in corners_hz])
    power = np.ones((builds, len(scaled)))
    for stage, parts in zip(filt.stages, draws, strict=True):
        b, a = tolerance.stage_polynomials(stage.circuit.response, stage.circuit.order, parts,
                                           design.amplifier)  # fmt: skip
        power *= tolerance.magnitude_sq(b, a, scaled)
    db = (10 * np.log10(np.maximum(power, 1e-300)) - filt.passband_db).reshape(
        builds, len(corners_hz), len(f)
    )
    ok = (-db[:, :, -1] >= required_db) & (np.max(np.abs(db[:, :, :-1]), axis=2) <= max_droop_db)
    return np.asarray(ok.mean(axis=0))


def _candidate(base: Design | None, alignment: str, order: int, ripple: float | None,
               corners: tuple[float, float], args: tuple[float, float, float, float, int, int],
               name: str) -> tuple[Design, float] | None:  # fmt: skip
    """Build a candidate in the middle of its corner range, move it to the corner where the
    most tolerance builds pass, and build it there: the design and its yield."""
    band_hz, stop_hz, required_db, max_droop_db, builds, seed = args
    low, high = corners
    middle = _round3(math.sqrt(low * high) if math.isfinite(high) else 2 * low)
    design = _first_buildable(base, alignment, order, ripple, middle, name)
    if design is None:
        return None
    top = high if math.isfinite(high) else 4 * low
    grid = np.geomspace(low, top, CORNER_STEPS)
    shares = _yields(design, band_hz, stop_hz, required_db, max_droop_db, builds, seed, grid)
    best = float(np.max(shares))
    pick = grid[shares >= best - 1e-12]
    corner = _round3(float(pick[np.argmin(np.abs(np.log(pick / middle)))]))
    if corner != middle:
        moved = _first_buildable(base, alignment, order, ripple, corner, name)
        design = moved if moved is not None else design
    return design, best


def suggest_designs(
    adc_rate_hz: float,
    band_hz: float,
    required_db: float,
    *,
    max_droop_db: float = 3.0,
    base: Design | None = None,
    builds: int = DEFAULT_BUILDS,
    min_yield: float = DEFAULT_MIN_YIELD,
    seed: int = 0,
    name: str = "antialias",
) -> tuple[Suggestion, ...]:
    """Anti-alias low-pass designs that would pass ``alias``, ranked.

    Parameters
    ----------
    adc_rate_hz, band_hz : float
        The ADC's rate and the top of the band of interest (Hz).
    required_db : float
        Attenuation needed at ``adc_rate_hz - band_hz``.
    max_droop_db : float
        Largest droop allowed over the band.
    base : Design, optional
        Parts rules, amplifier and full scale for the candidates (default: the schema's).
    builds : int
        Tolerance builds per candidate.
    min_yield : float
        Fraction of builds that must pass (0 to 1).
    seed : int
        Seed of the tolerance draws.
    name : str
        Name of the filter in the designs.

    Returns
    -------
    tuple of Suggestion
        Fewest amplifiers first, then the largest stopband margin; empty when nothing up to
        order 10 passes.

    Raises
    ------
    UserInputError
        A band not below the ADC's Nyquist frequency, or a yield target outside 0..1.
    """
    if not 0 < band_hz <= adc_rate_hz / 2:
        raise UserInputError(
            f"band {band_hz:g} Hz must lie below the ADC's Nyquist frequency {adc_rate_hz / 2:g} Hz"
        )
    if not 0 < min_yield <= 1:
        raise UserInputError(f"yield target {min_yield:g} must be above 0 and at most 1 (100 %)")
    stop_hz = adc_rate_hz - band_hz
    found: list[Suggestion] = []
    args = (band_hz, stop_hz, required_db, max_droop_db, builds, seed)
    for alignment, ripple, orders in _variants(max_droop_db):
        kept = tried = 0
        for order in orders:
            low, high = corner_range(alignment, order, ripple, band_hz, stop_hz, required_db,
                                     max_droop_db)  # fmt: skip
            if not low < high or kept >= PER_ALIGNMENT or tried >= TRIES_PER_ALIGNMENT:
                continue
            tried += 1
            built = _candidate(base, alignment, order, ripple, (low, high), args, name)
            if built is None:
                continue  # the parts rules cannot build it
            design, share = built
            suggestion = _assess(design, alignment, ripple, order, args)
            if suggestion is not None and share >= min_yield:
                kept += 1
                found.append(suggestion)
    found.sort(key=lambda s: (s.amplifiers, -s.margin_db))
    # the search assumed an ideal amplifier: build the best again with the real one
    if base is None or base.amplifier is None:
        return tuple(found[:MAX_SUGGESTIONS])
    final: list[Suggestion] = []
    for s in found:
        if len(final) >= MAX_SUGGESTIONS:
            break
        real = _first_buildable(base, s.alignment, s.order, s.ripple_db, s.corner_hz, name,
                                amplifier=True, topologies=(s.topology,))  # fmt: skip
        checked = None if real is None else _assess(real, s.alignment, s.ripple_db, s.order,
                                                     args)  # fmt: skip
        if checked is not None and checked.yield_fraction >= min_yield:
            final.append(checked)
    final.sort(key=lambda s: (s.amplifiers, -s.margin_db))
    return tuple(final)


def _assess(design: Design, alignment: str, ripple: float | None, order: int,
            args: tuple[float, float, float, float, int, int]) -> Suggestion | None:  # fmt: skip
    """A built candidate as a suggestion, or None when it fails as built."""
    band_hz, stop_hz, required_db, max_droop_db, builds, seed = args
    filt = design.filters[0]
    corner = float(filt.spec.corner_hz[0])
    gain = abs(filt.frequency_response(np.array([stop_hz]))[0]) / abs(filt.passband_gain)
    atten = -20 * math.log10(max(float(gain), 1e-300))
    droop = passband_droop(filt, band_hz, max_droop_db)
    if atten < required_db or not droop.passed:
        return None
    share = _yields(design, band_hz, stop_hz, required_db, max_droop_db, builds, seed,
                    np.array([corner]))[0]  # fmt: skip
    return Suggestion(alignment, ripple, order, corner, len(filt.stages), atten,
                      atten - required_db, droop.max_droop_db, float(share), builds,
                      filt.spec.topology, design)  # fmt: skip


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    text = str(value).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{text}"'


def design_toml(suggestion: Suggestion, base: Design | None, name: str = "antialias") -> str:
    """The design file (our schema) of a suggestion, ready for ``design``, ``render``,
    ``listen`` and ``alias``."""
    s = suggestion
    data = _data(base, s.alignment, s.order, s.ripple_db, s.corner_hz, name, s.topology)
    lines = [
        "# Anti-alias low-pass suggested by `filtertwin alias --suggest`",
        f"# {s.label}, order {s.order}, corner {s.corner_hz:g} Hz: {s.attenuation_db:.1f} dB at "
        f"(ADC rate - band), margin {s.margin_db:+.1f} dB,",
        f"# largest droop {s.droop_db:.2f} dB, {100 * s.yield_fraction:.1f} % of {s.builds} "
        "tolerance builds pass.",
        "",
        f"title = {_toml_value(data['title'])}",
    ]
    for table in ("parts", "amplifier", "signal"):
        if table in data:
            lines += ["", f"[{table}]"]
            lines += [f"{k} = {_toml_value(v)}" for k, v in data[table].items()]
    for flt in data["filter"]:
        lines += ["", "[[filter]]"]
        lines += [f"{k} = {_toml_value(v)}" for k, v in flt.items()]
    return "\n".join(lines) + "\n"


def write_design(path: str | Path, text: str, protect: tuple[Path, ...] = ()) -> Path:
    """Write a design file atomically, never over an existing file.

    Raises
    ------
    UserInputError
        If ``path`` exists.
    """
    from filtertwin.files.outputs import atomic_path

    path = Path(path)
    if path.exists():
        raise UserInputError(f"{path}: exists; give a new file name for the suggested design")
    with atomic_path(path, protect=protect) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return path
