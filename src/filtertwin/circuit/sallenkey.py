"""Sallen-Key stages: analysis (parts -> exact s-domain transfer function) and synthesis.

Part names used throughout (the same for every topology):

low-pass second-order stage::

    in --R1--+--R2--+-- (+) amp --+-- out
             |      |             |
             C1     C2           RF (gain leg, absent at unity gain)
        (to out)  (to ground)     |
                                 RG -- ground

``R1`` is the input resistor, ``R2`` the resistor into the amplifier, ``C1`` the feedback
capacitor (from the R1/R2 junction to the output) and ``C2`` the capacitor from the amplifier
input to ground. The high-pass stage swaps the roles: ``C1`` and ``C2`` are in series in the
signal path, ``R1`` is the feedback resistor and ``R2`` goes to ground. The amplifier's gain
is ``K = 1 + RF / RG`` (``K = 1`` without RF and RG). A first-order stage is ``R1``/``C1`` (an RC
low-pass or a CR high-pass) into the same amplifier.

The analysis solves the network's node equations with admittances ``Y1`` (input element),
``Y2`` (element into the amplifier), ``Y3`` (element to ground) and ``Y4`` (feedback element).
With an ideal amplifier the output is ``K * V+``. The amplifier model is a single-pole
amplifier (gain-bandwidth ``wt``, DC open-loop gain ``A0``), ``A(s) = wt / (s + wt/A0)``, as an
internal source ``Vs = A(s) (V+ - V-)`` behind its open-loop output resistance ``Ro``; the
output node is loaded by the feedback element ``Y4`` and by the gain leg ``RF + RG``
(``Yf = 1 / (RF + RG)``, 0 at unity gain), and ``V- = Vout / K``. Writing ``A = An / Ad``,
``D = Y2 + Y3`` and ``L = Y1 D + Y2 Y3 + Y4 D``, the node equations give::

    Gd = Ad (1 + Ro Yf) + An / K
    H(s) = Y1 (An Y2 + Ro Y4 D Ad) / (Gd L + Ro Ad Y4 (Y1 D + Y2 Y3) - An Y4 Y2)

With ``Ro = 0`` this is ``Y1 Y2 G / (L - Y4 Y2 G)`` with the closed-loop gain
``G = An / Gd``. With ``Ro > 0`` the input reaches the output through ``Y1`` and ``Y4``
around the amplifier: as the loop gain falls, a low-pass stops falling and turns back up to
``Vout/Vin -> (Ro || R2 || (RF + RG)) / (R1 + Ro || R2 || (RF + RG))`` (the capacitors
short, the amplifier's internal source goes to 0). Every admittance is a polynomial in s
(``1/R`` or ``s C``), so the result is a ratio of polynomials with no approximation. The
next stage's input (at least R1, kilohms, against tens of ohms of ``Ro``) is not modelled.

References
----------
R. P. Sallen, E. L. Key, "A Practical Method of Designing RC Active Filters", IRE Trans.
Circuit Theory CT-2(1), 1955.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

TOPOLOGIES = ("unity", "equal", "gain")
RESPONSES = ("lowpass", "highpass")


@dataclass(frozen=True)
class Amplifier:
    """An operational amplifier described by its figures.

    Attributes
    ----------
    description : str
        Kind of amplifier in plain words, e.g. ``"low-noise bipolar, 10 MHz"``.
    gbw_hz : float
        Gain-bandwidth product in Hz.
    swing_v : float
        Peak output swing in V (the output clips at +/- swing_v).
    slew_v_per_s : float
        Slew rate in V/s.
    noise_v_per_rthz : float
        Input voltage noise density in V/sqrt(Hz).
    noise_a_per_rthz : float
        Input current noise density in A/sqrt(Hz).
    open_loop_gain : float
        DC open-loop gain (linear).
    output_resistance_ohm : float
        Open-loop output resistance in ohm (0: an ideal output).
    """

    description: str
    gbw_hz: float
    swing_v: float
    slew_v_per_s: float
    noise_v_per_rthz: float
    noise_a_per_rthz: float
    open_loop_gain: float = 1e5
    output_resistance_ohm: float = 0.0


# Generic presets named by kind. Every figure is a round number typical of the CLASS of
# amplifier (from memory / common practice: the span such amplifiers are sold in, rounded),
# not any one product's datasheet: gain-bandwidth, slew rate, swing on +/-15 V (the CMOS one
# on a single 5 V supply, rail to rail within 50 mV), input voltage and current noise
# densities (white, above the 1/f corner), DC open-loop gain and open-loop output resistance.
AMPLIFIER_PRESETS: dict[str, Amplifier] = {
    "general-purpose bipolar": Amplifier(
        "general-purpose bipolar, 1 MHz", 1e6, 13.0, 0.5e6, 20e-9, 0.5e-12, 1e5, 75.0
    ),
    "general-purpose JFET input": Amplifier(
        "general-purpose JFET input, 5 MHz", 5e6, 13.0, 10e6, 20e-9, 0.01e-12, 1e5, 100.0
    ),
    "low-noise bipolar": Amplifier(
        "low-noise bipolar, 10 MHz", 10e6, 13.0, 5e6, 3e-9, 1e-12, 1e6, 50.0
    ),
    "audio dual bipolar": Amplifier(
        "low-distortion audio dual, bipolar, 20 MHz", 20e6, 13.0, 10e6, 5e-9, 1e-12, 3e5, 50.0
    ),
    "rail-to-rail CMOS 5 V": Amplifier(
        "rail-to-rail CMOS on a 5 V supply, 10 MHz", 10e6, 2.45, 5e6, 10e-9, 1e-15, 1e5, 150.0
    ),
}


@dataclass(frozen=True)
class StageCircuit:
    """One buildable stage: its topology and its part values (ohm, farad).

    Attributes
    ----------
    response : {"lowpass", "highpass"}
    order : {1, 2}
    topology : {"unity", "equal", "gain"}
        ``"unity"``: the amplifier is a follower (K = 1). ``"equal"``: equal-component stage,
        R1 = R2 and C1 = C2, Q set by the gain K = 3 - 1/Q. ``"gain"``: any K >= 1.
    r1, c1, r2, c2 : float
        The RC network (``r2``/``c2`` are None for a first-order stage).
    rf, rg : float or None
        Gain resistors, K = 1 + rf / rg; None at unity gain.
    """

    response: str
    order: int
    topology: str
    r1: float
    c1: float
    r2: float | None = None
    c2: float | None = None
    rf: float | None = None
    rg: float | None = None

    @property
    def gain(self) -> float:
        """The amplifier's closed-loop gain K with an ideal amplifier."""
        if self.rf is None or self.rg is None:
            return 1.0
        return 1.0 + self.rf / self.rg

    @property
    def gain_leg_ohm(self) -> float | None:
        """RF + RG, the gain leg that loads the amplifier's output; None at unity gain."""
        if self.rf is None or self.rg is None:
            return None
        return self.rf + self.rg

    def parts(self) -> dict[str, float]:
        """Part values by designator within the stage (only the parts that exist)."""
        names = {"R1": self.r1, "R2": self.r2, "C1": self.c1, "C2": self.c2}
        names |= {"RF": self.rf, "RG": self.rg}
        return {k: float(v) for k, v in names.items() if v is not None}

    def with_parts(self, **values: float) -> StageCircuit:
        """A copy with some part values replaced (keys R1, R2, C1, C2, RF, RG)."""
        changes: dict[str, Any] = {k.lower(): float(v) for k, v in values.items()}
        return replace(self, **changes)


@dataclass(frozen=True)
class StageModel:
    """The exact analog behaviour of one stage.

    Attributes
    ----------
    b, a : ndarray
        Numerator and denominator polynomials in s (rad/s), highest power first.
    f0_hz, q : float
        Natural frequency and Q of the dominant pole pair (second-order stage) or the corner
        of the first-order stage (q is nan).
    gain : float
        Passband gain magnitude with an ideal amplifier (DC for a low-pass, high frequency for
        a high-pass): the amplifier's K, since the RC network passes 1 there.
    extra_pole_hz : float or None
        The pole added by the amplifier's finite gain-bandwidth, when modelled.
    """

    b: np.ndarray
    a: np.ndarray
    f0_hz: float
    q: float
    gain: float
    extra_pole_hz: float | None


Poly = list[Any]  # coefficients, highest power of s first; each a float or an array over builds


def _pmul(p: Poly, q: Poly) -> Poly:
    """Product of two polynomials (coefficients may be arrays: element-wise over builds)."""
    out = [np.zeros_like(p[0]) for _ in range(len(p) + len(q) - 1)]
    for i, pi in enumerate(p):
        for j, qj in enumerate(q):
            out[i + j] = out[i + j] + pi * qj
    return out


def _padd(p: Poly, q: Poly, sign: float = 1.0) -> Poly:
    """p + sign q, aligned at the constant term."""
    n = max(len(p), len(q))
    zero = np.zeros_like(p[0])
    p = [zero] * (n - len(p)) + p
    q = [zero] * (n - len(q)) + q
    return [a + sign * b for a, b in zip(p, q, strict=True)]


def _gain_leg_admittance(gain_leg_ohm: Any) -> Any:
    """1 / (RF + RG), or 0 at unity gain (no gain leg)."""
    return 0.0 if gain_leg_ohm is None else 1.0 / gain_leg_ohm


def amplifier_polynomials(
    k: Any, amp: Amplifier | None, gain_leg_ohm: Any = None
) -> tuple[Poly, Poly, Poly]:
    """Closed-loop non-inverting gain G(s) = Gn / Gd of an amplifier set to gain ``k``, and
    the open-loop denominator Ad.

    Ideal: G = k. Single-pole model: A(s) = An / Ad = wt / (s + wt / A0), feedback fraction
    1/k, output resistance Ro loaded by the gain leg RF + RG:
    G(s) = An / (Ad (1 + Ro / (RF + RG)) + An / k).
    """
    one = np.ones_like(k, dtype=float)
    if amp is None:
        return [k * one], [one], [one]
    wt = 2.0 * math.pi * amp.gbw_hz
    ad = [one, wt / amp.open_loop_gain * one]
    load = 1.0 + amp.output_resistance_ohm * _gain_leg_admittance(gain_leg_ohm)
    return [wt * one], _padd(_pmul(ad, [load * one]), [wt / k]), ad


def node_polynomials(
    response: str, order: int, r1: Any, c1: Any, r2: Any = None, c2: Any = None,
    k: Any = 1.0, amp: Amplifier | None = None, gain_leg_ohm: Any = None,
) -> tuple[Poly, Poly]:  # fmt: skip
    """Numerator and denominator of a stage from the node equations (module docstring).

    Every part value may be a float or an array over builds (the coefficients then are
    arrays too); ``gain_leg_ohm`` is RF + RG (None at unity gain). Returns coefficient lists,
    highest power first, ``b`` padded with leading zeros to the length of ``a``; not
    normalised.
    """
    gn, gd, ad = amplifier_polynomials(k, amp, gain_leg_ohm)
    ro = 0.0 if amp is None else amp.output_resistance_ohm
    zero = np.zeros_like(r1 * c1)
    if order == 1:
        rc = r1 * c1
        b = _pmul([zero + 1.0] if response == "lowpass" else [rc, zero], gn)
        a = _pmul([rc, zero + 1.0], gd)
    else:
        if response == "lowpass":
            y1, y2, y3, y4 = [1.0 / r1], [1.0 / r2], [c2, zero], [c1, zero]
        else:
            y1, y2, y3, y4 = [c1, zero], [c2, zero], [1.0 / r2], [1.0 / r1]
        y23 = _padd(y2, y3)
        load = _padd(_padd(_pmul(y1, y23), _pmul(y2, y3)), _pmul(y4, y23))
        a = _padd(_pmul(load, gd), _pmul(_pmul(y4, y2), gn), -1.0)
        b = _pmul(y1, _pmul(y2, gn))
        if ro:
            # the path around the amplifier: through Y4 into its output resistance
            around = _pmul(_pmul([ro * (zero + 1.0)], ad), y4)
            a = _padd(a, _pmul(around, _padd(_pmul(y1, y23), _pmul(y2, y3))))
            b = _padd(b, _pmul(y1, _pmul(around, y23)))
    return [zero] * (len(a) - len(b)) + b, a


def transfer_function(c: StageCircuit, amp: Amplifier | None = None) -> tuple[np.ndarray, ...]:
    """Exact s-domain transfer function of a stage from its parts.

    Parameters
    ----------
    c : StageCircuit
        The stage.
    amp : Amplifier, optional
        Amplifier model; None for an ideal amplifier.

    Returns
    -------
    b, a : ndarray
        Polynomials in s (rad/s), highest power first, normalised so that ``a[0] == 1``.
    """
    b_list, a_list = node_polynomials(
        c.response, c.order, c.r1, c.c1, c.r2, c.c2, c.gain, amp, c.gain_leg_ohm
    )  # fmt: skip
    a = np.trim_zeros(np.array(a_list, float), "f")
    b = np.trim_zeros(np.array(b_list, float), "f")
    return b / a[0], a / a[0]


def _dominant_pair(a: np.ndarray) -> tuple[float, float, float | None]:
    """f0 (Hz), Q and the extra real pole (Hz) from a 2nd- or 3rd-order denominator."""
    roots = np.roots(a)
    if len(roots) == 2:
        extra = None
        pair = roots
    else:
        order = np.argsort(np.abs(roots))
        # the amplifier pole is the fastest real root
        real_idx = [i for i in order if abs(roots[i].imag) < 1e-9 * abs(roots[i])]
        far = real_idx[-1] if real_idx else order[-1]
        extra = float(abs(roots[far])) / (2 * math.pi)
        pair = np.delete(roots, far)
    w0 = math.sqrt(abs(float(np.real(pair[0] * pair[1]))))
    sum_re = -float(np.real(pair[0] + pair[1]))
    q = w0 / sum_re if sum_re > 0 else math.inf
    return w0 / (2 * math.pi), q, extra


def analyze(c: StageCircuit, amp: Amplifier | None = None) -> StageModel:
    """The as-built stage: exact transfer function, f0, Q and passband gain.

    Parameters
    ----------
    c : StageCircuit
        The stage with its actual part values.
    amp : Amplifier, optional
        Amplifier model (finite gain-bandwidth); None for an ideal amplifier.

    Returns
    -------
    StageModel

    Examples
    --------
    >>> m = analyze(StageCircuit("lowpass", 2, "unity", r1=10e3, c1=22e-9, r2=10e3, c2=10e-9))
    >>> round(m.f0_hz, 1), round(m.q, 4)
    (1073.0, 0.7416)
    """
    b, a = transfer_function(c, amp)
    gain = c.gain  # the ideal passband gain: DC of a low-pass, infinity of a high-pass
    if c.order == 1:
        roots = np.roots(a)
        idx = np.argsort(np.abs(roots))
        f0 = float(abs(roots[idx[0]])) / (2 * math.pi)
        extra = float(abs(roots[idx[-1]])) / (2 * math.pi) if len(roots) > 1 else None
        return StageModel(b, a, f0, math.nan, gain, extra)
    f0, q, extra = _dominant_pair(a)
    return StageModel(b, a, f0, q, gain, extra)


def f0_q(response: str, r1: Any, r2: Any, c1: Any, c2: Any, k: Any) -> tuple[Any, Any]:
    """Textbook closed forms for f0 (Hz) and Q of a gain-K second-order stage.

    Low-pass: w0 = 1/sqrt(R1 R2 C1 C2), Q = sqrt(R1 R2 C1 C2) / (C2 (R1 + R2) + R1 C1 (1 - K)).
    High-pass: w0 the same, 1/Q = sqrt(R1 R2 C1 C2) ((C1 + C2) / (R2 C1 C2) + (1 - K)/(R1 C1)).
    Scalars or numpy arrays (broadcast). Q is -1 where the damping is zero or negative: an
    oscillator, not a filter stage.
    """
    t = np.sqrt(r1 * r2 * c1 * c2)
    if response == "lowpass":
        damping = (c2 * (r1 + r2) + r1 * c1 * (1 - k)) / t
    else:
        damping = t * ((c1 + c2) / (r2 * c1 * c2) + (1 - k) / (r1 * c1))
    with np.errstate(divide="ignore"):
        q = np.where(damping > 0, 1.0 / np.where(damping > 0, damping, 1.0), -1.0)
    return 1.0 / (2 * np.pi * t), q


def ideal_f0_q(c: StageCircuit) -> tuple[float, float]:
    """:func:`f0_q` of a second-order stage's parts (ideal amplifier)."""
    assert c.r2 is not None and c.c2 is not None
    f0, q = f0_q(c.response, c.r1, c.r2, c.c1, c.c2, c.gain)
    return float(f0), float(q)


def _far_real_root(poly: np.ndarray, scale_w: float) -> float:
    """The real root of largest magnitude of a polynomial in s (computed in s / scale_w)."""
    n = len(poly) - 1
    scaled = poly * scale_w ** np.arange(n, -1, -1.0)
    roots = np.roots(scaled / scaled[0]) * scale_w
    real = [float(r.real) for r in roots if abs(r.imag) <= 1e-7 * abs(r)]
    if not real:
        raise ValueError("a numerator of odd degree has no real root")  # cannot happen
    return _polish(poly, max(real, key=abs))


def _polish(poly: np.ndarray, z: float) -> float:
    """A real root refined by Newton steps."""
    slope = np.polyder(poly)
    for _ in range(3):
        step = np.polyval(poly, z) / np.polyval(slope, z)
        if not math.isfinite(step):
            break
        z -= float(step)
    return z


def _deflate_far(poly: np.ndarray, z: float) -> np.ndarray:
    """poly(s) / (s - z) for the root z of largest magnitude, dividing from the constant term
    up (the numerically stable direction for a large root)."""
    c = poly[::-1]  # ascending powers
    d = np.empty(len(c) - 1)
    d[0] = -c[0] / z
    for i in range(1, len(d)):
        d[i] = (d[i - 1] - c[i]) / z
    return d[::-1]


def split_sections(model: StageModel) -> list[tuple[np.ndarray, np.ndarray]]:
    """Factor a stage's transfer function into sections of order <= 2.

    A stage with an amplifier pole becomes its own network part (carrying the stage's gain)
    followed by a first-order section for the amplifier pole with unity gain at DC. When the
    amplifier's output resistance gives the numerator one degree more than the network part's
    denominator, the first-order section also takes the numerator's real zero of largest
    magnitude, so that each section stays proper and their product is the stage exactly.
    A stage without an amplifier pole is returned whole.
    """
    b, a = model.b, model.a
    if model.extra_pole_hz is None:
        return [(b, a)]
    p = _polish(a, -2 * math.pi * model.extra_pole_hz)
    rest = _deflate_far(np.asarray(a, float), p)
    num = np.trim_zeros(np.asarray(b, float), "f")
    if len(num) < len(a):
        return [(b / -p, rest), (np.array([-p]), np.array([1.0, -p]))]
    z = _far_real_root(num, 2 * math.pi * model.f0_hz)
    num_rest = _deflate_far(num, z)
    # (s - z) / (s - p) scaled to 1 at DC: (p / z) (s - z) / (s - p)
    return [(num_rest * z / p, rest), (np.array([p / z, -p]), np.array([1.0, -p]))]


def amplifier_section_flags(model: StageModel) -> list[bool]:
    """For each section :func:`split_sections` makes of ``model``, in its order: True for the
    amplifier's first-order section (the amplifier pole, with the zero its output resistance
    adds), which comes last; False for the network part."""
    return [False] if model.extra_pole_hz is None else [False, True]


def response(sections: list[tuple[np.ndarray, np.ndarray]], f_hz: np.ndarray) -> np.ndarray:
    """Complex frequency response of a cascade of s-domain sections at ``f_hz``."""
    s = 2j * math.pi * np.asarray(f_hz, float)
    h = np.ones_like(s)
    for b, a in sections:
        h = h * np.polyval(b, s) / np.polyval(a, s)
    return h
