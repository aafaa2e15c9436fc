"""Figures of the three checks (PNG, matplotlib's Agg renderer, written atomically).

Each function takes a check result from :mod:`filtertwin.checks` and a file name, draws one
figure and returns the path written. Figures are made without pyplot (no global state), so
they are safe to make from any thread.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterable
from pathlib import Path

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from filtertwin.checks.alias import AliasCheck
from filtertwin.checks.crossover import CrossoverCheck
from filtertwin.checks.tolerance import WORST_WINDOW_DB, FilterTolerance, ToleranceResult
from filtertwin.circuit import units
from filtertwin.files.outputs import atomic_path

__all__ = ["alias_figure", "crossover_figure", "tolerance_figure"]

DPI = 120
WAY_COLOURS = ("tab:blue", "tab:orange", "tab:green", "tab:purple", "tab:brown")
BEFORE = "0.55"  # grey: without the filter
AFTER = "tab:blue"  # with the filter


def _new_figure(width_in: float, height_in: float) -> Figure:
    fig = Figure(figsize=(width_in, height_in), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _save(
    fig: Figure, path: str | os.PathLike[str], protect: Iterable[str | os.PathLike[str]]
) -> Path:
    path = Path(path)
    with atomic_path(path, protect=protect) as tmp:
        fig.savefig(tmp, format="png", dpi=DPI)
    return path


def _db10(p: np.ndarray) -> np.ndarray:
    return 10 * np.log10(np.maximum(p, 1e-30))


def _hz(value: float) -> str:
    return units.format_si(value, "Hz", 3)


def _khz_axis(ax: Axes, top_hz: float) -> float:
    """Use kHz on a linear frequency axis above 2 kHz; returns the divisor."""
    if top_hz >= 2000:
        ax.set_xlabel("frequency (kHz)")
        return 1000.0
    ax.set_xlabel("frequency (Hz)")
    return 1.0


def alias_figure(
    check: AliasCheck,
    path: str | os.PathLike[str],
    *,
    protect: Iterable[str | os.PathLike[str]] = (),
) -> Path:
    """Recording spectrum with the filter's response, and the folded ADC captures.

    Top: the recording's spectrum before and after the filter with the analog model's gain
    (right axis) and the requirement point. Bottom: what the ADC captures, without and with
    the filter, with the band of interest shaded and the aliases marked.
    """
    fig = _new_figure(9.0, 7.5)
    top, bottom = fig.subplots(2, 1)
    fig.suptitle(
        f"Anti-alias check of '{check.filter_name}' for a {_hz(check.adc_rate_hz)} ADC: "
        f"{check.verdict} (margin {check.margin_db:+.1f} dB)",
        fontsize=12,
    )

    rec = check.recording
    scale = _khz_axis(top, rec.f_hz[-1])
    top.plot(rec.f_hz / scale, _db10(rec.without_filter), color=BEFORE, lw=0.8,
             label="recording")  # fmt: skip
    top.plot(rec.f_hz / scale, _db10(rec.with_filter), color=AFTER, lw=0.8,
             label="after the filter (digital twin)")  # fmt: skip
    top.set_ylabel("PSD (dB re 1 unit\u00b2/Hz)")
    top.set_title(f"The recording at {_hz(check.recording_rate_hz)}, before and after the filter")
    nyquist = check.adc_rate_hz / 2
    k = 2
    while k * nyquist < rec.f_hz[-1]:
        label = f"fold lines: multiples of {_hz(nyquist)} (ADC Nyquist)" if k == 2 else None
        top.axvline(k * nyquist / scale, color="0.6", lw=0.6, ls=":", zorder=0, label=label)
        k += 1
    top.axvline(nyquist / scale, color="tab:red", lw=1.0, ls="--", label="ADC Nyquist frequency")
    gain_ax = top.twinx()
    gain_ax.plot(rec.f_hz / scale, check.filter_db, color="tab:green", lw=1.2,
                 label="filter gain (analog model)")  # fmt: skip
    gain_ax.plot([check.attenuation_at_hz / scale], [-check.attenuation_db], "o", color="tab:green")
    gain_ax.plot([check.attenuation_at_hz / scale], [-check.required_db], "v", color="tab:red",
                 label=f"needed: -{check.required_db:.1f} dB")  # fmt: skip
    gain_ax.annotate(
        f"at {_hz(check.attenuation_at_hz)}: {check.attenuation_db:.1f} dB down, "
        f"needs {check.required_db:.1f} dB",
        (check.attenuation_at_hz / scale, -check.attenuation_db),
        xytext=(8, 8), textcoords="offset points", fontsize=8, color="tab:green",
    )  # fmt: skip
    d = check.droop
    gain_ax.plot([d.band_hz / scale], [d.edge_gain_db], "s", color="tab:olive", ms=5,
                 label=f"band edge: {d.edge_gain_db:+.2f} dB (largest droop "
                 f"{d.max_droop_db:.2f} dB, limit {d.limit_db:g})")  # fmt: skip
    gain_ax.set_ylabel("filter gain (dB re passband)", color="tab:green")
    gain_ax.set_ylim(max(-160.0, -check.required_db - 40), 10)
    handles = top.get_legend_handles_labels()
    more = gain_ax.get_legend_handles_labels()
    top.legend(handles[0] + more[0], handles[1] + more[1], fontsize=8, loc="upper right")
    top.set_xlim(0, rec.f_hz[-1] / scale)

    cap = check.captured
    scale = _khz_axis(bottom, cap.f_hz[-1])
    bottom.axvspan(0, check.band_hz / scale, color="tab:olive", alpha=0.12,
                   label=f"band of interest (to {_hz(check.band_hz)})")  # fmt: skip
    for p, colour, words, aliased_db in (
        (cap.without_filter, BEFORE, "without", check.aliased_without_db),
        (cap.with_filter, AFTER, "with", check.aliased_with_db),
    ):
        label = f"captured {words} the filter (aliases {aliased_db:+.1f} dB)"
        bottom.plot(cap.f_hz / scale, _db10(p), color=colour, lw=0.9, label=label)
    for i, c in enumerate(check.components):
        label = "where a component above Nyquist lands" if i == 0 else None
        bottom.axvline(c.alias_hz / scale, color="tab:red", lw=0.6, ls=":", label=label)
        bottom.annotate(
            f"{_hz(c.source_hz)} \u2192 {_hz(c.alias_hz)}",
            (c.alias_hz / scale, 1.0), xycoords=("data", "axes fraction"),
            xytext=(2, -12), textcoords="offset points", fontsize=7, color="tab:red",
            rotation=90, va="top",
        )  # fmt: skip
    bottom.set_xlim(0, cap.f_hz[-1] / scale)
    bottom.set_ylabel("PSD (dB re 1 unit\u00b2/Hz)")
    bottom.set_title(
        f"What the ADC captures at {_hz(check.capture_rate_hz)} (aliases re in-band signal power)"
    )
    bottom.legend(fontsize=8, loc="lower left")
    return _save(fig, path, protect)


CROSSOVER_FLOOR_DB = 60.0
"""The crossover plot's magnitude axis reaches this far below the reference level."""


def _unwrapped_deg(h: np.ndarray) -> np.ndarray:
    """Phase in degrees, unwrapped along frequency, shifted by whole turns so that it starts
    within (-180, 180] at the lowest frequency."""
    deg = np.degrees(np.unwrap(np.angle(h)))
    return deg - 360.0 * np.round(deg[0] / 360.0)


def _phase_axis(ax: Axes, curves: list[np.ndarray]) -> None:
    """Limits on whole multiples of 90 degrees around the curves, ticks every 90 or 180."""
    arrays = [np.asarray(c, float) for c in curves]
    values = np.concatenate([a[np.isfinite(a)] for a in arrays])
    lo = 90.0 * math.floor(float(values.min()) / 90.0 - 0.05)
    hi = 90.0 * math.ceil(float(values.max()) / 90.0 + 0.05)
    ax.set_ylim(lo, hi)
    step = 90.0 if hi - lo <= 720 else 180.0
    ax.set_yticks(np.arange(lo, hi + 1, step))


def crossover_figure(
    check: CrossoverCheck,
    path: str | os.PathLike[str],
    *,
    protect: Iterable[str | os.PathLike[str]] = (),
) -> Path:
    """Each way's and the sum's magnitude and phase, with the tolerance band and crossovers."""
    fig = _new_figure(9.0, 7.0)
    mag, phase = fig.subplots(2, 1, sharex=True)
    lo, hi = check.band_hz
    fig.suptitle(
        f"Crossover sum: {check.verdict}, largest deviation {check.max_dev_db:.2f} dB "
        f"(limit {check.tolerance_db:g} dB, {_hz(lo)} to {_hz(hi)})",
        fontsize=12,
    )
    f = check.f_hz
    ref = check.reference_db
    mag.axhspan(ref - check.tolerance_db, ref + check.tolerance_db, color="tab:olive",
                alpha=0.15, label=f"\u00b1{check.tolerance_db:g} dB")  # fmt: skip
    for i, (name, h) in enumerate(zip(check.ways, check.responses, strict=True)):
        colour = WAY_COLOURS[i % len(WAY_COLOURS)]
        mag.semilogx(f, 20 * np.log10(np.maximum(np.abs(h), 1e-12)), color=colour, lw=1.2,
                     ls="--", label=f"way '{name}'")  # fmt: skip
        phase.semilogx(f, _unwrapped_deg(h), color=colour, lw=1.0, ls="--",
                       label=f"way '{name}'")  # fmt: skip
    mag.semilogx(f, 20 * np.log10(np.maximum(np.abs(check.summed), 1e-12)), color="black",
                 lw=1.8, label="sum")  # fmt: skip
    phase.semilogx(f, _unwrapped_deg(check.summed), color="black", lw=1.5, label="sum")
    for c in check.crossovers:
        for ax in (mag, phase):
            ax.axvline(c.f_hz, color="0.5", lw=0.7, ls=":")
        mag.annotate(
            f"{_hz(c.f_hz)}\n\u0394\u03c6 {c.phase_diff_deg:+.1f}\u00b0",
            (c.f_hz, ref - 24), xytext=(4, 0), textcoords="offset points", fontsize=8,
        )  # fmt: skip
    for ax in (mag, phase):
        ax.axvspan(f[0], lo, color="0.9", zorder=0)
        ax.axvspan(hi, f[-1], color="0.9", zorder=0)
        ax.grid(True, which="both", color="0.9", lw=0.5)
        ax.set_xlim(f[0], f[-1])
    mag.set_ylim(ref - CROSSOVER_FLOOR_DB, ref + 8)
    mag.set_ylabel("magnitude (dB)")
    mag.set_title("Magnitude: each way (dashed) and their sum (polarity included)")
    mag.legend(fontsize=8, loc="lower left")
    _phase_axis(phase, [line.get_ydata() for line in phase.get_lines()])
    phase.set_ylabel("phase (degrees, unwrapped)")
    phase.set_xlabel("frequency (Hz)")
    phase.set_title(f"Phase; polarity advice: {check.polarity.advice()}", fontsize=9)
    return _save(fig, path, protect)


def _tolerance_panel(ax: Axes, ft: FilterTolerance, worst_build: int) -> None:
    f = ft.f_hz
    ax.fill_between(f, ft.min_db, ft.max_db, color="tab:blue", alpha=0.25,
                    label="range of all builds")  # fmt: skip
    ax.semilogx(f, ft.median_db, color="tab:blue", lw=1.0, label="median build")
    ax.semilogx(f, ft.worst_db, color="tab:red", lw=1.0, ls="--",
                label=f"worst build overall (no. {worst_build})")  # fmt: skip
    ax.semilogx(f, ft.nominal_db, color="black", lw=1.3, label="nominal parts")
    m, pb = ft.mask, ft.passband_db
    p_lo, p_hi = m.pass_hz
    for level in (pb - m.ripple_db, pb + m.ripple_db):
        ax.plot([p_lo, p_hi], [level, level], color="tab:green", lw=1.5)
    for s in m.stops:
        ax.plot([s.lo_hz, s.hi_hz], [pb - s.min_atten_db] * 2, color="tab:green", lw=1.5)
    ax.plot([], [], color="tab:green", lw=1.5, label="mask")
    deepest = min((pb - s.min_atten_db for s in m.stops), default=pb - 40)
    top = pb + max(6.0, float(ft.max_db.max()) - pb + 2)
    ax.set_ylim(max(float(ft.min_db.min()), deepest - 30), top)
    ax.set_xlim(f[0], f[-1])
    ax.grid(True, which="both", color="0.9", lw=0.5)
    ax.set_ylabel("magnitude (dB)")
    note = "; nominal is outside the mask" if not ft.nominal_passes else ""
    ax.set_title(f"'{ft.name}': yield {100 * ft.yield_fraction:.1f} %{note}", fontsize=10)
    ax.legend(fontsize=7, loc="lower left")


def worst_here_db(ft: FilterTolerance) -> float:
    """How far the overall worst build deviates from nominal in this filter, measured where
    the nominal response is within ``WORST_WINDOW_DB`` of the passband gain (as the check
    measures every build)."""
    window = ft.nominal_db >= ft.passband_db - WORST_WINDOW_DB
    return float(np.max(np.abs(ft.worst_db[window] - ft.nominal_db[window])))


def _deviation_panel(ax: Axes, ft: FilterTolerance, worst_build: int) -> None:
    f, nominal = ft.f_hz, ft.nominal_db
    ax.fill_between(f, ft.min_db - nominal, ft.max_db - nominal, color="tab:blue", alpha=0.25,
                    label="range of all builds")  # fmt: skip
    ax.semilogx(f, ft.median_db - nominal, color="tab:blue", lw=1.0, label="median build")
    ax.semilogx(f, ft.worst_db - nominal, color="tab:red", lw=1.0, ls="--",
                label=f"worst build overall (no. {worst_build}): "
                      f"{worst_here_db(ft):.2f} dB here")  # fmt: skip
    outside = nominal < ft.passband_db - WORST_WINDOW_DB  # not measured: shaded
    if outside.any():
        ax.fill_between(f, 0, 1, where=outside, color="0.85", alpha=0.6, lw=0,
                        transform=ax.get_xaxis_transform(),
                        label=f"more than {WORST_WINDOW_DB:g} dB below the passband "
                              "(not measured)")  # fmt: skip
    ax.axhline(0.0, color="black", lw=1.0)
    window = nominal >= ft.passband_db - 40
    spread = np.concatenate([(ft.min_db - nominal)[window], (ft.max_db - nominal)[window]])
    span = max(1.0, float(np.abs(spread).max()) * 1.15)
    ax.set_ylim(-span, span)
    ax.set_xlim(f[0], f[-1])
    ax.grid(True, which="both", color="0.9", lw=0.5)
    ax.set_ylabel("deviation from nominal (dB)")
    ax.set_title(
        f"any build: up to {ft.worst_deviation_db:.2f} dB from nominal "
        f"(within {WORST_WINDOW_DB:g} dB of the passband)",
        fontsize=9,
    )
    ax.legend(fontsize=7, loc="lower left")


def tolerance_figure(
    result: ToleranceResult,
    path: str | os.PathLike[str],
    *,
    protect: Iterable[str | os.PathLike[str]] = (),
) -> Path:
    """Per filter: the builds' magnitude envelope (range and median) with the nominal, the
    worst build and the mask (left), and the same as deviation from nominal (right)."""
    n = len(result.filters)
    fig = _new_figure(12.0, 3.6 * n + 0.6)
    axes = fig.subplots(n, 2, squeeze=False)
    dist = "uniform" if result.distribution == "uniform" else "Gaussian (tolerance = 3\u03c3)"
    r_pct, c_pct = 100 * result.resistor_tolerance, 100 * result.capacitor_tolerance
    fig.suptitle(
        f"{result.builds} tolerance builds, {dist}, R \u00b1{r_pct:g} %, C \u00b1{c_pct:g} %: "
        f"yield {100 * result.yield_fraction:.1f} %\nworst build overall (red): no. "
        f"{result.worst_build}, up to {result.worst_deviation_db:.2f} dB from nominal "
        f"within {WORST_WINDOW_DB:g} dB of the passband",
        fontsize=11,
    )
    for (left, right), ft in zip(axes, result.filters, strict=True):
        _tolerance_panel(left, ft, result.worst_build)
        _deviation_panel(right, ft, result.worst_build)
    for ax in axes[-1]:
        ax.set_xlabel("frequency (Hz)")
    return _save(fig, path, protect)
