"""The circuit's own noise: every resistor's thermal noise and the amplifier's voltage and
current noise, through each stage's node equations, to every filter's output.

Each stage is solved node by node at every frequency (the network of
:mod:`filtertwin.circuit.sallenkey`, the amplifier as a single-pole source behind its open-loop
output resistance), once per noise source: a resistor's thermal noise as a current source
across it (4kT/R, the Norton form of 4kTR), the amplifier's voltage noise in series with its
+ input, its current noise into each input. The sources are uncorrelated, so their output
densities add as powers. A stage's noise then passes through the stages after it; the
filter's input is driven from a noiseless source of zero impedance. The ways of a crossover
have their own amplifiers, so their noises add as powers in the sum.

Figures: integrated noise over a band (20 Hz to 20 kHz by default, also A-weighted; or a
sensor band), the level re full scale, the signal-to-noise ratio of a full-scale input, the
dynamic range from the largest output no stage clips at to the noise, and which stage and
which source dominate.

References
----------
J. B. Johnson, "Thermal agitation of electricity in conductors", Phys. Rev. 32, 97 (1928);
H. Nyquist, "Thermal agitation of electric charge in conductors", Phys. Rev. 32, 110 (1928).
SI brochure, 9th ed. (2019): the Boltzmann constant is exact.
IEC 61672-1:2013, Electroacoustics - Sound level meters - Part 1: Specifications, annex E
(the A-weighting's defining equation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from filtertwin.circuit import sallenkey
from filtertwin.circuit.design import Design, Filter
from filtertwin.circuit.sallenkey import Amplifier, StageCircuit

BOLTZMANN_J_PER_K = 1.380649e-23  # exact (SI 2019)
DEFAULT_TEMPERATURE_K = 298.15  # 25 degrees C
AUDIO_BAND_HZ = (20.0, 20000.0)
GRID_POINTS = 2000
# IEC 61672-1 annex E: pole frequencies of the A-weighting and its value at 1 kHz
_A_POLES_HZ = (20.598997, 107.65265, 737.86223, 12194.217)
_A1000_DB = -2.000
# an ideal amplifier is solved as one of this open-loop gain
_IDEAL_GAIN = 1e12

SOURCE_WORDS = {
    "en": "amplifier voltage noise",
    "in+": "amplifier current noise (+ input)",
    "in-": "amplifier current noise (- input)",
}


def thermal_noise_v_per_rthz(r_ohm: float | np.ndarray, temperature_k: float) -> np.ndarray:
    """Open-circuit thermal noise density sqrt(4 k T R) of a resistor, V/sqrt(Hz).

    Examples
    --------
    >>> print(f"{float(thermal_noise_v_per_rthz(10e3, 290.0)) * 1e9:.3f} nV/rtHz")
    12.655 nV/rtHz
    """
    return np.sqrt(4 * BOLTZMANN_J_PER_K * temperature_k * np.asarray(r_ohm, float))


def a_weighting_db(f_hz: float | np.ndarray) -> np.ndarray:
    """The A-weighting in dB from its defining equation (IEC 61672-1, annex E).

    A(f) = 20 lg[f4^2 f^4 / ((f^2 + f1^2) sqrt(f^2 + f2^2) sqrt(f^2 + f3^2) (f^2 + f4^2))]
    - A1000, with f1..f4 = 20.60, 107.7, 737.9, 12194 Hz and A1000 = -2.000 dB.
    """
    f2 = np.asarray(f_hz, float) ** 2
    p1, p2, p3, p4 = (p * p for p in _A_POLES_HZ)
    with np.errstate(divide="ignore"):
        r = p4 * f2 * f2 / ((f2 + p1) * np.sqrt((f2 + p2) * (f2 + p3)) * (f2 + p4))
        return 20 * np.log10(r) - _A1000_DB


# --- one stage, node by node ---------------------------------------------------------------


def _elements(c: StageCircuit) -> tuple[list[str], list[tuple[str, str, str]]]:
    """Node names and the RC elements (part name, node, node); "0" is ground, and the
    filter input, noiseless and of zero impedance, is ground for noise."""
    if c.order == 2:
        nodes = ["A", "B"]
        if c.response == "lowpass":
            parts = [("R1", "0", "A"), ("R2", "A", "B"), ("C1", "A", "O"), ("C2", "B", "0")]
        else:
            parts = [("C1", "0", "A"), ("C2", "A", "B"), ("R1", "A", "O"), ("R2", "B", "0")]
    else:
        nodes = ["B"]
        if c.response == "lowpass":
            parts = [("R1", "0", "B"), ("C1", "B", "0")]
        else:
            parts = [("C1", "0", "B"), ("R1", "B", "0")]
    nodes.append("O")
    if c.rf is not None:
        nodes.append("N")
        parts += [("RF", "O", "N"), ("RG", "N", "0")]
    return nodes, parts


def stage_noise_transfers(
    c: StageCircuit, amp: Amplifier | None, f_hz: np.ndarray
) -> dict[str, np.ndarray]:
    """Transfer from each noise source of a stage to its output, at ``f_hz``.

    Returns
    -------
    dict
        Resistor name -> output volts per ampere of a current source across it (ohm);
        ``"en"`` -> output volts per volt in series with the + input; ``"in+"``, ``"in-"``
        -> output volts per ampere into that input (ohm). Complex arrays over ``f_hz``.
    """
    s = 2j * math.pi * np.asarray(f_hz, float)
    nodes, parts = _elements(c)
    ro = 0.0 if amp is None else amp.output_resistance_ohm
    if ro > 0:
        nodes.append("S")
    driven = "S" if ro > 0 else "O"  # the node whose row is the amplifier's equation
    index = {name: i for i, name in enumerate(nodes)}
    n, nf = len(nodes), len(s)
    m = np.zeros((nf, n, n), complex)
    values = c.parts()

    def stamp(p: str, q: str, y: np.ndarray | float) -> None:
        for a, b in ((p, q), (q, p)):
            if a != "0" and a != driven:
                m[:, index[a], index[a]] += y
                if b != "0":
                    m[:, index[a], index[b]] -= y

    for name, p, q in parts:
        v = values[name]
        stamp(p, q, s * v if name.startswith("C") else 1.0 / v)
    if ro > 0:
        stamp("O", "S", 1.0 / ro)
    if amp is None:
        a_ol = np.full(nf, _IDEAL_GAIN, complex)
    else:
        wt = 2 * math.pi * amp.gbw_hz
        a_ol = wt / (s + wt / amp.open_loop_gain)
    minus = "N" if c.rf is not None else "O"
    row = index[driven]
    m[:, row, row] = 1.0
    m[:, row, index["B"]] -= a_ol
    m[:, row, index[minus]] += a_ol
    # right-hand sides: one column per source
    names = [name for name, _, _ in parts if name.startswith("R")] + ["en", "in+", "in-"]
    rhs = np.zeros((nf, n, len(names)), complex)
    for j, name in enumerate(names):
        if name == "en":
            rhs[:, row, j] = a_ol
            continue
        if name in ("in+", "in-"):
            node = "B" if name == "in+" else minus
            if node != driven:
                rhs[:, index[node], j] = 1.0
            continue
        _, p, q = next(e for e in parts if e[0] == name)
        for node, sign in ((p, 1.0), (q, -1.0)):
            if node != "0" and node != driven:
                rhs[:, index[node], j] = sign
    out = np.linalg.solve(m, rhs)[:, index["O"], :]
    return {name: out[:, j] for j, name in enumerate(names)}


def stage_noise_psd(
    c: StageCircuit, amp: Amplifier | None, f_hz: np.ndarray, temperature_k: float
) -> dict[str, np.ndarray]:
    """Output noise density of one stage per source, V^2/Hz (sources with no noise left out).

    A resistor's thermal noise 4kTR appears as 4kT/R A^2/Hz across it (Johnson 1928;
    Nyquist 1928); the amplifier's figures are its input voltage and current densities.
    """
    transfers = stage_noise_transfers(c, amp, f_hz)
    values = c.parts()
    out: dict[str, np.ndarray] = {}
    for name, h in transfers.items():
        if name.startswith("R"):
            density = 4 * BOLTZMANN_J_PER_K * temperature_k / values[name]
        elif amp is None:
            continue
        elif name == "en":
            density = amp.noise_v_per_rthz**2
        else:
            density = amp.noise_a_per_rthz**2
        out[name] = np.abs(h) ** 2 * density
    return out


# --- filters and designs -------------------------------------------------------------------


@dataclass(frozen=True)
class NoiseSpectrum:
    """Output noise density of a filter (or a sum), and what it is made of.

    Attributes
    ----------
    f_hz : ndarray
    psd_v2_per_hz : ndarray
        Total output noise density, V^2/Hz.
    parts : dict
        (stage number, source) -> its share of ``psd_v2_per_hz``; source is a part name
        (R1, R2, RF, RG) or ``"en"``, ``"in+"``, ``"in-"`` (see :data:`SOURCE_WORDS`).
        Stage numbers of a sum are written "filter name stage".
    """

    f_hz: np.ndarray
    psd_v2_per_hz: np.ndarray
    parts: dict[tuple[str, str], np.ndarray]


def filter_noise(
    f: Filter, amp: Amplifier | None, f_hz: np.ndarray, temperature_k: float
) -> NoiseSpectrum:
    """Output noise density of a filter: each stage's noise shaped by the stages after it."""
    f_hz = np.asarray(f_hz, float)
    after = np.ones(f_hz.shape)
    parts: dict[tuple[str, str], np.ndarray] = {}
    for stage in reversed(f.stages):
        built = stage.built if amp is not None else stage.ideal
        for source, psd in stage_noise_psd(stage.circuit, amp, f_hz, temperature_k).items():
            parts[(str(stage.index), source)] = psd * after
        h = sallenkey.response(sallenkey.split_sections(built), f_hz)
        after = after * np.abs(h) ** 2
    parts = dict(sorted(parts.items()))
    total = np.sum(list(parts.values()), axis=0)
    return NoiseSpectrum(f_hz, total, parts)


def sum_noise(spectra: dict[str, NoiseSpectrum]) -> NoiseSpectrum:
    """The noise of a crossover's sum: the ways have their own amplifiers, so their noises
    are uncorrelated and add as powers."""
    first = next(iter(spectra.values()))
    parts = {
        (f"'{name}' stage {stage}", source): psd
        for name, spec in spectra.items()
        for (stage, source), psd in spec.parts.items()
    }
    total = np.sum([s.psd_v2_per_hz for s in spectra.values()], axis=0)
    return NoiseSpectrum(first.f_hz, total, parts)


@dataclass(frozen=True)
class NoiseFigures:
    """The noise of one output in numbers.

    Attributes
    ----------
    name : str
        Filter name, or "sum".
    band_hz : (float, float)
    weighted : bool
        Whether A-weighted figures are given (audio band).
    rms_v, rms_a_v : float
        Integrated output noise over the band, V rms, unweighted and A-weighted (None).
    spot_hz, spot_v_per_rthz : float
        Output noise density at 1 kHz (or the band's geometric centre outside audio).
    level_dbfs, level_a_dbfs : float
        The noise re full scale: 20 lg(rms / (full scale / sqrt 2)), so a full-scale sine is
        0 dBFS.
    snr_db, snr_a_db : float
        Output of a full-scale input sine in the passband over the noise, dB.
    dynamic_range_db, dynamic_range_a_db : float or None
        Largest output sine no stage clips at (the amplifier's swing through the stage
        gains and internal peaks) over the noise, dB; None without an amplifier model.
    dominant_stage : str
        The stage contributing most noise power (weighted when ``weighted``).
    dominant_stage_share : float
        Its fraction of the total.
    dominant_source : (str, str)
        (stage, source) contributing most.
    dominant_source_share : float
    """

    name: str
    band_hz: tuple[float, float]
    weighted: bool
    rms_v: float
    rms_a_v: float | None
    spot_hz: float
    spot_v_per_rthz: float
    level_dbfs: float
    level_a_dbfs: float | None
    snr_db: float
    snr_a_db: float | None
    dynamic_range_db: float | None
    dynamic_range_a_db: float | None
    dominant_stage: str
    dominant_stage_share: float
    dominant_source: tuple[str, str]
    dominant_source_share: float

    def stage_words(self) -> str:
        """The dominant stage in words: "stage 2", or "'woofer' stage 2" in a sum."""
        return stage_words(self.dominant_stage)

    def source_words(self) -> str:
        """The dominant source in words, e.g. "stage 2 R1 thermal noise"."""
        stage, source = self.dominant_source
        what = SOURCE_WORDS.get(source, f"{source} thermal noise")
        return f"{stage_words(stage)} {what}"


def stage_words(label: str) -> str:
    """A stage label of :class:`NoiseSpectrum` in words."""
    return f"stage {label}" if label.isdigit() else label


@dataclass(frozen=True)
class DesignNoise:
    """Noise figures of every filter of a design, and of the sum of two or more."""

    temperature_k: float
    band_hz: tuple[float, float]
    weighted: bool
    filters: tuple[NoiseFigures, ...]
    sum: NoiseFigures | None
    spectra: dict[str, NoiseSpectrum]


def is_audio_band(band_hz: tuple[float, float]) -> bool:
    """A band starting near 20 Hz and reaching at least 15 kHz: A-weighting applies."""
    return 15.0 <= band_hz[0] <= 25.0 and band_hz[1] >= 15000.0


def band_grid(band_hz: tuple[float, float], points: int = GRID_POINTS) -> np.ndarray:
    """Log-spaced frequencies over a band (a band from 0 starts at 1e-4 of its top)."""
    lo, hi = band_hz
    return np.geomspace(lo if lo > 0 else 1e-4 * hi, hi, points)


def _integrate(f_hz: np.ndarray, psd: np.ndarray) -> float:
    return float(np.trapezoid(psd, f_hz))


def _db(ratio: float) -> float:
    return 20 * math.log10(ratio) if ratio > 0 else -math.inf


def figures(
    name: str,
    spectrum: NoiseSpectrum,
    *,
    weighted: bool,
    full_scale_v: float,
    passband_gain: float,
    max_output_peak_v: float | None,
) -> NoiseFigures:
    """Integrated noise, levels, SNR, dynamic range and dominance of one noise spectrum.

    Parameters
    ----------
    name : str
    spectrum : NoiseSpectrum
        Over the band (its ``f_hz`` is the band's grid).
    weighted : bool
        Also give A-weighted figures (IEC 61672-1); dominance is then weighted too.
    full_scale_v : float
        Volts of a 0 dBFS peak (the design's full-scale calibration).
    passband_gain : float
        Gain a full-scale input sine sees in the passband.
    max_output_peak_v : float or None
        Peak of the largest output sine no stage clips at.
    """
    f = spectrum.f_hz
    w2 = 10 ** (a_weighting_db(f) / 10) if weighted else np.ones(f.shape)
    rms = math.sqrt(_integrate(f, spectrum.psd_v2_per_hz))
    rms_a = math.sqrt(_integrate(f, spectrum.psd_v2_per_hz * w2)) if weighted else None
    fs_rms = full_scale_v / math.sqrt(2)
    signal_rms = fs_rms * abs(passband_gain)
    spot = 1000.0 if f[0] <= 1000.0 <= f[-1] else math.sqrt(f[0] * f[-1])
    spot_density = math.sqrt(float(np.interp(math.log(spot), np.log(f), spectrum.psd_v2_per_hz)))
    powers = {key: _integrate(f, psd * w2) for key, psd in spectrum.parts.items()}
    total = sum(powers.values())
    by_stage: dict[str, float] = {}
    for (stage, _), p in powers.items():
        by_stage[stage] = by_stage.get(stage, 0.0) + p
    top_stage = max(by_stage, key=lambda k: by_stage[k])
    top_source = max(powers, key=lambda k: powers[k])

    def ratio_db(numerator: float | None, noise: float | None) -> float | None:
        return None if numerator is None or noise is None else _db(numerator / noise)

    max_rms = None if max_output_peak_v is None else max_output_peak_v / math.sqrt(2)
    return NoiseFigures(
        name=name,
        band_hz=(float(f[0]), float(f[-1])),
        weighted=weighted,
        rms_v=rms,
        rms_a_v=rms_a,
        spot_hz=spot,
        spot_v_per_rthz=spot_density,
        level_dbfs=_db(rms / fs_rms),
        level_a_dbfs=None if rms_a is None else _db(rms_a / fs_rms),
        snr_db=_db(signal_rms / rms),
        snr_a_db=ratio_db(signal_rms, rms_a),
        dynamic_range_db=ratio_db(max_rms, rms),
        dynamic_range_a_db=ratio_db(max_rms, rms_a),
        dominant_stage=top_stage,
        dominant_stage_share=by_stage[top_stage] / total if total else 0.0,
        dominant_source=top_source,
        dominant_source_share=powers[top_source] / total if total else 0.0,
    )


def largest_output_peak_v(f: Filter, amp: Amplifier | None, full_scale_v: float) -> float | None:
    """Peak of the largest passband output sine no stage clips at, V (None: ideal amplifier).

    The input may rise until the first stage output reaches the swing at its worst
    frequency (:attr:`filtertwin.circuit.design.Stage.clip_input_dbfs`); the output is then that
    input through the passband gain, and never more than the swing.
    """
    if amp is None:
        return None
    clips = [s.clip_input_dbfs for s in f.stages if s.clip_input_dbfs is not None]
    if not clips:
        return None
    input_peak = full_scale_v * 10 ** (min(clips) / 20)
    return min(input_peak * abs(f.passband_gain), amp.swing_v)


def design_noise(
    design: Design,
    band_hz: tuple[float, float] | None = None,
    *,
    weighted: bool | None = None,
    points: int = GRID_POINTS,
) -> DesignNoise:
    """The noise of every filter of a design and of their sum.

    Parameters
    ----------
    design : Design
    band_hz : (float, float), optional
        Band to integrate over; default 20 Hz to 20 kHz.
    weighted : bool, optional
        Give A-weighted figures too; default: for an audio band (:func:`is_audio_band`).
    points : int
        Log-spaced frequencies over the band.

    Examples
    --------
    >>> from filtertwin.circuit.design import load
    >>> n = design_noise(load("bookshelf-2way"))
    >>> [f.name for f in n.filters], n.sum is not None
    (['woofer', 'tweeter'], True)
    """
    band = band_hz or AUDIO_BAND_HZ
    if weighted is None:
        weighted = is_audio_band(band)
    temperature = design.spec.parts.temperature_k
    grid = band_grid(band, points)
    amp = design.amplifier
    fs_v = design.spec.full_scale_v
    spectra: dict[str, NoiseSpectrum] = {}
    figs = []
    for f in design.filters:
        spectra[f.name] = filter_noise(f, amp, grid, temperature)
        figs.append(
            figures(
                f.name, spectra[f.name], weighted=weighted, full_scale_v=fs_v,
                passband_gain=f.passband_gain,
                max_output_peak_v=largest_output_peak_v(f, amp, fs_v),
            )
        )  # fmt: skip
    total = None
    if len(design.filters) > 1:
        spectra["sum"] = sum_noise({f.name: spectra[f.name] for f in design.filters})
        peaks = [largest_output_peak_v(f, amp, fs_v) for f in design.filters]
        total = figures(
            "sum", spectra["sum"], weighted=weighted, full_scale_v=fs_v,
            passband_gain=max(abs(f.passband_gain) for f in design.filters),
            max_output_peak_v=None if None in peaks else min(p for p in peaks if p is not None),
        )  # fmt: skip
    return DesignNoise(temperature, band, weighted, tuple(figs), total, spectra)


# --- the noise as a signal -------------------------------------------------------------------


def shaping_fir(psd_fs2_per_hz: np.ndarray, rate_hz: float) -> np.ndarray:
    """A linear-phase FIR that turns unit-variance white noise into noise of the given
    one-sided density (full-scale units squared per Hz) at ``rate_hz``.

    ``psd_fs2_per_hz`` holds the density at k rate / taps, k = 0 .. taps / 2. White noise of
    variance 1 has the one-sided density 2 / rate, so the FIR's magnitude is
    sqrt(density rate / 2). Designed by frequency sampling and a 4-term Blackman-Harris
    window (sidelobes near -92 dB).
    """
    taps = 2 * (len(psd_fs2_per_hz) - 1)
    magnitude = np.sqrt(np.asarray(psd_fs2_per_hz, float) * rate_hz / 2)
    h = np.roll(np.fft.irfft(magnitude, taps), taps // 2)
    n = np.arange(taps)
    w = 2 * np.pi * n / taps
    window = 0.35875 - 0.48829 * np.cos(w) + 0.14128 * np.cos(2 * w) - 0.01168 * np.cos(3 * w)
    return h * window


class CircuitNoiseSource:
    """Each filter's computed output noise as a signal, block by block, in full-scale units.

    Gaussian white noise (seeded) through a shaping FIR per filter (:func:`shaping_fir`) whose
    density is :func:`filter_noise` divided by the full-scale voltage squared: the noise a
    board adds, at its true level against full scale (1.0 = ``full_scale_v``). The filters'
    noises are independent (separate amplifiers). The FIR runs by FFT convolution with its
    tail carried between blocks, and is run in for one FIR length before the first block, so
    the noise is stationary from the first sample.

    Parameters
    ----------
    design : Design
    names : sequence of str
        The filters, in the order of the twin's outputs.
    rate_hz : float
        Output sample rate.
    channels : int
    seed : int
    resolution_hz : float
        Frequency spacing of the FIR design (the FIR is about rate / resolution long).
    """

    def __init__(
        self,
        design: Design,
        names: list[str],
        rate_hz: float,
        channels: int,
        *,
        seed: int = 0,
        resolution_hz: float = 2.0,
    ) -> None:
        from scipy import signal

        self._convolve = signal.oaconvolve
        taps = int(2 ** math.ceil(math.log2(max(rate_hz / resolution_hz, 64))))
        f = np.arange(taps // 2 + 1) * rate_hz / taps
        f_eval = f.copy()
        f_eval[0] = f[1] / 4  # the density just above DC stands for DC
        scale = design.spec.full_scale_v**2
        self.firs = np.array([
            shaping_fir(
                filter_noise(
                    design.filter(n), design.amplifier, f_eval, design.spec.parts.temperature_k
                ).psd_v2_per_hz / scale,
                rate_hz,
            )
            for n in names
        ])  # fmt: skip
        self.channels = channels
        self.rng = np.random.default_rng(seed)
        self.tail = np.zeros((len(names), taps - 1, channels))
        self.next(taps)  # run in

    def next(self, frames: int) -> np.ndarray:
        """The next ``frames`` samples, ``(filters, frames, channels)``."""
        n, taps = self.firs.shape
        if frames == 0:
            return np.zeros((n, 0, self.channels))
        x = self.rng.standard_normal((n, frames, self.channels))
        y = self._convolve(x, self.firs[:, :, None], mode="full", axes=1)
        y[:, : taps - 1] += self.tail
        self.tail = y[:, frames:].copy()
        return y[:, :frames]
