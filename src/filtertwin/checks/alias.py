"""Anti-alias check: what an ADC captures from a recording, with and without the filter.

The recording stands in for the sensor's analog signal (it must be sampled well above the
ADC's rate). The ADC is modelled as an ideal sampler at ``adc_rate_hz``: every frequency
``f`` of the recording lands at ``|f - k fs|`` folded into ``[0, fs/2]`` (Oppenheim &
Schafer 4.2). The filter is applied by the design's digital twin at the recording's rate;
the requirement (attenuation at ``fs - band``) is read from the exact analog as-built model.

Nothing here reads or writes files: the command does that.

References
----------
A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed., section 4.2.
W. R. Bennett, "Spectra of quantized signals", Bell Syst. Tech. J. 27, 1948; W. Kester (ed.),
Data Conversion Handbook, 2005, ch. 2 (ideal quantization SNR 6.02 N + 1.76 dB).
P. D. Welch, IEEE Trans. Audio Electroacoust. AU-15, 1967 (the PSD estimate).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np
import scipy.signal

from filtertwin.checks import foldpower, stopband
from filtertwin.checks.droop import DEFAULT_MAX_DROOP_DB, Droop, band_within_droop, passband_droop
from filtertwin.checks.foldpower import SpectrumPlan, Tone, alias_frequency
from filtertwin.checks.stopband import StopbandPlan
from filtertwin.circuit.design import Design, Filter
from filtertwin.errors import UserInputError

__all__ = [
    "AliasCheck",
    "AliasComponent",
    "Captures",
    "alias_frequency",
    "capture",
    "check_alias",
    "ideal_dynamic_range_db",
    "interpolator_taps",
    "select_filter",
]

MAX_FRAMES = 2**24
"""Longest recording read whole (16.7 M frames: 5.5 minutes at 51.2 kHz)."""
MIN_CAPTURE_FRAMES = 256
"""Shortest ADC capture whose spectrum means anything."""
SPECTRUM_DEPTH_DB = 50.0
"""The spectra see this far below the requirement (window sidelobes): the aliases left after
a filter that just meets the requirement sit about that deep below the strongest content."""
IRRELEVANT_MARGIN_DB = 20.0
"""Components weaker than the in-band signal by more than the requirement plus this are left
out of the table: even unfiltered their aliases stay below what the ADC must resolve."""
AGREEMENT_DB = 1.0
"""A component's level after the filter agrees with the model within this, or is flagged."""
INTERP_ZERO_CROSSINGS = 32
INTERP_KAISER_BETA = 10.0
MAX_RATIO_DENOMINATOR = 2000


@dataclass(frozen=True)
class AliasComponent:
    """One distinct component above the ADC's Nyquist frequency.

    Attributes
    ----------
    source_hz, alias_hz : float
        Where it is in the recording (refined between bins) and where the ADC puts it.
    in_band : bool
        The alias lands inside the band of interest (decided on the refined frequency).
    without_filter_db, with_filter_db : float
        Its power relative to the in-band signal power, before and after the filter (the
        filtered level measured on the digital twin's output).
    filter_db : float
        The analog as-built model's gain at ``source_hz`` relative to the passband gain.
    expected_with_db : float
        ``without_filter_db`` plus the model's gain there (relative to the in-band power
        after the filter): what ``with_filter_db`` should be.
    note : str
        Why ``with_filter_db`` differs from ``expected_with_db`` by more than 1 dB ("" when
        it does not).
    without_filter_peak, with_filter_peak : float
        Peak amplitude of the component in the recording's unit (sqrt(2 x power)).
    """

    source_hz: float
    alias_hz: float
    in_band: bool
    without_filter_db: float
    with_filter_db: float
    filter_db: float
    expected_with_db: float
    note: str
    without_filter_peak: float
    with_filter_peak: float


@dataclass(frozen=True)
class Spectra:
    """Power spectral densities (unit^2/Hz) for the figures, without and with the filter."""

    f_hz: np.ndarray
    without_filter: np.ndarray
    with_filter: np.ndarray


@dataclass(frozen=True)
class AliasCheck:
    """The verdict and the figures behind it.

    Attributes
    ----------
    filter_name : str
    recording_rate_hz, adc_rate_hz : float
    capture_rate_hz : float
        Rate the captures were taken at: the ADC rate, or the nearest ratio of whole numbers
        (denominator at most 2000) to it.
    band_hz : float
        Top of the band of interest.
    required_db : float
        Attenuation needed at ``attenuation_at_hz``.
    requirement : str
        Where ``required_db`` comes from, in words.
    attenuation_at_hz : float
        ADC rate minus the top of the band: the lowest frequency that folds into the band.
    attenuation_db : float
        The analog as-built model's attenuation there, relative to its passband gain.
    margin_db : float
        ``attenuation_db - required_db``.
    droop : Droop
        The band as the filter passes it (gain, phase, group delay at its edge; droop).
    passed : bool
        The stopband requirement is met and the band passes (droop, passband).
    aliased_without_db, aliased_with_db : float
        Power folding into the band, relative to the in-band signal power.
    components : tuple of AliasComponent
        Strongest first.
    twin : StopbandPlan
        The oversampling the digital twin ran at and its fidelity in the stopband and band.
    spectrum : SpectrumPlan
        Resolution and window of the recording's spectra.
    recording : Spectra
        Spectrum of the recording (0 to its Nyquist frequency) before and after the filter.
    filter_db : numpy.ndarray
        Analog model's gain (dB re passband) at ``recording.f_hz``.
    captured : Spectra
        Spectrum of the two ADC captures (0 to the ADC's Nyquist frequency).
    """

    filter_name: str
    recording_rate_hz: float
    adc_rate_hz: float
    capture_rate_hz: float
    band_hz: float
    required_db: float
    requirement: str
    attenuation_at_hz: float
    attenuation_db: float
    margin_db: float
    droop: Droop
    passed: bool
    aliased_without_db: float
    aliased_with_db: float
    components: tuple[AliasComponent, ...]
    twin: StopbandPlan
    spectrum: SpectrumPlan
    recording: Spectra
    filter_db: np.ndarray
    captured: Spectra

    @property
    def verdict(self) -> str:
        return "PASS" if self.passed else "FAIL"

    @property
    def oversampling(self) -> int:
        """Oversampling the digital twin ran at."""
        return self.twin.factor

    def reasons(self) -> list[str]:
        """Why the check fails, in words (empty when it passes)."""
        out = []
        if self.margin_db < 0:
            out.append(
                f"the stopband gives {self.attenuation_db:.1f} dB at "
                f"{self.attenuation_at_hz:.5g} Hz, {-self.margin_db:.1f} dB short of "
                f"{self.required_db:.1f} dB"
            )
        if not self.droop.passed:
            out.append(self.droop.reason())
        return out

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary (SI units, dB); the spectra are left out."""
        return {
            "check": "alias",
            "filter": self.filter_name,
            "recording_rate_hz": self.recording_rate_hz,
            "adc_rate_hz": self.adc_rate_hz,
            "capture_rate_hz": self.capture_rate_hz,
            "band_hz": self.band_hz,
            "required_db": self.required_db,
            "requirement": self.requirement,
            "attenuation_at_hz": self.attenuation_at_hz,
            "attenuation_db": self.attenuation_db,
            "margin_db": self.margin_db,
            "passband": self.droop.to_dict(),
            "pass": self.passed,
            "verdict": self.verdict,
            "fail_reasons": self.reasons(),
            "aliased_db": {
                "without_filter": self.aliased_without_db,
                "with_filter": self.aliased_with_db,
                "relative_to": "in-band signal power",
            },
            "components": [
                {
                    "source_hz": c.source_hz,
                    "alias_hz": c.alias_hz,
                    "in_band": c.in_band,
                    "without_filter_db": c.without_filter_db,
                    "with_filter_db": c.with_filter_db,
                    "filter_db": c.filter_db,
                    "expected_with_filter_db": c.expected_with_db,
                    "note": c.note,
                    "without_filter_peak": c.without_filter_peak,
                    "with_filter_peak": c.with_filter_peak,
                }
                for c in self.components
            ],
            "twin_oversampling": self.oversampling,
            "twin_fidelity": self.twin.to_dict(),
            "spectrum": self.spectrum.to_dict(),
        }


@dataclass(frozen=True)
class Captures:
    """The two ADC captures (1-D arrays in the recording's unit) and their rate in Hz."""

    without_filter: np.ndarray
    with_filter: np.ndarray
    rate_hz: float


def ideal_dynamic_range_db(bits: int) -> float:
    """Ideal quantization SNR of an N-bit converter for a full-scale sine: 6.02 N + 1.76 dB.

    References
    ----------
    W. R. Bennett, Bell Syst. Tech. J. 27, 1948; W. Kester, Data Conversion Handbook, 2005.

    Examples
    --------
    >>> round(ideal_dynamic_range_db(16), 2)
    98.09
    """
    return 20 * math.log10(2.0) * bits + 10 * math.log10(1.5)


def interpolator_taps(up: int) -> np.ndarray:
    """Band-limited interpolation FIR for upsampling by ``up`` (cut-off: the input's Nyquist
    frequency): Kaiser-windowed sinc, 32 zero crossings each side, gain ``up``."""
    taps = 2 * INTERP_ZERO_CROSSINGS * up + 1
    h = scipy.signal.firwin(taps, 1.0 / up, window=("kaiser", INTERP_KAISER_BETA))
    return h * up


def capture(samples: np.ndarray, rate_hz: float, adc_rate_hz: float) -> tuple[np.ndarray, float]:
    """Sample a recording with an ideal ADC at ``adc_rate_hz``, keeping every alias.

    For a whole-number ratio the ADC's samples are the recording's samples at those
    instants. Otherwise the recording is interpolated band-limited (Kaiser-windowed sinc,
    32 zero crossings) onto the ADC's instants, ``up/down`` being the ratio of whole numbers
    nearest ``adc_rate_hz / rate_hz`` (denominator at most 2000). No anti-alias filtering
    happens here: that is the point.

    Parameters
    ----------
    samples : numpy.ndarray
        1-D recording.
    rate_hz, adc_rate_hz : float
        Recording and ADC rates in Hz, ``adc_rate_hz <= rate_hz``.

    Returns
    -------
    captured : numpy.ndarray
    capture_rate_hz : float
        The rate actually used (``rate_hz * up / down``).
    """
    ratio = rate_hz / adc_rate_hz
    step = round(ratio)
    if step >= 1 and abs(ratio - step) <= 1e-6 * ratio:
        return np.array(samples[::step], dtype=float), rate_hz / step
    frac = (Fraction(adc_rate_hz) / Fraction(rate_hz)).limit_denominator(MAX_RATIO_DENOMINATOR)
    up, down = frac.numerator, frac.denominator
    if up == 1:  # the nearest ratio of whole numbers is a whole-number step
        return np.array(samples[::down], dtype=float), rate_hz / down
    h = interpolator_taps(up)
    delay = INTERP_ZERO_CROSSINGS * up
    pad = (-delay) % down
    h = np.concatenate([np.zeros(pad), h])
    offset = (delay + pad) // down
    n_out = -(-len(samples) * up // down)
    y = scipy.signal.upfirdn(h, np.asarray(samples, float), up, down)
    return np.array(y[offset : offset + n_out]), rate_hz * up / down


def select_filter(design: Design, name: str | None) -> Filter:
    """The anti-alias filter to check: the one named, or the design's only filter.

    Raises
    ------
    UserInputError
        Several filters and no name, or a high-pass filter.
    """
    if name is not None:
        filt = design.filter(name)
    elif len(design.filters) == 1:
        filt = design.filters[0]
    else:
        names = ", ".join(f.name for f in design.filters)
        raise UserInputError(
            f"{design.spec.source}: the design has several filters ({names}); "
            "choose the anti-alias filter with --filter NAME"
        )
    if filt.response == "highpass":
        raise UserInputError(
            f"{design.spec.source}: filter '{filt.name}' is a high-pass and cannot stop "
            "aliasing; choose a low-pass or band-pass filter with --filter"
        )
    return filt


def _gain_db(filt: Filter, f_hz: np.ndarray) -> np.ndarray:
    """The analog as-built model's gain at ``f_hz`` in dB relative to its passband gain."""
    h = np.abs(filt.frequency_response(np.asarray(f_hz, float)))
    return 20 * np.log10(np.maximum(h, 1e-300) / abs(filt.passband_gain))


def attenuation_db(filt: Filter, f_hz: float) -> float:
    """Attenuation of the analog as-built model at ``f_hz`` relative to its passband gain."""
    return -float(_gain_db(filt, np.array([f_hz]))[0])


def _validate(
    frames: int, rate_hz: float, adc_rate_hz: float, band_hz: float | None, bits: int
) -> None:
    if not (math.isfinite(adc_rate_hz) and adc_rate_hz > 0):
        raise UserInputError(f"ADC rate {adc_rate_hz} Hz must be positive; give --adc-rate in Hz")
    if adc_rate_hz > rate_hz * (1 + 1e-9):
        raise UserInputError(
            f"ADC rate {adc_rate_hz:g} Hz is above the recording's rate {rate_hz:g} Hz, so the "
            "recording cannot show what folds; use a recording sampled faster than the ADC"
        )
    nyquist = adc_rate_hz / 2
    if band_hz is not None and not (math.isfinite(band_hz) and 0 < band_hz <= nyquist):
        raise UserInputError(
            f"band of interest {band_hz:g} Hz is not within the ADC's Nyquist frequency "
            f"{nyquist:g} Hz (ADC rate {adc_rate_hz:g} Hz); lower --band or raise --adc-rate"
        )
    if not 1 <= bits <= 32:
        raise UserInputError(f"ADC resolution {bits} bits is outside 1..32; give --bits 1 to 32")
    if frames > MAX_FRAMES:
        raise UserInputError(
            f"the recording has {frames} frames, more than the {MAX_FRAMES} this check reads "
            "at once; cut a representative piece of it"
        )
    if frames * adc_rate_hz / rate_hz < MIN_CAPTURE_FRAMES:
        need = math.ceil(MIN_CAPTURE_FRAMES / adc_rate_hz * rate_hz)
        raise UserInputError(
            f"the recording is too short ({frames} frames) for {MIN_CAPTURE_FRAMES} ADC "
            f"samples; give at least {need} frames"
        )


def _db(power: np.ndarray | float) -> np.ndarray:
    """Power ratio in dB, floored at -300 dB (nothing folds when the ADC runs at the
    recording's rate)."""
    return 10 * np.log10(np.maximum(power, 1e-30))


def _note(with_db: float, expected_db: float, buried: bool, twin_off_db: float) -> str:
    """Why a component's level after the filter is not the model's (see AliasComponent)."""
    if abs(with_db - expected_db) <= AGREEMENT_DB:
        return ""
    if twin_off_db > AGREEMENT_DB:
        return f"twin {twin_off_db:.1f} dB off the model here"
    if buried:
        return "under the noise after the filter: at most this"
    return f"{with_db - expected_db:+.1f} dB from the model"


def _components(
    tones: tuple[Tone, ...],
    with_powers: list[float],
    buried: list[bool],
    refs: tuple[float, float],
    filt: Filter,
    use_amp: bool,
    plan: StopbandPlan,
    rate_hz: float,
    adc_rate_hz: float,
    band_hz: float,
    count: int,
    floor_db: float,
) -> tuple[AliasComponent, ...]:
    ref_without, ref_with = refs
    kept = [(t, pw, b) for t, pw, b in zip(tones, with_powers, buried, strict=True)
            if _db(t.power / ref_without) >= floor_db][:count]  # fmt: skip
    if not kept:
        return ()
    f = np.array([t.f_hz for t, _, _ in kept])
    model = filt.frequency_response(f, use_amp)
    twin = stopband.twin_response(plan.sos, _taps(plan), f, rate_hz, plan.factor)
    gain_db = 20 * np.log10(np.maximum(np.abs(model), 1e-300) / abs(filt.passband_gain))
    twin_off = np.abs(20 * np.log10(np.maximum(np.abs(twin), 1e-300) / np.abs(model)))
    shift = float(_db(ref_with / ref_without))
    out = []
    for (tone, pf, bur), g, off in zip(kept, gain_db, twin_off, strict=True):
        alias = float(alias_frequency(tone.f_hz, adc_rate_hz))
        without = float(_db(tone.power / ref_without))
        with_db = float(_db(pf / ref_with))
        expected = without + float(g) - shift
        out.append(
            AliasComponent(
                source_hz=tone.f_hz,
                alias_hz=alias,
                in_band=alias <= band_hz,
                without_filter_db=without,
                with_filter_db=with_db,
                filter_db=float(g),
                expected_with_db=expected,
                note=_note(with_db, expected, bur, float(off)),
                without_filter_peak=math.sqrt(2 * tone.power),
                with_filter_peak=math.sqrt(2 * pf),
            )
        )
    return tuple(out)


def _taps(plan: StopbandPlan) -> np.ndarray | None:
    return None if plan.factor == 1 else stopband.resampling_taps(plan.factor, plan.zero_crossings)


def _spectra(x: np.ndarray, y: np.ndarray, rate_hz: float, plan: SpectrumPlan) -> Spectra:
    f, p_without = foldpower.spectrum(x, rate_hz, plan)
    _, p_with = foldpower.spectrum(y, rate_hz, plan)
    return Spectra(f, p_without, p_with)


def check_alias(
    design: Design,
    samples: np.ndarray,
    rate_hz: float,
    adc_rate_hz: float,
    *,
    filter_name: str | None = None,
    band_hz: float | None = None,
    bits: int = 16,
    reject_db: float | None = None,
    max_droop_db: float = DEFAULT_MAX_DROOP_DB,
    max_components: int = 8,
) -> tuple[AliasCheck, Captures]:
    """Check an anti-alias filter against a recording and an ADC.

    Parameters
    ----------
    design : Design
    samples : numpy.ndarray
        1-D recording (any unit), sampled at ``rate_hz``.
    rate_hz : float
        Recording rate in Hz.
    adc_rate_hz : float
        The ADC's sample rate in Hz (at most ``rate_hz``).
    filter_name : str, optional
        The anti-alias filter (default: the design's only filter).
    band_hz : float, optional
        Top of the band of interest in Hz (default: where the filter's droop reaches
        ``max_droop_db``, at most its passband edge and the ADC's Nyquist frequency).
    bits : int
        ADC resolution; the requirement is its ideal dynamic range 6.02 N + 1.76 dB.
    reject_db : float, optional
        Required attenuation in dB instead of the dynamic range.
    max_droop_db : float
        Largest loss allowed over the band (dB below the passband gain); see
        :mod:`filtertwin.checks.droop` for the default.
    max_components : int
        Rows in the component table (components more than ``required + 20`` dB below the
        in-band signal are left out).

    Returns
    -------
    AliasCheck
    Captures

    Raises
    ------
    UserInputError
        ADC rate above the recording's rate, band above the ADC's Nyquist frequency, a
        recording too short or too long, no signal in the band, bad ``bits``/``reject_db``.

    References
    ----------
    Oppenheim & Schafer 4.2 (aliasing); Bennett 1948, Kester 2005 (6.02 N + 1.76 dB);
    Welch 1967 and Kaiser & Schafer 1980 (the spectra, :mod:`filtertwin.checks.foldpower`).
    """
    x = np.asarray(samples, dtype=float)
    if x.ndim != 1:
        raise ValueError(f"samples must be 1-D, got shape {x.shape}")
    _validate(len(x), rate_hz, adc_rate_hz, band_hz, bits)
    if reject_db is not None and not (math.isfinite(reject_db) and reject_db > 0):
        raise UserInputError(f"rejection {reject_db:g} dB must be positive; give --reject-db")
    filt = select_filter(design, filter_name)
    if reject_db is None:
        required = ideal_dynamic_range_db(bits)
        requirement = f"ideal dynamic range of a {bits}-bit ADC, 6.02 N + 1.76 dB"
    else:
        required, requirement = float(reject_db), "rejection given"
    band = (
        band_hz if band_hz is not None else band_within_droop(filt, max_droop_db, adc_rate_hz / 2)
    )
    droop = passband_droop(filt, band, max_droop_db)
    at_hz = adc_rate_hz - band
    atten = attenuation_db(filt, at_hz)

    twin = stopband.plan_oversampling(design, filt, rate_hz, adc_rate_hz, band, required)
    y = stopband.run(twin, x)
    plan = foldpower.plan_spectrum(len(x), rate_hz, band, required + SPECTRUM_DEPTH_DB)
    rec = _spectra(x, y, rate_hz, plan)
    f = rec.f_hz
    df = float(f[1] - f[0])
    inband = f <= band
    ref_without = float(rec.without_filter[inband].sum() * df)
    ref_with = float(rec.with_filter[inband].sum() * df)
    if ref_without <= 0 or ref_with <= 0:
        raise UserInputError(
            f"the recording has no signal below {band:g} Hz to compare the aliases with; "
            "check the recording or --band"
        )
    tones, floor_without = foldpower.find_tones(f, rec.without_filter, plan, adc_rate_hz / 2)
    floor_with = foldpower.local_floor(rec.with_filter, plan)
    with_powers, buried = [], []
    for t in tones:
        measured = foldpower.lobe_power(rec.with_filter, floor_with, t.lobe, df)
        total = float(rec.with_filter[t.lobe].sum() * df)
        is_buried = measured < 0.5 * total  # the floor is at least half the lobe's power
        with_powers.append(total if is_buried else measured)
        buried.append(is_buried)
    folded_without = foldpower.folded_power(
        f, rec.without_filter, floor_without, tones, [t.power for t in tones], adc_rate_hz, band
    )
    folded_with = foldpower.folded_power(
        f, rec.with_filter, floor_with, tones, with_powers, adc_rate_hz, band
    )
    comps = _components(
        tones, with_powers, buried, (ref_without, ref_with), filt, design.amplifier is not None,
        twin, rate_hz, adc_rate_hz, band, max_components, -(required + IRRELEVANT_MARGIN_DB),
    )  # fmt: skip

    cap_without, cap_rate = capture(x, rate_hz, adc_rate_hz)
    cap_with, _ = capture(y, rate_hz, adc_rate_hz)
    cap_plan = foldpower.plan_spectrum(len(cap_without), cap_rate, band, plan.sidelobe_db)
    check = AliasCheck(
        filter_name=filt.name,
        recording_rate_hz=float(rate_hz),
        adc_rate_hz=float(adc_rate_hz),
        capture_rate_hz=float(cap_rate),
        band_hz=float(band),
        required_db=float(required),
        requirement=requirement,
        attenuation_at_hz=float(at_hz),
        attenuation_db=float(atten),
        margin_db=float(atten - required),
        droop=droop,
        passed=bool(atten >= required and droop.passed),
        aliased_without_db=float(_db(folded_without.total / ref_without)),
        aliased_with_db=float(_db(folded_with.total / ref_with)),
        components=comps,
        twin=twin,
        spectrum=plan,
        recording=rec,
        filter_db=_gain_db(filt, f),
        captured=_spectra(cap_without, cap_with, cap_rate, cap_plan),
    )
    return check, Captures(cap_without, cap_with, float(cap_rate))
