"""The Design: filters -> stages -> parts, and the as-built analog model of each.

``build_design(spec)`` is the one entry point: it turns a validated :class:`DesignSpec`
(from a file or from keyword arguments) into stages with real parts, analyses every stage
exactly (ideal and with the amplifier model), orders the stages, computes each stage's
internal peak gain and collects the warnings an engineer would want before building.
Nothing here reads or writes files.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from filtertwin.circuit import prototypes, sallenkey
from filtertwin.circuit.sallenkey import Amplifier, StageCircuit, StageModel
from filtertwin.circuit.spec import AmplifierSpec, BuiltStageSpec, DesignSpec, FilterSpec, PartsSpec
from filtertwin.circuit.synthesis import PartRules, SynthesisError, synthesize
from filtertwin.errors import UserInputError

Section = tuple[np.ndarray, np.ndarray]  # (b, a) polynomials in s, highest power first

# common practice (no single source): gain-bandwidth should be 50x to 100x above K * f0 * Q
GBW_FACTOR = 50.0
# an amplifier that moves a stage's f0 or Q by more than this (percent) is worth a warning:
# more than the rounding of 1 % parts moves it
AMP_SHIFT_PCT = 1.0
# common practice: an internal peak more than 3 dB above the passband gain costs headroom
PEAK_MARGIN_DB = 3.0
# the band the design table checks the slew rate over (the twin checks its own band)
SLEW_BAND_HZ = (20.0, 20000.0)
# common practice (Horowitz & Hill 3rd ed. 6.3, from memory): a Sallen-Key stage above Q 10
# is very sensitive to its parts and the amplifier; such stages are built another way
HIGH_Q = 10.0
# common practice: above 1 MOhm thermal noise and bias-current offset dominate
HIGH_OHM = 1e6
BOLTZMANN_J_PER_K = 1.380649e-23  # SI brochure, 9th ed. (2019), exact
ROOM_K = 298.15


@dataclass(frozen=True)
class Target:
    f0_hz: float
    q: float  # nan for a first-order stage
    gain: float


@dataclass(frozen=True)
class Stage:
    """One built stage: what was asked, what the parts give, and what it does to headroom.

    Attributes
    ----------
    circuit : StageCircuit
        Topology and part values.
    target : Target or None
        The synthesis target (None for a stage given by its parts).
    ideal : StageModel
        Exact response of the parts with an ideal amplifier.
    built : StageModel
        Exact response with the amplifier model (equal to ``ideal`` without one).
    peak_gain_db : float
        Largest gain from the filter input to this stage's output, over frequency.
    clip_input_dbfs : float or None
        Input level (dBFS peak, sine at the worst frequency) at which this stage's output
        reaches the amplifier's swing; None without an amplifier model.
    """

    index: int
    circuit: StageCircuit
    target: Target | None
    ideal: StageModel
    built: StageModel
    peak_gain_db: float
    clip_input_dbfs: float | None


@dataclass(frozen=True)
class StopbandFloor:
    """The bottom of a low-pass's as-built stopband.

    Attributes
    ----------
    level_db : float
        Lowest gain of the as-built response, dB relative to the passband gain.
    at_hz : float
        Frequency of that lowest gain, where the response stops falling.
    rises_to_db : float
        Highest gain (dB re passband) above ``at_hz``, up to 100 x the amplifier poles: a
        low-pass rises towards the level where the capacitors short and the amplifiers no
        longer act, (Ro || R2) / (R1 + Ro || R2) per unity-gain stage.
    """

    level_db: float
    at_hz: float
    rises_to_db: float


@dataclass(frozen=True)
class StageSlew:
    """How close a full-scale sine brings one stage's output to the amplifier's slew rate.

    Attributes
    ----------
    stage : int
        1-based stage number.
    peak_v : float
        Largest output over the band for a full-scale sine input, V peak (full scale times
        the largest gain from the filter input to this stage's output, at most the swing).
    full_power_hz : float
        Full-power bandwidth at that output, SR / (2 pi peak_v), Hz: the highest frequency a
        sine of ``peak_v`` can have without slewing.
    demand : float
        Largest slope of the stage's output for a full-scale sine in the band, 2 pi f
        min(swing, full scale |H(f)|), as a fraction of the slew rate (>= 1: it slews).
    slews_from_hz : float or None
        Lowest frequency in the band where a full-scale sine makes this stage slew; None if
        none does.

    References
    ----------
    P. Horowitz, W. Hill, The Art of Electronics, 3rd ed., chapter 4: slew rate and the
    full-power bandwidth SR / (2 pi Vpeak).
    """

    stage: int
    peak_v: float
    full_power_hz: float
    demand: float
    slews_from_hz: float | None


@dataclass(frozen=True)
class Filter:
    name: str
    response: str
    polarity: int
    stages: tuple[Stage, ...]
    spec: FilterSpec
    resembles: prototypes.AlignmentMatch | None

    @property
    def passband_gain(self) -> float:
        """Product of the stage gains with an ideal amplifier (sign = polarity)."""
        return self.polarity * math.prod(s.ideal.gain for s in self.stages)

    def stage_sections(self, amplifier: bool = True) -> list[tuple[int, Section]]:
        """(stage number, s-domain section) pairs whose product is the whole filter.

        Sections have order <= 2. With ``amplifier=True`` each stage with an amplifier pole
        contributes its network part and a first-order section for that pole. The polarity
        is folded into the first section.
        """
        tagged = [
            (stage.index, section)
            for stage in self.stages
            for section in sallenkey.split_sections(stage.built if amplifier else stage.ideal)
        ]
        first, (b0, a0) = tagged[0]
        tagged[0] = (first, (self.polarity * b0, a0))
        return tagged

    def amplifier_sections(self, amplifier: bool = True) -> list[bool]:
        """For each section of :meth:`stage_sections`: True for a stage's amplifier section
        (:func:`filtertwin.circuit.sallenkey.amplifier_section_flags`)."""
        return [
            flag
            for stage in self.stages
            for flag in sallenkey.amplifier_section_flags(stage.built if amplifier else stage.ideal)
        ]

    @property
    def passband_db(self) -> float:
        """:attr:`passband_gain` in dB (its magnitude)."""
        return 20 * math.log10(abs(self.passband_gain))

    def analog_sections(self, amplifier: bool = True) -> list[Section]:
        """The sections of :meth:`stage_sections` without their stage numbers."""
        return [section for _, section in self.stage_sections(amplifier)]

    def frequency_response(self, f_hz: np.ndarray, amplifier: bool = True) -> np.ndarray:
        """Complex frequency response at ``f_hz`` (Hz)."""
        return sallenkey.response(self.analog_sections(amplifier), f_hz)

    def group_delay_s(self, f_hz: np.ndarray, amplifier: bool = True) -> np.ndarray:
        """Exact group delay in seconds: -d(phase)/d(omega) = -Re(b'/b - a'/a) at s = j w."""
        s = 2j * math.pi * np.asarray(f_hz, float)
        total = np.zeros(s.shape)
        for b, a in self.analog_sections(amplifier):
            db, da = np.polyder(b) if len(b) > 1 else np.zeros(1), np.polyder(a)
            total -= np.real(
                np.polyval(db, s) / np.polyval(b, s) - np.polyval(da, s) / np.polyval(a, s)
            )
        return total

    def stopband_floor(self) -> StopbandFloor | None:
        """Where the upper stopband of a low-pass (or band-pass) stops falling.

        With the amplifier's open-loop output resistance in the model, the input reaches the
        output around each amplifier as its loop gain falls, so the as-built response falls
        to a lowest level, then turns back up towards a constant. None for a high-pass, or
        when the response keeps falling up to 100 x the amplifier's gain-bandwidth (an ideal
        amplifier, or no output resistance). The model leaves out stray capacitance and
        coupling through supplies and ground, which a real board adds.
        """
        if self.response == "highpass" or not self.stages:
            return None
        top = max(s.built.f0_hz for s in self.stages)
        poles = [s.built.extra_pole_hz or 0.0 for s in self.stages]
        f_end = max(1e3 * top, 100 * max(poles))
        grid = np.geomspace(top, f_end, 3000)
        sections = self.analog_sections(True)
        ref = abs(self.passband_gain)
        db = 20 * np.log10(np.maximum(np.abs(sallenkey.response(sections, grid)) / ref, 1e-300))
        # the first lowest point once the skirt is 20 dB down (a band-pass's high-pass
        # stages roll the response off again above their own amplifier poles)
        down = np.nonzero(db < -20.0)[0]
        rising = np.nonzero(np.diff(db) > 0)[0]
        rising = rising[rising > down[0]] if len(down) else rising[:0]
        if not len(rising) or rising[0] >= len(grid) - 2:
            return None
        i = int(rising[0])
        # refine the minimum between the neighbouring grid points (golden-section search)
        lo, hi = math.log(grid[max(i - 1, 0)]), math.log(grid[i + 1])

        def level(log_f: float) -> float:
            h = sallenkey.response(sections, np.array([math.exp(log_f)]))[0]
            return 20 * math.log10(max(abs(h) / ref, 1e-300))

        g = (math.sqrt(5) - 1) / 2
        for _ in range(60):
            a, b = hi - g * (hi - lo), lo + g * (hi - lo)
            if level(a) < level(b):
                hi = b
            else:
                lo = a
        at = math.exp((lo + hi) / 2)
        return StopbandFloor(level(math.log(at)), at, float(np.max(db[i:])))

    def stage_output_response(self, f_hz: np.ndarray, amplifier: bool = True) -> np.ndarray:
        """Complex response from the filter input to each stage's output, ``(stages, f)``."""
        f = np.asarray(f_hz, float)
        out = np.ones((len(self.stages), f.size), complex)
        h = np.ones(f.size, complex)
        for number, section in self.stage_sections(amplifier):
            h = h * sallenkey.response([section], f)
            out[number - 1] = h
        return out

    def slew_demands(
        self, amp: Amplifier, full_scale_v: float, band_hz: tuple[float, float] = SLEW_BAND_HZ
    ) -> tuple[StageSlew, ...]:
        """Every stage's slew-rate margin for a full-scale sine over ``band_hz`` (see
        :class:`StageSlew`)."""
        grid = np.geomspace(band_hz[0], band_hz[1], 2000)
        out_v = np.minimum(amp.swing_v, full_scale_v * np.abs(self.stage_output_response(grid)))
        slope = 2 * math.pi * grid * out_v / amp.slew_v_per_s
        result = []
        for stage, (v, d) in enumerate(zip(out_v, slope, strict=True), start=1):
            peak = float(np.max(v))
            over = np.nonzero(d >= 1.0)[0]
            result.append(
                StageSlew(
                    stage,
                    peak,
                    amp.slew_v_per_s / (2 * math.pi * peak),
                    float(np.max(d)),
                    float(grid[over[0]]) if len(over) else None,
                )  # fmt: skip
            )
        return tuple(result)

    def characteristic_hz(self) -> tuple[float, float]:
        """Lowest and highest stage frequency, for choosing plot and check bands."""
        f = [s.built.f0_hz for s in self.stages]
        return min(f), max(f)


@dataclass(frozen=True)
class DesignWarning:
    filter: str
    stage: int | None  # 1-based, None for the whole filter
    message: str

    def __str__(self) -> str:
        where = f"{self.filter}" + (f" stage {self.stage}" if self.stage else "")
        return f"{where}: {self.message}"


@dataclass(frozen=True)
class Design:
    spec: DesignSpec
    amplifier: Amplifier | None
    filters: tuple[Filter, ...]
    warnings: tuple[DesignWarning, ...]

    @property
    def title(self) -> str:
        return self.spec.title

    def filter(self, name: str) -> Filter:
        for f in self.filters:
            if f.name == name:
                return f
        names = ", ".join(f.name for f in self.filters)
        raise UserInputError(f"{self.spec.source}: no filter named {name!r}; filters here: {names}")


def amplifier_model(spec: AmplifierSpec | None) -> Amplifier | None:
    if spec is None:
        return None
    return Amplifier(
        spec.description,
        spec.gbw_hz,
        spec.swing_v,
        spec.slew_v_per_s,
        spec.noise_v_per_rthz,
        spec.noise_a_per_rthz,
        spec.open_loop_gain,
        spec.output_resistance_ohm,
    )


def part_rules(parts: PartsSpec) -> PartRules:
    return PartRules(
        resistor_series=parts.resistor_series,
        capacitor_series=parts.capacitor_series,
        gain_series=parts.gain_series,
        resistor_range_ohm=parts.resistor_range_ohm,
        capacitor_range_f=parts.capacitor_range_f,
    )


def _targets(f: FilterSpec) -> list[tuple[str, Target]]:
    """(response, target) per stage, before ordering and gain distribution."""
    out: list[tuple[str, Target]] = []
    if f.kind == "sections":
        return [(f.response, Target(s.f0_hz, s.q, 1.0)) for s in f.sections]
    assert f.alignment is not None and f.order is not None
    secs = prototypes.sections(
        f.alignment, f.order, ripple_db=f.ripple_db, bessel_norm=f.bessel_norm
    )
    if f.response == "bandpass":
        plan = [("highpass", f.corner_hz[0]), ("lowpass", f.corner_hz[1])]
    else:
        plan = [(f.response, f.corner_hz[0])]
    for response, corner in plan:
        for sec in secs:
            f0 = corner * sec.f0_ratio if response == "lowpass" else corner / sec.f0_ratio
            out.append((response, Target(f0, sec.q, 1.0)))
    return out


def _ordered(items: list, f: FilterSpec, q_of) -> list:
    if f.stage_order == "as-listed":
        return items
    key = [(0.0 if math.isnan(q_of(it)) else q_of(it)) for it in items]
    idx = sorted(
        range(len(items)), key=lambda i: key[i], reverse=f.stage_order == "highest-q-first"
    )
    return [items[i] for i in idx]


def _synthesised_circuits(
    f: FilterSpec, rules: PartRules, source: str, amp: Amplifier | None
) -> list[tuple[StageCircuit, Target]]:
    targets = _ordered(_targets(f), f, lambda rt: rt[1].q)
    k_each = f.gain ** (1.0 / len(targets)) if f.topology == "gain" else 1.0
    result = []
    for i, (response, t) in enumerate(targets):
        order = 1 if math.isnan(t.q) else 2
        topology = f.topology
        if topology == "equal" and order == 1:
            topology = "unity"
        try:
            circuit = synthesize(response, order, topology, t.f0_hz, t.q, k_each, rules, amp)
        except SynthesisError as exc:
            q_txt = "" if order == 1 else f", Q {t.q:.4g}"
            raise UserInputError(
                f"{source}: filter '{f.name}' stage {i + 1} ({response}, f0 {t.f0_hz:.5g} Hz"
                f"{q_txt}): {exc}"
            ) from None
        k_target = 3.0 - 1.0 / t.q if topology == "equal" else k_each
        result.append((circuit, Target(t.f0_hz, t.q, k_target)))
    return result


def _built_circuits(f: FilterSpec) -> list[tuple[StageCircuit, None]]:
    out = []
    for s in f.built:
        p = s.parts
        circuit = StageCircuit(
            s.response, s.order, s.topology, r1=p["R1"], c1=p["C1"], r2=p.get("R2"),
            c2=p.get("C2"), rf=p.get("RF"), rg=p.get("RG"),
        )  # fmt: skip
        out.append((circuit, None))
    return out  # a circuit given by its parts keeps its physical stage order


def _frequency_grid(models: list[StageModel]) -> np.ndarray:
    f = [m.f0_hz for m in models]
    return np.geomspace(min(f) / 100, max(f) * 100, 4000)


def _stages(
    circuits: list[tuple[StageCircuit, Target | None]], amp: Amplifier | None, full_scale_v: float
) -> tuple[Stage, ...]:
    ideal = [sallenkey.analyze(c, None) for c, _ in circuits]
    built = [
        sallenkey.analyze(c, amp) if amp else m for (c, _), m in zip(circuits, ideal, strict=True)
    ]
    grid = _frequency_grid(built)
    h = np.ones(grid.shape, complex)
    stages = []
    for i, ((circuit, target), mi, mb) in enumerate(zip(circuits, ideal, built, strict=True)):
        h = h * sallenkey.response(sallenkey.split_sections(mb), grid)
        peak = float(np.max(np.abs(h)))
        clip = None
        if amp is not None:
            clip = 20 * math.log10(amp.swing_v / (full_scale_v * peak))
        stages.append(Stage(i + 1, circuit, target, mi, mb, 20 * math.log10(peak), clip))
    return tuple(stages)


def lowpass_sections(stages: tuple[Stage, ...]) -> list[prototypes.Section]:
    """The stages (ideal amplifier) as low-pass prototype sections: a high-pass stage's f0
    is inverted, so both compare with the alignments' tables."""
    secs = []
    for s in stages:
        f0 = s.ideal.f0_hz
        ratio = f0 if s.circuit.response == "lowpass" else 1.0 / f0
        secs.append(prototypes.Section(s.circuit.order, ratio, s.ideal.q))
    return secs


def _resembles(stages: tuple[Stage, ...]) -> prototypes.AlignmentMatch | None:
    responses = {s.circuit.response for s in stages}
    if len(responses) != 1:
        return None
    return prototypes.nearest_alignment(lowpass_sections(stages))


def _amplifier_warnings(name: str, s: Stage, amp: Amplifier) -> list[DesignWarning]:
    """Warn when the amplifier's gain-bandwidth is short of the rule of thumb, or when it
    moves the stage more than the parts' rounding would (a stage with a wide spread of parts
    can be that sensitive even with a fast amplifier)."""
    q = 0.5 if math.isnan(s.ideal.q) else s.ideal.q
    need = GBW_FACTOR * s.ideal.gain * s.ideal.f0_hz * max(q, 0.5)
    f0_shift = 100 * (s.built.f0_hz / s.ideal.f0_hz - 1)
    q_shift = 0.0 if math.isnan(s.ideal.q) else 100 * (s.built.q / s.ideal.q - 1)
    moves = f"the amplifier moves f0 {f0_shift:+.1f} %"
    moves += "" if math.isnan(s.ideal.q) else f", Q {q_shift:+.1f} %"
    if amp.gbw_hz < need:
        text = (
            f"gain-bandwidth {amp.gbw_hz:.3g} Hz is below {GBW_FACTOR:.0f} x K x f0 "
            f"x Q = {need:.3g} Hz (common practice); {moves}"
        )
    elif max(abs(f0_shift), abs(q_shift)) > AMP_SHIFT_PCT:
        text = (
            f"{moves} although gain-bandwidth is {amp.gbw_hz / need * GBW_FACTOR:.0f} x K x f0 "
            "x Q: the spread of this stage's parts makes it sensitive to the amplifier; "
            "a faster amplifier or closer part values help"
        )
    else:
        return []
    return [DesignWarning(name, s.index, text)]


def _slew_warnings(f: Filter, amp: Amplifier, full_scale_v: float) -> list[DesignWarning]:
    """Warn where a full-scale sine in the audio band makes a stage slew (its full-power
    bandwidth at full scale falls inside the band, where the stage's output is that large)."""
    out = []
    for s in f.slew_demands(amp, full_scale_v):
        if s.slews_from_hz is None:
            continue
        out.append(
            DesignWarning(
                f.name,
                s.stage,
                f"full-power bandwidth SR / (2 pi Vpeak) = {amp.slew_v_per_s / 1e6:g} V/us / "
                f"(2 pi x {s.peak_v:.3g} V at full scale) = {s.full_power_hz / 1e3:.3g} kHz "
                f"(Horowitz & Hill) is inside {SLEW_BAND_HZ[0]:g} Hz to "
                f"{SLEW_BAND_HZ[1] / 1e3:g} kHz: a full-scale sine above "
                f"{s.slews_from_hz / 1e3:.3g} kHz slews here; a faster amplifier or a lower "
                "full scale avoids it",
            )
        )
    return out


def _part_range_messages(s: Stage, parts: PartsSpec) -> list[str]:
    """Parts outside the design's ranges; resistors above 1 MOhm also get their noise and
    the offset a bias current makes in them."""
    from filtertwin.circuit.units import format_letter_code

    out = []
    r_lo, r_hi = parts.resistor_range_ohm
    c_lo, c_hi = parts.capacitor_range_f
    for name, value in s.circuit.parts().items():
        kind = name[0]
        lo, hi, unit = (r_lo, r_hi, "ohm") if kind == "R" else (c_lo, c_hi, "F")
        if lo <= value <= hi:
            continue
        code = format_letter_code(value, "R" if kind == "R" else "C")
        span = f"{format_letter_code(lo, kind)}..{format_letter_code(hi, kind)}"
        if kind == "R" and value > HIGH_OHM:
            noise = math.sqrt(4 * BOLTZMANN_J_PER_K * ROOM_K * value)  # Johnson, Nyquist 1928
            why = (
                f"its thermal noise is {noise * 1e9:.0f} nV/rtHz at 25 C, and each 1 nA of "
                f"amplifier input bias current through it makes {value * 1e-9 * 1e3:.1f} mV "
                "of offset; a JFET- or CMOS-input amplifier, or lower resistors with larger "
                "capacitors, avoid both"
            )
        elif kind == "R":
            why = "common practice: lower loads the amplifier, higher adds noise"
        elif value > hi:
            why = "large capacitors are costly, bulky and seldom come in close tolerances"
        else:
            why = "stray and amplifier input capacitance (a few pF) become part of the filter"
        out.append(f"{name} = {code} ({value:.4g} {unit}) is outside the part range {span}: {why}")
    return out


def _high_q_message(s: Stage, passband_db: float) -> str:
    """A stage whose Q makes it ring, peak and depend strongly on its parts."""
    peak = s.peak_gain_db - passband_db
    return (
        f"Q {s.built.q:.1f} is above {HIGH_Q:g} (common practice): the stage peaks "
        f"{peak:+.1f} dB above the passband gain near {s.built.f0_hz:.4g} Hz and its ringing "
        f"after a step takes about {s.built.q / math.pi:.0f} cycles to fall by 1/e; check that "
        "this is intended"
    )


def _warnings(
    f: Filter, amp: Amplifier | None, parts: PartsSpec, full_scale_v: float
) -> list[DesignWarning]:
    out = []
    passband_db = f.passband_db
    for s in f.stages:
        out += [DesignWarning(f.name, s.index, m) for m in _part_range_messages(s, parts)]
        if not math.isnan(s.built.q) and s.built.q > HIGH_Q:
            out.append(DesignWarning(f.name, s.index, _high_q_message(s, passband_db)))
        if amp is not None:
            out += _amplifier_warnings(f.name, s, amp)
        excess = s.peak_gain_db - passband_db
        if excess > PEAK_MARGIN_DB and s.index < len(f.stages):
            clip = (
                f"; clips at {s.clip_input_dbfs:.1f} dBFS input"
                if s.clip_input_dbfs is not None
                else ""
            )
            out.append(
                DesignWarning(
                    f.name,
                    s.index,
                    f"internal peak {excess:.1f} dB above the passband gain eats headroom{clip} "
                    '(try stage_order = "lowest-q-first")',
                )
            )
        if s.clip_input_dbfs is not None and s.clip_input_dbfs < 0:
            out.append(
                DesignWarning(
                    f.name,
                    s.index,
                    f"output reaches the amplifier swing at {s.clip_input_dbfs:.1f} dBFS input: "
                    "a full-scale signal clips here",
                )
            )
    if amp is not None:
        out += _slew_warnings(f, amp, full_scale_v)
    return out


def build_design(spec: DesignSpec) -> Design:
    """Design every filter of a spec: parts, exact analog models, stage order and warnings.

    Raises
    ------
    UserInputError
        A stage target that the topology cannot reach with the allowed parts.
    """
    amp = amplifier_model(spec.amplifier)
    rules = part_rules(spec.parts)
    filters, warnings = [], []
    for fs in spec.filters:
        if fs.kind == "built":
            circuits: list = _built_circuits(fs)
        else:
            circuits = _synthesised_circuits(fs, rules, spec.source, amp)
        stages = _stages(circuits, amp, spec.full_scale_v)
        resembles = _resembles(stages) if fs.kind == "built" else None
        filt = Filter(fs.name, fs.response, fs.polarity, stages, fs, resembles)
        filters.append(filt)
        warnings += _warnings(filt, amp, spec.parts, spec.full_scale_v)
    return Design(spec, amp, tuple(filters), tuple(warnings))


def with_built_filters(
    design: Design,
    parts: Mapping[str, Sequence[Mapping[str, float]]],
    title: str | None = None,
) -> Design:
    """The design with some filters given by new part values (kind "built"), designed again.

    Parameters
    ----------
    design : Design
    parts : mapping of filter name -> one ``{"R1": ohm, "C1": farad, ...}`` per stage
        The named filters keep their name, response, polarity, stage order and each stage's
        topology; every other filter, the amplifier and the part rules stay as they are.
    title : str, optional
        A new title (e.g. naming the build).
    """
    filters = []
    for fs, filt in zip(design.spec.filters, design.filters, strict=True):
        if fs.name in parts:
            built = tuple(
                BuiltStageSpec(st.circuit.response, st.circuit.topology, dict(p))
                for st, p in zip(filt.stages, parts[fs.name], strict=True)
            )
            fs = replace(fs, kind="built", built=built)
        filters.append(fs)
    spec = replace(design.spec, filters=tuple(filters), title=title or design.spec.title)
    return build_design(spec)


def load(path: str | Path) -> Design:
    """Read, validate and design a design file (or a packaged example's name)."""
    from filtertwin import examples
    from filtertwin.circuit.spec import load_design

    return build_design(load_design(examples.resolve(str(path))))


def design_filter(
    name: str = "filter",
    *,
    amplifier: str | dict[str, Any] | None = None,
    parts: dict[str, Any] | None = None,
    full_scale: str | float = "1 V",
    **fields: Any,
) -> Design:
    """Design one filter from keyword arguments, with the design file's field names.

    Examples
    --------
    >>> d = design_filter(response="lowpass", alignment="butterworth", order=4, corner="1 kHz",
    ...                   amplifier="low-noise bipolar")
    >>> [round(s.target.q, 4) for s in d.filters[0].stages]
    [0.5412, 1.3066]
    """
    from filtertwin.circuit.spec import parse_design

    data: dict[str, Any] = {
        "filter": [{"name": name, **fields}],
        "signal": {"full_scale": full_scale},
    }
    if amplifier is not None:
        data["amplifier"] = {"preset": amplifier} if isinstance(amplifier, str) else amplifier
    if parts:
        data["parts"] = parts
    return build_design(parse_design(data, "<arguments>"))
