"""PNG figures of a render: spectra before and after, and the twin against the analog model.

Figures are drawn with matplotlib's object API on the Agg canvas (no pyplot, no global
backend switch, no display needed) and saved atomically (:func:`save_png`).
"""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import scipy.signal
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from filtertwin.circuit.design import Design
from filtertwin.digital.spectra import Spectrum
from filtertwin.digital.twin import FIDELITY_WINDOW_DB, FilterTwin, Twin, resampling_response
from filtertwin.files.outputs import atomic_path

__all__ = ["response_figure", "save_png", "spectra_figure", "twin_response"]

SPECTRUM_RANGE_DB = 100.0
"""Span of the PSD axis below its top."""
RATIO_RANGE_DB = (-60.0, 12.0)
"""Axis range of output relative to input."""
RESPONSE_FLOOR_DB = -80.0
"""Bottom of the magnitude axis of the response figure."""
DPI = 110

_BEFORE_COLOUR = "0.55"
_SUM_COLOUR = "black"
_WAY_COLOURS = ("tab:blue", "tab:orange", "tab:green", "tab:red", "tab:purple", "tab:brown")


def _colour(i: int) -> str:
    return _WAY_COLOURS[i % len(_WAY_COLOURS)]


def save_png(figure: Figure, path: str | os.PathLike[str]) -> Path:
    """Save a figure as PNG under a temporary name, then rename it to ``path``.

    Parameters
    ----------
    figure : matplotlib.figure.Figure
        The figure (drawn on an Agg canvas here).
    path : path-like
        Target ``.png`` file; its folder must exist.

    Returns
    -------
    Path
        The written file.
    """
    FigureCanvasAgg(figure)
    with atomic_path(path) as temporary:
        figure.savefig(temporary, format="png", dpi=DPI)
    return Path(path)


def _db(power: np.ndarray) -> np.ndarray:
    return 10.0 * np.log10(np.maximum(power, 1e-300))


def _log_axis(ax: Axes, lo_hz: float, hi_hz: float, ylabel: str) -> None:
    ax.set_xscale("log")
    ax.set_xlim(lo_hz, hi_hz)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel(ylabel)
    ax.grid(True, which="major", alpha=0.5)
    ax.grid(True, which="minor", alpha=0.15)


def spectra_figure(
    path: str | os.PathLike[str],
    spectra: Sequence[tuple[str, Spectrum]],
    title: str,
    *,
    unit: str = "FS",
    twin: Twin | None = None,
) -> Path:
    """Welch PSD of the input and of every output, and each output relative to the input.

    Parameters
    ----------
    path : path-like
        Target PNG.
    spectra : sequence of (label, Spectrum)
        The input first (labelled as such), then the outputs; a label ``"sum"`` is drawn
        black and dashed. Multichannel spectra are averaged over channels.
    title : str
        Figure title.
    unit : str
        Signal unit for the axis label (``"FS"`` = full scale for audio).
    twin : Twin, optional
        The twin the outputs came from: where its resampling filters (or the bilinear
        transform at 1x) make the outputs fall toward Nyquist is shaded and labelled.

    Returns
    -------
    Path
        The written file.
    """
    fig = Figure(figsize=(10, 8), layout="constrained")
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
    fig.suptitle(title)
    f_hz = spectra[0][1].f_hz
    ref = spectra[0][1].channel_mean()
    lo_hz, hi_hz = f_hz[1], f_hz[-1]
    peak_db = -math.inf
    for i, (label, spectrum) in enumerate(spectra):
        power = spectrum.channel_mean()
        colour, style = _style(i, label)
        top.plot(f_hz[1:], _db(power[1:]), color=colour, ls=style, lw=1.2, label=label)
        peak_db = max(peak_db, float(np.max(_db(power[1:]))))
        if i:
            usable = ref[1:] > np.max(ref) * 1e-9
            ratio = np.where(usable, _db(power[1:]) - _db(ref[1:]), np.nan)
            bottom.plot(f_hz[1:], ratio, color=colour, ls=style, lw=1.2, label=label)
    ceiling = 10 * math.ceil(peak_db / 10) + 5 if math.isfinite(peak_db) else 0.0
    top.set_ylim(ceiling - SPECTRUM_RANGE_DB, ceiling)
    _log_axis(top, lo_hz, hi_hz, f"power density (dB re 1 {unit}²/Hz)")
    top.set_title(
        f"Welch PSD, Hann segments of {len(f_hz) * 2 - 2} frames, 50 % overlap,"
        f" {spectra[0][1].resolution_hz:.3g} Hz resolution",
        fontsize="medium",
    )
    top.tick_params(labelbottom=True)  # frequency labels on both panels
    if twin is not None:
        _mark_nyquist_rolloff((top, bottom), twin, f_hz[1:])
    top.legend(loc="lower left")
    bottom.set_ylim(*RATIO_RANGE_DB)
    _log_axis(bottom, lo_hz, hi_hz, "output / input (dB)")
    bottom.set_title(
        "each output relative to the input (measured on this recording)", fontsize="medium"
    )
    bottom.legend(loc="lower left")
    return save_png(fig, path)


ROLLOFF_DB = 0.1
"""The resampling filters' loss from which the spectra plot shades the band up to Nyquist."""


def _mark_nyquist_rolloff(axes: Sequence[Axes], twin: Twin, f_hz: np.ndarray) -> None:
    """Shade and name what makes every output fall near the input's Nyquist frequency."""
    nyquist = twin.input_rate_hz / 2
    if twin.oversampling > 1:
        loss_db = -20 * np.log10(
            np.maximum(np.abs(resampling_response(
                twin.oversampling, f_hz, twin.rate_hz, twin.resampling)), 1e-300)
        )  # fmt: skip
        beyond = f_hz[loss_db > ROLLOFF_DB]
        start = float(beyond[0]) if beyond.size else nyquist
        label = (
            f"resampling filters of the {twin.oversampling}x twin roll off toward "
            f"Nyquist ({nyquist / 1000:g} kHz)"
        )
    else:
        start = 0.9 * nyquist
        label = (
            "bilinear transform: a low-pass twin falls to a zero at Nyquist "
            f"({nyquist / 1000:g} kHz)"
        )
    for i, ax in enumerate(axes):
        ax.axvspan(start, nyquist, color="0.85", alpha=0.6, lw=0, zorder=0,
                   label=label if i == len(axes) - 1 else None)  # fmt: skip
        ax.axvline(nyquist, color="0.4", ls=":", lw=1.0)


def _style(i: int, label: str) -> tuple[str, str]:
    if i == 0:
        return _BEFORE_COLOUR, "-"
    if label == "sum":
        return _SUM_COLOUR, "--"
    return _colour(i - 1), "-"


def twin_response(ft: FilterTwin, f_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Complex response and group delay (s) of a twin's sections at ``f_hz``.

    References
    ----------
    ``scipy.signal.sosfreqz`` and ``scipy.signal.group_delay`` (summed over sections).
    """
    _, h = scipy.signal.sosfreqz(ft.sos, worN=f_hz, fs=ft.rate_hz)
    delay = np.zeros(len(f_hz))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # singular points (zeros on the unit circle) -> nan
        for row in ft.sos:
            _, gd = scipy.signal.group_delay((row[:3], row[3:]), w=f_hz, fs=ft.rate_hz)
            delay += gd
    return h, delay / ft.rate_hz


def _grid(design: Design, twin: Twin) -> np.ndarray:
    lows = [f.characteristic_hz()[0] for f in design.filters if f.name in _names(twin)]
    lo = min([min(lows) / 20] + [ft.fidelity.band_hz[0] for ft in twin.filters])
    hi = 0.499 * twin.input_rate_hz
    return np.geomspace(max(lo, 1e-4 * hi), hi, 1500)


def _names(twin: Twin) -> set[str]:
    return {ft.name for ft in twin.filters}


def response_figure(path: str | os.PathLike[str], design: Design, twin: Twin, title: str) -> Path:
    """Analog model (solid) against the digital twin (dashed): magnitude, phase, delay, error.

    Parameters
    ----------
    path : path-like
        Target PNG.
    design : Design
        The analog model (``Filter.frequency_response``, ``Filter.group_delay_s``).
    twin : Twin
        Its twin; shown up to the input's Nyquist frequency.
    title : str
        Figure title.

    Returns
    -------
    Path
        The written file.
    """
    f_hz = _grid(design, twin)
    fig = Figure(figsize=(12, 8.5), layout="constrained")
    (mag, phase), (delay, error) = fig.subplots(2, 2, sharex=True)
    fig.suptitle(title)
    total_a = np.zeros(len(f_hz), complex)
    total_d = np.zeros(len(f_hz), complex)
    peak_db = -math.inf
    for i, ft in enumerate(twin.filters):
        f = design.filter(ft.name)
        ha = f.frequency_response(f_hz)
        hd, gd_d = twin_response(ft, f_hz)
        # what a render plays: the resampling filters around an oversampled twin included
        hd = hd * resampling_response(twin.oversampling, f_hz, ft.rate_hz, twin.resampling)
        total_a, total_d = total_a + ha, total_d + hd
        c = _colour(i)
        db_a = 20 * np.log10(np.maximum(np.abs(ha), 1e-300))
        peak_db = max(peak_db, float(np.max(db_a)))
        # the twin sits on the analog curve: analog wide and pale, twin narrow and dashed
        mag.plot(f_hz, db_a, color=c, label=ft.name, **_ANALOG)
        mag.plot(f_hz, 20 * np.log10(np.maximum(np.abs(hd), 1e-300)), color=c, **_TWIN)
        phase.plot(f_hz, np.degrees(np.unwrap(np.angle(ha))), color=c, **_ANALOG)
        phase.plot(f_hz, np.degrees(np.unwrap(np.angle(hd))), color=c, **_TWIN)
        delay.plot(f_hz, 1e3 * f.group_delay_s(f_hz), color=c, **_ANALOG)
        delay.plot(f_hz, 1e3 * gd_d, color=c, **_TWIN)
        inside = np.abs(ha) >= np.max(np.abs(ha)) * 10 ** (-FIDELITY_WINDOW_DB / 20)
        err = np.where(inside, 20 * np.log10(np.abs(hd) / np.maximum(np.abs(ha), 1e-300)), np.nan)
        error.plot(f_hz, err, color=c, lw=1.2, label=ft.name)
    if len(twin.filters) > 1:
        mag.plot(f_hz, 20 * np.log10(np.maximum(np.abs(total_a), 1e-300)), color=_SUM_COLOUR,
                 label="sum", **_ANALOG)  # fmt: skip
        mag.plot(f_hz, 20 * np.log10(np.maximum(np.abs(total_d), 1e-300)), color=_SUM_COLOUR,
                 **_TWIN)  # fmt: skip
    mag.plot([], [], color="0.3", label="analog model (wide)", **_ANALOG)
    mag.plot([], [], color="0.3", label="digital twin (dashed)", **_TWIN)
    lo, hi = f_hz[0], f_hz[-1]
    mag.set_ylim(RESPONSE_FLOOR_DB, max(peak_db, 0.0) + 6)
    _log_axis(mag, lo, hi, "magnitude (dB)")
    mag.set_title("magnitude: analog model wide and pale, twin dashed on it", fontsize="medium")
    handles, labels = mag.get_legend_handles_labels()
    phase.legend(handles, labels, loc="lower left", fontsize="small", ncols=2)
    _log_axis(phase, lo, hi, "phase (degrees, unwrapped)")
    phase.set_title("phase", fontsize="medium")
    _log_axis(delay, lo, hi, "group delay (ms)")
    delay.set_title("group delay", fontsize="medium")
    _limit_delay_axis(delay)
    _log_axis(error, lo, hi, "twin − analog (dB)")
    error.set_title(
        f"twin error within {FIDELITY_WINDOW_DB:g} dB of the peak\n(twin at "
        f"{twin.rate_hz / 1000:g} kHz, {twin.oversampling}x"
        + (f", {twin.resampling}-phase resampling included)" if twin.oversampling > 1 else ")"),
        fontsize="medium",
    )
    top = twin.filters[0].fidelity.band_hz[1]
    _symmetric(error, minimum=0.2, below_hz=top)  # the fall past the band's top is off-scale
    label = "top of the fidelity band" + (
        " (resampling filters roll off above)" if twin.oversampling > 1 else ""
    )
    error.axvline(top, color="grey", ls=":", lw=1.0, label=label)
    error.legend(loc="lower left", fontsize="small")
    return save_png(fig, path)


_ANALOG: dict[str, Any] = {"lw": 4.0, "alpha": 0.4, "solid_capstyle": "butt"}
_TWIN: dict[str, Any] = {"lw": 1.2, "ls": "--"}


def _limit_delay_axis(ax: Axes) -> None:
    values = np.concatenate([line.get_ydata() for line in ax.get_lines()])
    values = values[np.isfinite(values)]
    if len(values):
        top = float(np.percentile(values, 99.5))
        ax.set_ylim(min(0.0, float(values.min())), top * 1.1 if top > 0 else 1.0)


def _symmetric(ax: Axes, minimum: float, below_hz: float = math.inf) -> None:
    lines = ax.get_lines()
    values = np.concatenate(
        [np.asarray(line.get_ydata())[np.asarray(line.get_xdata()) <= below_hz] for line in lines]
    )
    values = values[np.isfinite(values)]
    span = max(minimum, float(np.max(np.abs(values))) * 1.15 if len(values) else minimum)
    ax.set_ylim(-span, span)
