"""Digital twin: each analog section of the as-built model -> one digital biquad.

Every section of the circuit's network is mapped by the bilinear transform prewarped at its
own characteristic frequency (f0 of a second-order section, the corner of a first-order one),
so each section's f0 lands exactly where the analog one is; an amplifier's section above the
band (its pole and the zero of its output resistance) is prewarped at the top of the band
(:func:`prewarp_hz`). The result is a scipy-style SOS array ``(n, 6)``
with ``a0 == 1``. The fidelity report compares the twin with the analog model it came from.

References
----------
A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed., section 7.1.2
(bilinear transformation and frequency prewarping).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from filtertwin.circuit.design import Design, Filter
from filtertwin.digital import resample
from filtertwin.digital.factors import OVERSAMPLING_FACTORS
from filtertwin.errors import UserInputError

# A dB or degree difference means nothing this far below the peak: below it the complex
# error relative to the peak is reported instead.
FIDELITY_WINDOW_DB = 60.0
# the twin counts as faithful within these (magnitude dB, phase degrees) over the band
FIDELITY_TOL_DB = 0.1
FIDELITY_TOL_DEG = 1.0
# The slew limit acts on each sample's step; a sine's step, 2 A sin(pi f / fs), falls short of
# its slope times the sample period, 2 pi f A / fs, by 1 - sinc. A design near its slew limit
# runs where that shortfall is at most SLEW_SLOPE_TOL at the top of the band.
SLEW_SLOPE_TOL = 0.01
# near its slew limit: a full-scale sine in the band needs at least this fraction of the slew
# rate at some stage output (a signal within 6 dB of full scale would slew)
SLEW_NEAR = 0.5
RESAMPLING_WORDS = {
    "linear": "linear-phase resampling (delay removed)",
    "causal": "causal minimum-phase resampling (no output before the input)",
}


@dataclass(frozen=True)
class Fidelity:
    """Largest twin-vs-analog deviation over a band.

    Attributes
    ----------
    max_db, max_deg : float
        Largest magnitude (dB) and phase (degrees) difference where the analog response is
        within 60 dB of its peak.
    at_hz : float
        Frequency of the largest magnitude difference.
    at_deg_hz : float
        Frequency of the largest phase difference.
    band_hz : (float, float)
        The band examined.
    stopband_error_db : float or None
        Largest |H_twin - H_analog| relative to the peak gain (dB) where the analog response
        is more than 60 dB below its peak; None when the band has no such part.
    sections_db, sections_deg : float
        The same largest differences for the digital sections alone, without the resampling
        filters (equal to ``max_db``, ``max_deg`` without oversampling).
    resampling_db : float
        Largest magnitude deviation (dB) of the up and down resampling filters together over
        the band (0 without oversampling).
    at_level_db : float
        The analog response at ``at_hz`` relative to its peak (dB, <= 0).
    at_error_db : float
        |H_twin - H_analog| at ``at_hz`` relative to the peak gain (dB): what the largest
        deviation amounts to against the loudest part of the response.
    """

    max_db: float
    max_deg: float
    at_hz: float
    at_deg_hz: float
    band_hz: tuple[float, float]
    stopband_error_db: float | None
    sections_db: float = 0.0
    sections_deg: float = 0.0
    resampling_db: float = 0.0
    at_level_db: float = 0.0
    at_error_db: float = -math.inf

    def within(self, tol_db: float, tol_deg: float) -> bool:
        return self.max_db <= tol_db and self.max_deg <= tol_deg


@dataclass(frozen=True)
class FilterTwin:
    """One filter's digital twin.

    Attributes
    ----------
    name : str
    rate_hz : float
        The rate the sections run at (the input rate times ``oversampling``).
    sos : ndarray (n, 6)
    clip_fs : ndarray (n,)
        Output swing of the stage ending at each section, in full-scale units (inf where a
        section is not a stage output or no amplifier is modelled).
    stage_of_section : tuple of int
        1-based stage number of each section.
    fidelity : Fidelity
    slew_fs : ndarray (n,) or None
        Largest step per sample of the stage output ending at each section, in full-scale
        units: the amplifier's slew rate / (full scale x ``rate_hz``) (inf where a section
        is not a stage output; None: no amplifier modelled).
    slew_note : str
        How the slew limit is modelled at this rate when a stage is near it ("" otherwise).
    """

    name: str
    rate_hz: float
    sos: np.ndarray
    clip_fs: np.ndarray
    stage_of_section: tuple[int, ...]
    fidelity: Fidelity
    slew_fs: np.ndarray | None = None
    slew_note: str = ""


@dataclass(frozen=True)
class Twin:
    """Every filter's twin, the oversampling they run at and the resampling filters' phase.

    Attributes
    ----------
    input_rate_hz : float
    oversampling : int
    filters : tuple of FilterTwin
    resampling : str
        ``"linear"`` or ``"causal"`` (:data:`filtertwin.digital.resample.PHASES`); what the up and
        down resampling filters are when ``oversampling`` > 1.
    """

    input_rate_hz: float
    oversampling: int
    filters: tuple[FilterTwin, ...]
    resampling: str = "linear"

    def resampling_words(self) -> str:
        """How the twin is resampled, for terminal and report lines."""
        if self.oversampling == 1:
            return "no resampling"
        words = RESAMPLING_WORDS[self.resampling]
        lag = resample.dc_delay_s(self.oversampling, self.input_rate_hz, self.resampling)
        if lag:
            words += f", output lags {lag * 1e6:.0f} us"
        return words

    @property
    def rate_hz(self) -> float:
        return self.input_rate_hz * self.oversampling

    def chains(self) -> list[np.ndarray]:
        return [f.sos for f in self.filters]

    def clip_levels(self) -> list[np.ndarray]:
        return [f.clip_fs for f in self.filters]

    def slew_steps(self) -> list[np.ndarray]:
        """Per filter, the largest step per sample of each section's output (full-scale
        units; inf: no limit), for :class:`filtertwin.digital.engine.CascadeRunner`."""
        return [
            np.full(len(f.sos), np.inf) if f.slew_fs is None else f.slew_fs for f in self.filters
        ]


def slew_rate_needed_hz(top_hz: float, tol: float = SLEW_SLOPE_TOL) -> float:
    """Lowest twin rate at which a sine's step per sample, up to ``top_hz``, is within
    ``tol`` of its slope times the sample period (1 - sin(x)/x <= tol, x = pi f / rate)."""
    x = math.sqrt(6 * tol)  # sin(x)/x = 1 - x^2/6 + x^4/120 ...: refine by Newton's method
    for _ in range(20):
        g = math.sin(x) / x - (1 - tol)
        dg = (x * math.cos(x) - math.sin(x)) / (x * x)
        x -= g / dg
    return math.pi * top_hz / x


def characteristic_hz(b: np.ndarray, a: np.ndarray) -> float:
    """f0 of a second-order section or the corner of a first-order one, in Hz (a[0] == 1).

    A first-order section with a zero away from the origin (an amplifier pole with the
    zero its output resistance adds) is matched at the lower of its zero and its pole.
    """
    a = np.asarray(a, float) / a[0]
    w = math.sqrt(a[2]) if len(a) == 3 else a[1]
    b = np.trim_zeros(np.asarray(b, float), "f")
    if len(a) == 2 and len(b) == 2 and b[1] != 0:
        w = min(w, abs(b[1] / b[0]))
    return w / (2 * math.pi)


def bilinear_section(b: np.ndarray, a: np.ndarray, rate_hz: float, warp_hz: float) -> np.ndarray:
    """One analog section (order <= 2) -> one SOS row, prewarped at ``warp_hz``.

    The substitution is s = c (1 - z^-1)/(1 + z^-1) with c = w / tan(w / (2 fs)), w = 2 pi
    warp_hz, so the analog response at ``warp_hz`` appears unchanged at the same digital
    frequency (Oppenheim & Schafer 7.1.2).
    """
    w = 2 * math.pi * warp_hz
    c = w / math.tan(w / (2 * rate_hz))
    b = np.asarray(b, float)
    a = np.asarray(a, float)
    if len(a) == 2:
        # first order: (b1 s + b0) / (a1 s + a0) -> (b1 c + b0 + (b0 - b1 c) z^-1) / (...)
        b1, b0 = np.concatenate([np.zeros(2 - len(b)), b])
        a1, a0 = a
        num = np.array([b1 * c + b0, b0 - b1 * c, 0.0])
        den = np.array([a1 * c + a0, a0 - a1 * c, 0.0])
    else:
        bb = np.concatenate([np.zeros(3 - len(b)), b])
        c2 = c * c
        num = np.array([bb[0] * c2 + bb[1] * c + bb[2], 2 * (bb[2] - bb[0] * c2),
                        bb[0] * c2 - bb[1] * c + bb[2]])  # fmt: skip
        den = np.array([a[0] * c2 + a[1] * c + a[2], 2 * (a[2] - a[0] * c2),
                        a[0] * c2 - a[1] * c + a[2]])  # fmt: skip
    return np.concatenate([num / den[0], den / den[0]])


def default_band_hz(rate_hz: float) -> tuple[float, float]:
    """20 Hz to min(20 kHz, 0.4535 fs) at audio rates (20 kHz at 44.1 kHz, where the
    resampling filters' flat passband ends: :data:`filtertwin.digital.resample.PASS_FRACTION`);
    otherwise 0 (1e-3 fs) to 0.45 fs."""
    if rate_hz >= 32000:
        return 20.0, min(20000.0, resample.PASS_FRACTION * rate_hz)
    return 1e-3 * rate_hz, 0.45 * rate_hz


def prewarp_hz(
    b: np.ndarray, a: np.ndarray, rate_hz: float, band_top_hz: float, amplifier_section: bool
) -> float:
    """The frequency a section is prewarped at (where its twin equals it exactly).

    A section of the circuit's own network is matched at its characteristic frequency
    (:func:`characteristic_hz`: f0, or a first-order corner), so every corner a builder
    designs lands exactly where the analog one is. Matched instead at the top of the band
    (at most 0.45 ``rate_hz``):

    - an amplifier section (the amplifier's pole, with the zero its output resistance adds)
      whose characteristic frequency lies above the band: it has no corner in the band, only
      a small phase and gain slope there, largest at the top of the band. Prewarped at its
      own frequency near Nyquist, the bilinear transform would squeeze the whole band onto a
      lower part of its response (a phase error of several degrees at 20 kHz, for a zero at
      160 kHz in a 384 kHz twin);
    - any section whose characteristic frequency reaches 0.49 ``rate_hz`` (a pole above
      Nyquist has no digital image to match).
    """
    fc = characteristic_hz(b, a)
    top = min(band_top_hz, 0.45 * rate_hz)
    if fc >= 0.49 * rate_hz or (amplifier_section and fc > top):
        return top
    return fc


def _filter_sos(f: Filter, rate_hz: float, amplifier: bool, band_top_hz: float, source: str):
    nyquist = rate_hz / 2
    rows, stage_of = [], []
    for stage in f.stages:
        if stage.built.f0_hz >= nyquist:
            raise UserInputError(
                f"{source}: filter '{f.name}' stage {stage.index} f0 {stage.built.f0_hz:.5g} Hz "
                f"is at or above the Nyquist frequency {nyquist:.5g} Hz of the {rate_hz:.5g} Hz "
                "twin; --oversample auto runs the twin at a multiple of the rate, or lower the "
                "corner"
            )
    sections = zip(f.stage_sections(amplifier), f.amplifier_sections(amplifier), strict=True)
    for (number, (b, a)), amplifier_section in sections:
        warp = prewarp_hz(b, a, rate_hz, band_top_hz, amplifier_section)
        rows.append(bilinear_section(b, a, rate_hz, warp))
        stage_of.append(number)
    sos = np.array(rows)
    if f.response == "bandpass":
        fc = math.sqrt(f.spec.corner_hz[0] * f.spec.corner_hz[1])
        target = abs(f.frequency_response(np.array([fc]), amplifier)[0])
        sos[0, :3] *= target / abs(_sos_response(sos, np.array([fc]), rate_hz)[0])
    return sos, tuple(stage_of)


def _sos_response(sos: np.ndarray, f_hz: np.ndarray, rate_hz: float) -> np.ndarray:
    z1 = np.exp(-2j * math.pi * np.asarray(f_hz, float) / rate_hz)
    h = np.ones(z1.shape, complex)
    for b0, b1, b2, _, a1, a2 in sos:
        h *= (b0 + b1 * z1 + b2 * z1 * z1) / (1 + a1 * z1 + a2 * z1 * z1)
    return h


def resampling_response(
    factor: int, f_hz: np.ndarray, rate_hz: float, phase: str = "linear"
) -> np.ndarray:
    """Complex response of the up and the down resampling filters an oversampled twin runs
    between (:func:`filtertwin.digital.resample.response`); ``rate_hz`` is the oversampled rate.
    Linear phase: their delay removed, as render removes it; causal: their delay at 0 Hz
    removed (a latency, stated separately), the rest of their phase kept. 1 at 1x."""
    f = np.asarray(f_hz, float)
    if factor == 1:
        return np.ones(f.shape, complex)
    input_hz = rate_hz / factor
    lag_s = resample.dc_delay_s(factor, input_hz, phase)
    return resample.response(factor, f, input_hz, phase) * np.exp(2j * math.pi * f * lag_s)


def _deviation(hd: np.ndarray, ha: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    ratio = hd / ha
    return np.abs(20 * np.log10(np.abs(ratio))), np.abs(np.degrees(np.angle(ratio)))


def measure_fidelity(
    f: Filter,
    sos: np.ndarray,
    rate_hz: float,
    band_hz: tuple[float, float],
    amplifier: bool = True,
    oversampling: int = 1,
    phase: str = "linear",
) -> Fidelity:
    """Compare the twin with the analog model over ``band_hz`` (see :class:`Fidelity`).

    With ``oversampling`` > 1 the twin's response includes the resampling filters around it
    (:func:`resampling_response`), since that is what an oversampled render plays.
    """
    lo, hi = band_hz
    grid = np.geomspace(max(lo, 1e-6 * rate_hz), hi, 4000)
    ha = f.frequency_response(grid, amplifier)
    hs = _sos_response(sos, grid, rate_hz)
    hr = resampling_response(oversampling, grid, rate_hz, phase)
    hd = hs * hr
    mag_a = np.abs(ha)
    peak = float(np.max(mag_a))
    inside = mag_a >= peak * 10 ** (-FIDELITY_WINDOW_DB / 20)
    db, deg = _deviation(hd[inside], ha[inside])
    sec_db, sec_deg = _deviation(hs[inside], ha[inside])
    i = int(np.argmax(db))
    j = int(np.argmax(deg))
    stop = None
    if np.any(~inside):
        err = np.max(np.abs(hd[~inside] - ha[~inside])) / peak
        stop = float(20 * math.log10(max(err, 1e-300)))
    f_in = grid[inside]
    res_db = float(np.max(np.abs(20 * np.log10(np.abs(hr)))))
    at_a, at_d = ha[inside][i], hd[inside][i]
    at_level = float(20 * math.log10(abs(at_a) / peak))
    at_error = float(20 * math.log10(max(abs(at_d - at_a) / peak, 1e-300)))
    return Fidelity(
        float(db[i]), float(deg[j]), float(f_in[i]), float(f_in[j]), (lo, hi), stop,
        float(np.max(sec_db)), float(np.max(sec_deg)), res_db, at_level, at_error,
    )  # fmt: skip


def build_twin(
    design: Design,
    rate_hz: float,
    *,
    oversampling: int | str = 1,
    band_hz: tuple[float, float] | None = None,
    amplifier: bool = True,
    tol_db: float = FIDELITY_TOL_DB,
    tol_deg: float = FIDELITY_TOL_DEG,
    filters: list[str] | None = None,
    resampling: str = "linear",
) -> Twin:
    """The digital twin of a design at ``rate_hz``.

    Parameters
    ----------
    design : Design
    rate_hz : float
        Rate of the signal that will be filtered, Hz.
    oversampling : int or "auto"
        Run the twin at ``rate_hz * oversampling``. ``"auto"`` picks the smallest of
        :data:`OVERSAMPLING_FACTORS` (1, 2, 4, 8, 16) whose fidelity over the band
        (resampling filters included) is within ``tol_db`` and ``tol_deg`` for every filter
        (16 if none is), skipping factors whose Nyquist frequency a stage's f0 reaches (a
        corner above the recording's Nyquist frequency).
    band_hz : (float, float), optional
        Band of interest for the fidelity report (default: :func:`default_band_hz`).
    amplifier : bool
        Include the amplifier model (finite gain-bandwidth) when the design has one.
    filters : list of str, optional
        Names of the filters to include (default all).
    resampling : {"linear", "causal"}
        Phase of the up and down resampling filters of an oversampled twin
        (:data:`filtertwin.digital.resample.PHASES`).

    Raises
    ------
    UserInputError
        A stage whose f0 is at or above the twin's Nyquist frequency (at every factor tried),
        or an unknown ``resampling``.
    """
    if rate_hz <= 0 or not math.isfinite(rate_hz):
        raise UserInputError(f"sample rate {rate_hz!r} Hz is not positive; give a rate like 48000")
    chosen = [design.filter(n) for n in filters] if filters else list(design.filters)
    band = band_hz or default_band_hz(rate_hz)
    use_amp = amplifier and design.amplifier is not None
    if resampling not in resample.PHASES:
        raise UserInputError(
            f"resampling {resampling!r} is not one of {', '.join(resample.PHASES)}; "
            "give --resampling linear or causal"
        )
    factors = OVERSAMPLING_FACTORS if oversampling == "auto" else (int(oversampling),)
    near = _near_slew(design, chosen, band)
    slew_rate_hz = slew_rate_needed_hz(band[1]) if near else 0.0
    result: Twin | None = None
    refused: UserInputError | None = None
    for factor in factors:
        twins = []
        run_rate = rate_hz * factor
        try:
            for f in chosen:
                sos, stage_of = _filter_sos(f, run_rate, use_amp, band[1], design.spec.source)
                fid = measure_fidelity(f, sos, run_rate, band, use_amp, factor, resampling)
                levels = _clip_levels(design, stage_of)
                steps = _slew_steps(design, stage_of, run_rate)
                note = _slew_note(near.get(f.name, ()), run_rate, slew_rate_hz, band[1])
                twin = FilterTwin(f.name, run_rate, sos, levels, stage_of, fid, steps, note)
                twins.append(twin)
        except UserInputError as error:  # a corner above this rate's Nyquist: try a higher one
            refused = error
            continue
        result = Twin(rate_hz, factor, tuple(twins), resampling)
        if all(t.fidelity.within(tol_db, tol_deg) for t in twins) and run_rate >= slew_rate_hz:
            break
    if result is None:
        assert refused is not None
        raise refused
    return result


def _stage_outputs(stage_of: tuple[int, ...]) -> np.ndarray:
    """True at each stage's last section: where the stage's amplifier output is."""
    return np.array([i == len(stage_of) - 1 or stage_of[i + 1] != stage
                     for i, stage in enumerate(stage_of)], dtype=bool)  # fmt: skip


def _clip_levels(design: Design, stage_of: tuple[int, ...]) -> np.ndarray:
    levels = np.full(len(stage_of), np.inf)
    if design.amplifier is None:
        return levels
    levels[_stage_outputs(stage_of)] = design.amplifier.swing_v / design.spec.full_scale_v
    return levels


def _slew_steps(design: Design, stage_of: tuple[int, ...], rate_hz: float) -> np.ndarray | None:
    """Slew rate in full-scale units per sample at each stage output (the same volts-to-full-
    scale mapping as the clip levels), inf elsewhere; None without an amplifier."""
    if design.amplifier is None:
        return None
    steps = np.full(len(stage_of), np.inf)
    per_sample_v = design.amplifier.slew_v_per_s / rate_hz
    steps[_stage_outputs(stage_of)] = per_sample_v / design.spec.full_scale_v
    return steps


def _near_slew(
    design: Design, chosen: list[Filter], band: tuple[float, float]
) -> dict[str, tuple[int, ...]]:
    """Filter name -> stages that a sine within 6 dB of full scale in the band makes slew."""
    amp = design.amplifier
    if amp is None:
        return {}
    near = {}
    for f in chosen:
        stages = tuple(
            s.stage
            for s in f.slew_demands(amp, design.spec.full_scale_v, band)
            if s.demand >= SLEW_NEAR
        )
        if stages:
            near[f.name] = stages
    return near


def _slew_note(stages: tuple[int, ...], rate_hz: float, needed_hz: float, top_hz: float) -> str:
    if not stages:
        return ""
    which = "stage " + ", ".join(str(s) for s in stages)
    x = math.pi * top_hz / rate_hz
    short = 100 * (1 - math.sin(x) / x) if x < math.pi else 100.0
    if rate_hz >= needed_hz:
        return (
            f"{which} near the slew limit: modelled at {rate_hz / 1e3:.4g} kHz, where a sine's "
            f"step per sample is within {short:.1f} % of its slope up to {top_hz / 1e3:.4g} kHz"
        )
    return (
        f"{which} near the slew limit: at {rate_hz / 1e3:.4g} kHz a sine's step per sample "
        f"falls {short:.1f} % short of its slope at {top_hz / 1e3:.4g} kHz, so slewing there is "
        f"under-reported; --oversample auto picks a rate that models it within "
        f"{100 * SLEW_SLOPE_TOL:g} %"
    )
