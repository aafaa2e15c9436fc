"""Synthesis: a target (f0, Q, gain) becomes a Sallen-Key stage built from standard parts.

Capacitors come in coarse series, so they are chosen first: every allowed capacitor pair is
tried, the two resistors that give the exact target are solved in closed form, each is
rounded to its two neighbours in the resistor series, and every combination is scored by
its as-built f0 and Q error (exact formulas, ideal amplifier), with small penalties for
resistor spread and for impedances far from the middle of the allowed range. The best
combination wins. The search is vectorised over all candidates at once.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from filtertwin.circuit import eseries
from filtertwin.circuit.sallenkey import Amplifier, StageCircuit, analyze, f0_q


class SynthesisError(ValueError):
    """The target cannot be built with the allowed parts; the message says why."""


@dataclass(frozen=True)
class PartRules:
    """Which parts synthesis may use.

    Attributes
    ----------
    resistor_series, capacitor_series, gain_series : str
        IEC 60063 series names for the RC network's resistors, its capacitors, and the gain
        resistors RF/RG.
    resistor_range_ohm : (float, float)
        Allowed resistor values (common practice: 1 kOhm to 100 kOhm).
    capacitor_range_f : (float, float)
        Allowed capacitor values.
    """

    resistor_series: str = "E96"
    capacitor_series: str = "E12"
    gain_series: str = "E96"
    resistor_range_ohm: tuple[float, float] = (1e3, 100e3)
    capacitor_range_f: tuple[float, float] = (100e-12, 1e-6)

    def resistors(self, series: str | None = None) -> np.ndarray:
        lo, hi = self.resistor_range_ohm
        return eseries.values_in_range(series or self.resistor_series, lo, hi)

    @property
    def centre_ohm(self) -> float:
        """Geometric middle of the resistor range: the impedance synthesis leans towards."""
        lo, hi = self.resistor_range_ohm
        return math.sqrt(lo * hi)

    def capacitors(self) -> np.ndarray:
        lo, hi = self.capacitor_range_f
        return eseries.values_in_range(self.capacitor_series, lo, hi)


# Score weights: f0 and Q errors dominate; spread and impedance only break near-ties.
_W_SPREAD = 1e-3
_W_CENTRE = 1e-4
# With an amplifier model, this many of the best ideal candidates are analysed as built.
_AMP_CANDIDATES = 40
# A stage whose best rounding still misses f0 plus Q by more than this (log sum, about 2 %)
# cannot be built as asked: the target is out of reach of the allowed parts.
_MAX_LOG_ERROR = math.log(1.02)


def choose_gain_resistors(k: float, rules: PartRules) -> tuple[float, float] | None:
    """RF and RG from the gain series with 1 + RF/RG closest to ``k`` (None when k == 1)."""
    if k < 1.0:
        raise SynthesisError(f"gain {k:.4g} is below 1, which a non-inverting stage cannot give")
    if abs(k - 1.0) < 1e-12:
        return None
    r = rules.resistors(rules.gain_series)
    rf, rg = np.meshgrid(r, r, indexing="ij")
    err = np.abs(np.log((1.0 + rf / rg) / k))
    score = err + 1e-6 * np.abs(np.log(rg / rules.centre_ohm))
    i = np.unravel_index(np.argmin(score), score.shape)
    return float(rf[i]), float(rg[i])


def _bracket(values: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The series values just below and just above each x (clipped to the series ends)."""
    idx = np.searchsorted(values, x)
    hi = values[np.clip(idx, 0, len(values) - 1)]
    lo = values[np.clip(idx - 1, 0, len(values) - 1)]
    return lo, hi


def _solve_r1(response: str, c1, c2, t: float, q: float, k: float) -> np.ndarray:
    """Both roots of the quadratic in R1 that gives the exact (f0, Q); nan where none.

    Low-pass: (C2 + C1 (1-K)) R1^2 - (T/Q) R1 + T^2/C1 = 0.
    High-pass: ((C1 + C2)/T^2) R1^2 - R1/(T Q) + (1-K)/C1 = 0.  (T = 1/w0; R1 R2 = T^2/(C1 C2).)
    """
    if response == "lowpass":
        qa, qb, qc = c2 + c1 * (1 - k), -t / q * np.ones_like(c1), t * t / c1
        scale = c1 + c2
    else:
        qa, qb, qc = (c1 + c2) / (t * t), -np.ones_like(c1) / (t * q), (1 - k) / c1
        scale = (c1 + c2) / (t * t)
    disc = qb * qb - 4 * qa * qc
    with np.errstate(invalid="ignore", divide="ignore"):
        sq = np.where(disc >= 0, np.sqrt(np.abs(disc)), np.nan)
        linear = np.abs(qa) < 1e-12 * scale
        r_plus = np.where(linear, -qc / qb, (-qb + sq) / (2 * qa))
        r_minus = np.where(linear, np.nan, (-qb - sq) / (2 * qa))
    roots = np.stack([r_plus, r_minus])
    return np.where(roots > 0, roots, np.nan)


@functools.lru_cache(maxsize=256)  # a live edit rebuilds the whole design: reuse the rest
def synthesize(
    response: str,
    order: int,
    topology: str,
    f0_hz: float,
    q: float,
    k: float,
    rules: PartRules,
    amp: Amplifier | None = None,
) -> StageCircuit:
    """Choose standard parts for one stage.

    Parameters
    ----------
    response : {"lowpass", "highpass"}
    order : {1, 2}
    topology : {"unity", "equal", "gain"}
    f0_hz : float
        Target natural frequency (order 2) or corner (order 1), Hz.
    q : float
        Target Q (ignored for order 1).
    k : float
        Amplifier gain for topology "gain" (and for a first-order stage with gain); the
        "equal" topology sets K = 3 - 1/Q itself and "unity" uses K = 1.
    rules : PartRules
    amp : Amplifier, optional
        The amplifier the stage will be built with. Among the combinations that come
        closest with an ideal amplifier, the one closest as built with this amplifier wins:
        a wide spread of parts can make a stage sensitive to the amplifier's gain-bandwidth.

    Returns
    -------
    StageCircuit

    Raises
    ------
    SynthesisError
        When no combination of allowed parts reaches the target within about 2 %.
    """
    if topology == "unity":
        k = 1.0
    elif topology == "equal" and order == 2:
        if q < 0.5:
            raise SynthesisError(
                f"Q {q:.4g} is below 0.5, which an equal-component stage (K = 3 - 1/Q >= 1) "
                "cannot reach; use topology 'unity' or 'gain'"
            )
        k = 3.0 - 1.0 / q
    gain_parts = choose_gain_resistors(k, rules)
    rf, rg = gain_parts if gain_parts else (None, None)
    k_built = 1.0 + gain_parts[0] / gain_parts[1] if gain_parts else 1.0
    if order == 1:
        return _first_order(response, topology, f0_hz, rules, rf, rg)
    if topology == "equal":
        return _equal_component(response, f0_hz, q, k_built, rules, rf, rg, amp)
    return _general(response, topology, f0_hz, q, k_built, rules, rf, rg, amp)


def _score(f0, qv, f0_t, q_t, r1, r2, rules, c_ratio=1.0):
    err = np.abs(np.log(f0 / f0_t)) + np.abs(np.log(qv / q_t))
    spread = np.abs(np.log(r1 / r2)) + np.abs(np.log(c_ratio))
    impedance = np.abs(np.log(np.sqrt(r1 * r2) / rules.centre_ohm))
    return err + _W_SPREAD * spread + _W_CENTRE * impedance, err


def _rc_pairs(f0_hz: float, rules: PartRules) -> tuple[np.ndarray, np.ndarray]:
    """Every allowed capacitor, twice, with the series resistors just below and above
    1 / (2 pi f0 C): the candidates of a stage whose f0 is set by one R and one C."""
    caps = rules.capacitors()
    lo, hi = _bracket(rules.resistors(), 1.0 / (2 * math.pi * f0_hz * caps))
    return np.concatenate([lo, hi]), np.concatenate([caps, caps])


def _first_order(response, topology, f0_hz, rules, rf, rg) -> StageCircuit:
    r, c = _rc_pairs(f0_hz, rules)
    f0 = 1.0 / (2 * math.pi * r * c)
    err = np.abs(np.log(f0 / f0_hz))
    score = err + _W_CENTRE * np.abs(np.log(r / rules.centre_ohm))
    i = int(np.argmin(score))
    if err[i] > _MAX_LOG_ERROR:
        raise SynthesisError(
            f"corner {f0_hz:.4g} Hz is out of reach with the allowed parts "
            f"(best {f0[i]:.4g} Hz); widen the resistor or capacitor range"
        )
    return StageCircuit(response, 1, topology, r1=float(r[i]), c1=float(c[i]), rf=rf, rg=rg)


def _equal_component(response, f0_hz, q, k_built, rules, rf, rg, amp) -> StageCircuit:
    r, c = _rc_pairs(f0_hz, rules)
    f0, qv = f0_q(response, r, r, c, c, k_built)
    score, err = _score(f0, qv, f0_hz, q, r, r, rules)

    def make(j: int) -> StageCircuit:
        return StageCircuit(
            response, 2, "equal", r1=float(r[j]), c1=float(c[j]), r2=float(r[j]),
            c2=float(c[j]), rf=rf, rg=rg,
        )  # fmt: skip

    i = int(np.argmin(score))
    if err[i] > _MAX_LOG_ERROR:
        raise SynthesisError(
            f"f0 {f0_hz:.4g} Hz with Q {q:.4g} is out of reach for an equal-component stage "
            f"with the allowed parts (best f0 {f0[i]:.4g} Hz, Q {qv[i]:.4g}: Q = 1/(3 - K) "
            f"magnifies the gain resistors' rounding {q:.2g} times); use gain_resistors = "
            '"E192" or topology "gain"'
        )
    return _pick(score, err, make, f0_hz, q, amp)


def _general(response, topology, f0_hz, q, k_built, rules, rf, rg, amp) -> StageCircuit:
    caps = rules.capacitors()
    res = rules.resistors()
    c1, c2 = (a.ravel() for a in np.meshgrid(caps, caps, indexing="ij"))
    t = 1.0 / (2 * math.pi * f0_hz)
    roots = _solve_r1(response, c1, c2, t, q, k_built)  # (2, n)
    c1s, c2s = np.tile(c1, 2), np.tile(c2, 2)
    r1_ideal = roots.ravel()
    ok = np.isfinite(r1_ideal)
    if not np.any(ok):
        raise SynthesisError(_unreachable(response, topology, f0_hz, q, k_built, rules))
    c1s, c2s, r1_ideal = c1s[ok], c2s[ok], r1_ideal[ok]
    r2_ideal = t * t / (c1s * c2s * r1_ideal)
    r1_lo, r1_hi = _bracket(res, r1_ideal)
    r2_lo, r2_hi = _bracket(res, r2_ideal)
    r1 = np.concatenate([r1_lo, r1_lo, r1_hi, r1_hi])
    r2 = np.concatenate([r2_lo, r2_hi, r2_lo, r2_hi])
    cc1, cc2 = np.tile(c1s, 4), np.tile(c2s, 4)
    f0, qv = f0_q(response, r1, r2, cc1, cc2, k_built)
    with np.errstate(invalid="ignore"):
        score, err = _score(f0, qv, f0_hz, q, r1, r2, rules, cc1 / cc2)
    score = np.where(np.isfinite(score) & (qv > 0), score, np.inf)
    i = int(np.argmin(score))
    if not np.isfinite(score[i]) or err[i] > _MAX_LOG_ERROR:
        raise SynthesisError(_unreachable(response, topology, f0_hz, q, k_built, rules))

    def make(j: int) -> StageCircuit:
        return StageCircuit(
            response, 2, topology, r1=float(r1[j]), c1=float(cc1[j]), r2=float(r2[j]),
            c2=float(cc2[j]), rf=rf, rg=rg,
        )  # fmt: skip

    return _pick(score, err, make, f0_hz, q, amp)


def _pick(
    score: np.ndarray,
    err: np.ndarray,
    make: Callable[[int], StageCircuit],
    f0_hz: float,
    q: float,
    amp: Amplifier | None,
) -> StageCircuit:
    """The best candidate by its ideal-amplifier score, or, given an amplifier, the best as
    built (exact analysis with that amplifier) among the closest ideal candidates; the score's
    spread and impedance terms still break near-ties."""
    best = int(np.argmin(score))
    if amp is None:
        return make(best)
    order = np.argsort(score)[:_AMP_CANDIDATES]
    order = order[np.isfinite(score[order]) & (err[order] <= _MAX_LOG_ERROR)]
    as_built = []
    for j in order:
        m = analyze(make(int(j)), amp)
        as_built.append(abs(math.log(m.f0_hz / f0_hz)) + abs(math.log(m.q / q)) + score[j] - err[j])
    return make(int(order[int(np.argmin(as_built))]))


def _unreachable(response, topology, f0_hz, q, k, rules) -> str:
    """Why no part combination reaches (f0, Q): the time constant sqrt(R1 R2 C1 C2) =
    1 / (2 pi f0) outside what the ranges give (for a unity-gain stage, with the capacitor
    ratio its Q needs), or the Q itself."""
    lo, hi = rules.capacitor_range_f
    rlo, rhi = rules.resistor_range_ohm
    t = 1.0 / (2 * math.pi * f0_hz)
    spread = 2 * q if topology == "unity" else 1.0  # sqrt(C1/C2) or sqrt(R2/R1) >= 2 Q
    t_lo, t_hi = rlo * lo * spread, rhi * hi / spread
    ratio = "C1/C2" if response == "lowpass" else "R2/R1"
    if (topology != "unity" or spread**2 <= hi / lo) and not t_lo <= t <= t_hi:
        need = (
            f"capacitors up to {t * spread / rhi:.3g} F or resistors up to "
            f"{t * spread / hi:.3g} ohm"
            if t > t_hi
            else f"capacitors down to {t / (spread * rlo):.3g} F or resistors down to "
            f"{t / (spread * lo):.3g} ohm"
        )
        with_ratio = f" with {ratio} = 4 Q^2 = {spread**2:.3g}" if topology == "unity" else ""
        return (
            f"f0 {f0_hz:.4g} Hz is out of reach: it needs sqrt(R1 R2 C1 C2) = {t:.3g} s, and "
            f"capacitors {lo:.3g}..{hi:.3g} F with resistors {rlo:.3g}..{rhi:.3g} ohm{with_ratio} "
            f"give {t_lo:.3g}..{t_hi:.3g} s; widen the ranges to {need}"
        )
    if topology == "unity":
        return (
            f"Q {q:.4g} is out of reach with capacitors {lo:.3g}..{hi:.3g} F and resistors "
            f"{rlo:.3g}..{rhi:.3g} ohm (a unity-gain {response} needs {ratio} >= 4 Q^2 = "
            f"{4 * q * q:.3g}); use topology 'gain' or widen the part ranges"
        )
    return (
        f"Q {q:.4g} is out of reach with capacitors {lo:.3g}..{hi:.3g} F and resistors "
        f"{rlo:.3g}..{rhi:.3g} ohm at gain K = {k:.4g}; raise the gain (more Q per ratio of "
        "parts) or widen the part ranges"
    )
