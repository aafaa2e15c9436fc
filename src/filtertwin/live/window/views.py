"""What the preview window draws, as plain data: stage cards, response curves, spectra.

Pure functions of designs, twins and sample blocks; the server turns their results into
JSON. Magnitudes are in dB, frequencies in Hz, delays in seconds.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from filtertwin.circuit import units
from filtertwin.circuit.design import Design, Stage
from filtertwin.digital.twin import FilterTwin, Twin
from filtertwin.live.window.link import SessionView

PLOT_POINTS = 240
PLOT_LOW_HZ = 10.0
PLOT_HIGH_HZ = 24000.0
FLOOR_DB = -140.0
SPECTRUM_FRAMES = 4096
SPECTRUM_BINS = 160
SPECTRUM_LOW_HZ = 20.0
ENVELOPE_BUILDS = 400
TOPOLOGY_WORDS = {"unity": "unity-gain", "equal": "equal-component", "gain": "with gain"}
RESPONSE_WORDS = {"lowpass": "low-pass", "highpass": "high-pass"}


def db(h: np.ndarray) -> list[float]:
    """Magnitude in dB, floored at ``FLOOR_DB``, rounded for the page."""
    mag = np.maximum(np.abs(h), 10 ** (FLOOR_DB / 20))
    return rounded(20 * np.log10(mag), 3)


def rounded(values: np.ndarray, decimals: int) -> list[float]:
    """Values rounded for the page, as a list (non-finite ones stay, the server nulls them)."""
    return np.round(np.asarray(values, float), decimals).tolist()


def plot_grid_hz(rate_hz: float) -> np.ndarray:
    """Log-spaced plot frequencies up to just below the stream's Nyquist frequency."""
    top = min(PLOT_HIGH_HZ, 0.499 * rate_hz)
    return np.geomspace(PLOT_LOW_HZ, top, PLOT_POINTS)


def _number(value: float | None, digits: int = 4) -> float | None:
    if value is None or not math.isfinite(value):
        return None
    return float(f"{value:.{digits}g}")


def stage_card(
    way: str,
    filter_name: str,
    stage: Stage,
    target: Any,
    series: dict[str, str],
    clipping: bool,
    slewing: bool = False,
) -> dict[str, Any]:
    """One stage as a card: topology, parts, target and as-built f0 and Q, peak, flags.

    Parameters
    ----------
    way, filter_name : str
        The way ("low") and the design's name of its filter.
    stage : Stage
        The stage as built now.
    target : Target or None
        What the synthesis aimed at (of the design before any part edit), if known.
    series : dict
        E-series of each part name.
    clipping, slewing : bool
        Whether the stage reached its amplifier's swing (slew rate) in the last second.

    Notes
    -----
    ``label`` is the stage as the status line and the meters name it ("woofer s2"): the
    page lights the card's clip and slew flags from the live meters by it.
    """
    c = stage.circuit
    parts = [
        {
            "name": name,
            "value": value,
            "text": units.format_letter_code(value, "C" if name.startswith("C") else "R"),
            "series": series[name],
        }
        for name, value in c.parts().items()
    ]
    return {
        "way": way,
        "filter": filter_name,
        "stage": stage.index,
        "title": f"{way} · stage {stage.index}",
        "kind": f"{TOPOLOGY_WORDS.get(c.topology, c.topology)} "
        f"{RESPONSE_WORDS.get(c.response, c.response)}, order {c.order}",
        "parts": parts,
        "target_f0_hz": None if target is None else _number(target.f0_hz),
        "target_q": None if target is None else _number(target.q),
        "built_f0_hz": _number(stage.built.f0_hz, 17),
        "built_q": _number(stage.built.q, 17),
        "gain": _number(c.gain),
        "peak_db": _number(stage.peak_gain_db, 3),
        "clip_input_dbfs": _number(stage.clip_input_dbfs, 3),
        "label": stage_label(filter_name, stage.index),
        "clipping": clipping,
        "slewing": slewing,
    }


def stage_label(filter_name: str, stage: int) -> str:
    """A stage as the status line and the meters name it: the filter's name and "s" index."""
    return f"{filter_name} s{stage}"


def part_series(design: Design) -> dict[str, str]:
    """E-series each part steps through (as the ``part`` command steps it)."""
    p = design.spec.parts
    return {
        "R1": p.resistor_series,
        "R2": p.resistor_series,
        "C1": p.capacitor_series,
        "C2": p.capacitor_series,
        "RF": p.gain_series,
        "RG": p.gain_series,
    }


def _targets(original: Design | None) -> dict[tuple[str, int], Any]:
    if original is None:
        return {}
    return {(f.name, s.index): s.target for f in original.filters for s in f.stages}


def stage_cards(
    ways: Sequence[str],
    design: Design,
    original: Design | None,
    clipping: Sequence[str],
    slewing: Sequence[str] = (),
) -> list[dict[str, Any]]:
    """Every stage of every way of a candidate, in signal order, way by way.

    ``clipping`` and ``slewing`` name stages as :func:`stage_label` does.
    """
    targets = _targets(original)
    series = part_series(design)
    cards = []
    for way, f in zip(ways, design.filters, strict=True):
        for s in f.stages:
            target = s.target if s.target is not None else targets.get((f.name, s.index))
            label = stage_label(f.name, s.index)
            cards.append(
                stage_card(way, f.name, s, target, series, label in clipping, label in slewing)
            )
    return cards


def _twin_response(ft: FilterTwin, f_hz: np.ndarray) -> np.ndarray:
    z1 = np.exp(-2j * math.pi * f_hz / ft.rate_hz)
    h = np.ones(f_hz.shape, complex)
    for b0, b1, b2, _, a1, a2 in ft.sos:
        h *= (b0 + b1 * z1 + b2 * z1 * z1) / (1 + a1 * z1 + a2 * z1 * z1)
    return h


def response_curves(
    ways: Sequence[str], design: Design, twin: Twin, f_hz: np.ndarray
) -> dict[str, Any]:
    """As-built analog response and the twin's, per way and summed.

    Returns
    -------
    dict
        ``ways``: per way ``{"way", "analog_db", "twin_db", "phase_deg", "delay_s"}``;
        ``sum``: the same for the sum of the ways (complex sum, as the ears hear a
        crossover's outputs together); magnitudes in dB, phase unwrapped in degrees.
    """
    total = np.zeros(f_hz.shape, complex)
    total_twin = np.zeros(f_hz.shape, complex)
    below = f_hz < 0.5 * twin.rate_hz
    curves = []
    for way, f, ft in zip(ways, design.filters, twin.filters, strict=True):
        h = f.frequency_response(f_hz)
        ht = np.where(below, _twin_response(ft, np.where(below, f_hz, 0.0)), 0.0)
        total += h
        total_twin += ht
        curves.append(
            {
                "way": way,
                "analog_db": db(h),
                "twin_db": db(ht),
                "phase_deg": _phase(h),
                "delay_s": _delay(f.group_delay_s(f_hz)),
            }
        )
    summed = {
        "way": "sum",
        "analog_db": db(total),
        "twin_db": db(total_twin),
        "phase_deg": _phase(total),
        "delay_s": _delay(_sum_delay(total, f_hz)),
    }
    return {"ways": curves, "sum": summed}


def _phase(h: np.ndarray) -> list[float]:
    return rounded(np.degrees(np.unwrap(np.angle(h))), 2)


def _delay(d: np.ndarray) -> list[float]:
    return rounded(d, 9)  # to the nanosecond


def _sum_delay(h: np.ndarray, f_hz: np.ndarray) -> np.ndarray:
    """Group delay of a summed response from its unwrapped phase (finite differences)."""
    phase = np.unwrap(np.angle(h))
    return -np.gradient(phase, 2 * math.pi * f_hz)


def tolerance_envelope(
    ways: Sequence[str], design: Design, f_hz: np.ndarray, builds: int = ENVELOPE_BUILDS
) -> list[dict[str, Any]]:
    """Lowest and highest magnitude over tolerance builds (Monte Carlo), per way."""
    from filtertwin.checks.tolerance import run_tolerance

    result = run_tolerance(design, builds, seed=1, f_hz=f_hz)
    return [
        {
            "way": way,
            "min_db": rounded(np.maximum(ft.min_db, FLOOR_DB), 3),
            "max_db": rounded(np.maximum(ft.max_db, FLOOR_DB), 3),
        }
        for way, ft in zip(ways, result.filters, strict=True)
    ]


def spectrum_grid_hz(rate_hz: float) -> np.ndarray:
    """Edges of the spectrum's log-spaced bands, 20 Hz to the Nyquist frequency."""
    return np.geomspace(SPECTRUM_LOW_HZ, 0.5 * rate_hz, SPECTRUM_BINS + 1)


class SpectrumBands:
    """Power spectra of blocks of ``frames`` samples in log-spaced bands (plan made once).

    Each band holds the largest FFT bin inside it (or the nearest bin when a band is
    narrower than a bin), so a sine reads its level whatever band it falls in; the level is
    in dB re a full-scale sine (Hann window, amplitude-corrected).
    """

    def __init__(self, frames: int, rate_hz: float) -> None:
        self.window = np.hanning(frames)
        self.scale = (2.0 / float(np.sum(self.window))) ** 2
        freqs = np.fft.rfftfreq(frames, 1.0 / rate_hz)
        edges = spectrum_grid_hz(rate_hz)
        lo = np.minimum(np.searchsorted(freqs, edges[:-1]), len(freqs) - 1)
        hi = np.maximum(lo + 1, np.searchsorted(freqs, edges[1:]))
        self.starts = lo
        self.single = hi - lo <= 1
        self.centres_hz = rounded(np.sqrt(edges[:-1] * edges[1:]), 2)

    def __call__(self, x: np.ndarray) -> list[float]:
        power = np.abs(np.fft.rfft(x * self.window)) ** 2 * self.scale
        peaks = np.maximum.reduceat(power, self.starts)
        peaks = np.where(self.single, power[self.starts], peaks)
        return rounded(10 * np.log10(np.maximum(peaks, 1e-16)), 1)


_PLANS: dict[tuple[int, float], SpectrumBands] = {}


def _plan(frames: int, rate_hz: float) -> SpectrumBands:
    key = (frames, float(rate_hz))
    if key not in _PLANS:
        _PLANS[key] = SpectrumBands(frames, rate_hz)
    return _PLANS[key]


def spectrum_db(x: np.ndarray, rate_hz: float) -> list[float]:
    """:class:`SpectrumBands` of ``x`` (plans kept per length and rate)."""
    return _plan(len(x), rate_hz)(x)


def spectrum_centres_hz(frames: int, rate_hz: float) -> list[float]:
    """Centre frequency of each band of :func:`spectrum_db` (geometric mean of its edges)."""
    return _plan(frames, rate_hz).centres_hz


def session_state(
    view: SessionView,
    originals: Sequence[Design],
    clipping: Sequence[str],
    slewing: Sequence[str] = (),
) -> dict:
    """The whole page state after a change (JSON-ready); little in blind trials."""
    if view.blind is not None and not view.blind["finished"]:
        return {"blind": view.blind, "level_db": view.level_db}
    f_hz = plot_grid_hz(view.processing_rate_hz)
    candidates = [
        {
            "label": c.label,
            "name": c.name,
            "title": c.design.title,
            "ways": list(c.ways),
            "filters": [f.name for f in c.design.filters],
            "fidelity": [
                {
                    "way": w,
                    "filter": ft.name,
                    "max_db": _number(ft.fidelity.max_db, 3),
                    "at_hz": _number(ft.fidelity.at_hz, 4),
                    "max_deg": _number(ft.fidelity.max_deg, 3),
                    "at_deg_hz": _number(ft.fidelity.at_deg_hz, 4),
                }
                for w, ft in zip(c.ways, t.filters, strict=True)
            ],  # fmt: skip
            "match_db": _number(view.match_offsets_db[i], 3),
            "corners": [
                {
                    "way": w,
                    "filter": f.name,
                    "corner_hz": list(f.spec.corner_hz),
                    "movable": f.spec.kind == "alignment",
                }
                for w, f in zip(c.ways, c.design.filters, strict=True)
            ],  # fmt: skip
        }
        for i, (c, t) in enumerate(zip(view.candidates, view.twins, strict=True))
    ]
    state: dict[str, Any] = {
        "version": view.version,
        "candidates": candidates,
        "selected": view.selected,
        "solo": view.solo,
        "muted": sorted(view.muted),
        "level_db": view.level_db,
        "ceiling_dbfs": view.ceiling_dbfs,
        "can_undo": view.can_undo,
        "can_redo": view.can_redo,
        "capture": view.capture,
        "noise": view.noise,
        "blind": view.blind,
        "f_hz": rounded(f_hz, 3),
    }
    index = view.selected
    if index is not None:
        c, twin = view.candidates[index], view.twins[index]
        state["cards"] = stage_cards(c.ways, c.design, originals[index], clipping, slewing)
        state["response"] = response_curves(c.ways, c.design, twin, f_hz)
        previous = view.previous.get(index)
        if previous is not None:
            state["ghost"] = ghost_curves(c.ways, previous, f_hz)
    return state


def ghost_curves(ways: Sequence[str], design: Design, f_hz: np.ndarray) -> dict[str, Any]:
    """The analog magnitudes of a design before an edit, per way and summed (grey curves)."""
    responses = [f.frequency_response(f_hz) for f in design.filters]
    return {
        "ways": [{"way": w, "analog_db": db(h)} for w, h in zip(ways, responses, strict=True)],
        "sum": {"analog_db": db(np.sum(responses, axis=0))},
    }
