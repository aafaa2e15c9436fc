"""Tolerance builds (Monte Carlo): every part drawn within its tolerance, many builds at once.

Each build draws every resistor (R1, R2, RF, RG) within ``parts.resistor_tolerance`` and
every capacitor within ``parts.capacitor_tolerance`` of its nominal value, independently:

- ``uniform``: value x (1 + t u), u uniform on [-1, 1);
- ``gaussian``: value x (1 + t z / 3), z standard normal, so the tolerance is 3 sigma
  (0.27 % of the parts fall outside it; they are kept, as a real batch may hold them).

The amplifier model (gain-bandwidth, DC gain) is the design's, the same for every build.
Every stage's s-polynomials are computed for all builds at once from the closed-form
Sallen-Key network equations (the same algebra as
:func:`filtertwin.circuit.sallenkey.transfer_function`)
and evaluated at all frequencies with one small matrix product per polynomial.

References
----------
R. P. Sallen, E. L. Key, IRE Trans. Circuit Theory CT-2(1), 1955.
"""

from __future__ import annotations

import math
import secrets
from collections.abc import Iterable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from filtertwin.circuit import sallenkey
from filtertwin.circuit.design import Design, Filter, with_built_filters
from filtertwin.circuit.sallenkey import Amplifier
from filtertwin.errors import UserInputError

__all__ = [
    "DISTRIBUTIONS",
    "FilterTolerance",
    "Mask",
    "Spread",
    "StageSpread",
    "StopBand",
    "ToleranceResult",
    "draw_parts",
    "magnitude_sq",
    "passband_edges_hz",
    "run_tolerance",
    "stage_f0_q",
    "stage_polynomials",
    "worst_build_design",
]

DISTRIBUTIONS = ("uniform", "gaussian")
DEFAULT_POINTS = 512
DEFAULT_RIPPLE_DB = 1.0
"""Default mask: the passband stays within +/- 1 dB of the nominal passband gain ..."""
PASS_EDGE = 0.5
"""... up to 0.5 x the corner of a low-pass (from 2 x the corner of a high-pass) ..."""
STOP_EDGE = 2.0
"""... and beyond 2 x the corner (0.5 x for a high-pass) attenuates at least as much as the
nominal design there, less 3 dB. Common practice (no source): a starting point to edit."""
STOP_SLACK_DB = 3.0
WORST_WINDOW_DB = 20.0
"""The worst build deviates most from nominal where the nominal is within 20 dB of its
passband gain (deeper in the stopband a dB difference means little)."""
CHUNK_BUILDS = 256
MAX_BUILDS = 1_000_000
GRID_SPAN = 10.0

PartDraws = tuple[tuple[dict[str, np.ndarray], ...], ...]
"""Part values per filter, per stage: {"R1": (builds,) ohm, "C1": (builds,) farad, ...}."""


@dataclass(frozen=True)
class StopBand:
    """Attenuation of at least ``min_atten_db`` (re passband gain) from lo_hz to hi_hz."""

    lo_hz: float
    hi_hz: float
    min_atten_db: float


@dataclass(frozen=True)
class Mask:
    """Pass/fail limits of one filter's response.

    Attributes
    ----------
    pass_hz : (float, float)
        Passband range checked.
    ripple_db : float
        Allowed deviation from the nominal passband gain there (+/-).
    stops : tuple of StopBand
    """

    pass_hz: tuple[float, float]
    ripple_db: float
    stops: tuple[StopBand, ...]

    def to_dict(self) -> dict[str, Any]:
        return {
            "pass_hz": list(self.pass_hz),
            "ripple_db": self.ripple_db,
            "stops": [
                {"lo_hz": s.lo_hz, "hi_hz": s.hi_hz, "min_atten_db": s.min_atten_db}
                for s in self.stops
            ],
        }


@dataclass(frozen=True)
class Spread:
    """Statistics of one figure over the builds."""

    nominal: float
    p1: float
    p50: float
    p99: float
    min: float
    max: float
    std: float

    @classmethod
    def of(cls, nominal: float, values: np.ndarray) -> Spread:
        p1, p50, p99 = np.percentile(values, [1, 50, 99])
        return cls(
            float(nominal), float(p1), float(p50), float(p99),
            float(values.min()), float(values.max()), float(values.std()),
        )  # fmt: skip

    def to_dict(self) -> dict[str, float]:
        return dict(self.__dict__)


@dataclass(frozen=True)
class StageSpread:
    """f0 (Hz) and Q spread of one stage (Q is None for a first-order stage)."""

    stage: int
    f0_hz: Spread
    q: Spread | None


@dataclass(frozen=True)
class FilterTolerance:
    """One filter's tolerance builds.

    Attributes
    ----------
    name : str
    f_hz : numpy.ndarray
    nominal_db, min_db, median_db, max_db : numpy.ndarray
        Magnitude in dB at ``f_hz``: the nominal parts and the envelope over the builds.
    passband_db : float
        Nominal passband gain in dB.
    stages : tuple of StageSpread
    mask : Mask
    yield_fraction : float
        Fraction of builds inside the mask.
    nominal_passes : bool
        Whether the nominal design itself is inside the mask.
    worst_deviation_db : float
        Largest deviation of any build from nominal (within 20 dB of the passband gain).
    worst_db : numpy.ndarray
        Magnitude in dB of the design's worst build (see :class:`ToleranceResult`).
    """

    name: str
    f_hz: np.ndarray
    nominal_db: np.ndarray
    min_db: np.ndarray
    median_db: np.ndarray
    max_db: np.ndarray
    passband_db: float
    stages: tuple[StageSpread, ...]
    mask: Mask
    yield_fraction: float
    nominal_passes: bool
    worst_deviation_db: float
    worst_db: np.ndarray

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "passband_db": self.passband_db,
            "yield": self.yield_fraction,
            "nominal_passes": self.nominal_passes,
            "mask": self.mask.to_dict(),
            "worst_deviation_db": self.worst_deviation_db,
            "stages": [
                {
                    "stage": s.stage,
                    "f0_hz": s.f0_hz.to_dict(),
                    "q": s.q.to_dict() if s.q is not None else None,
                }
                for s in self.stages
            ],
        }


@dataclass(frozen=True)
class ToleranceResult:
    """All filters' tolerance builds and the worst build.

    Attributes
    ----------
    builds : int
    distribution : str
    seed : int
    resistor_tolerance, capacitor_tolerance : float
        Fractions (0.01 = 1 %).
    filters : tuple of FilterTolerance
    yield_fraction : float
        Fraction of builds in which every filter is inside its mask.
    worst_build : int
        0-based index of the build deviating most from nominal (over all filters).
    worst_deviation_db : float
    worst_parts : tuple
        Part values of the worst build, per filter, per stage: {"R1": ohm, ...}.
    """

    builds: int
    distribution: str
    seed: int
    resistor_tolerance: float
    capacitor_tolerance: float
    filters: tuple[FilterTolerance, ...]
    yield_fraction: float
    worst_build: int
    worst_deviation_db: float
    worst_parts: tuple[tuple[dict[str, float], ...], ...]

    @property
    def distribution_note(self) -> str:
        """The distribution in words."""
        if self.distribution == "uniform":
            return "uniform within the tolerance"
        return "Gaussian, tolerance = 3 sigma"

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary (SI units, dB); the envelopes are left out."""
        return {
            "check": "tolerance",
            "builds": self.builds,
            "distribution": self.distribution,
            "distribution_note": self.distribution_note,
            "seed": self.seed,
            "resistor_tolerance": self.resistor_tolerance,
            "capacitor_tolerance": self.capacitor_tolerance,
            "yield": self.yield_fraction,
            "filters": [f.to_dict() for f in self.filters],
            "worst": {
                "build": self.worst_build,
                "deviation_db": self.worst_deviation_db,
                "parts": [[dict(stage) for stage in filt] for filt in self.worst_parts],
            },
        }


# --- drawing parts -----------------------------------------------------------------------


def draw_parts(
    design: Design, builds: int, *, distribution: str = "uniform", seed: int | None = 0
) -> PartDraws:
    """Draw every part of every stage for ``builds`` builds.

    Parameters
    ----------
    design : Design
    builds : int
        Number of builds, 1 to 1,000,000.
    distribution : {"uniform", "gaussian"}
        Uniform within the tolerance, or Gaussian with the tolerance at 3 sigma.
    seed : int, optional
        Seed of ``numpy.random.default_rng``; the draws are in a fixed order (filters,
        stages, parts R1, R2, C1, C2, RF, RG), so a seed repeats a run exactly.

    Returns
    -------
    tuple
        Per filter, per stage, a dict of part name -> ``(builds,)`` array.

    Raises
    ------
    UserInputError
        ``builds`` out of range or an unknown distribution.
    """
    _check_builds(builds)
    if distribution not in DISTRIBUTIONS:
        raise UserInputError(
            f"distribution {distribution!r} is unknown; use one of: {', '.join(DISTRIBUTIONS)}"
        )
    rng = np.random.default_rng(seed)
    tol_r = design.spec.parts.resistor_tolerance
    tol_c = design.spec.parts.capacitor_tolerance
    out = []
    for filt in design.filters:
        stages = []
        for stage in filt.stages:
            values = {}
            for name, nominal in stage.circuit.parts().items():
                tol = tol_r if name.startswith("R") else tol_c
                if distribution == "uniform":
                    u = rng.uniform(-1.0, 1.0, builds)
                else:
                    u = rng.standard_normal(builds) / 3.0
                values[name] = nominal * (1.0 + tol * u)
            stages.append(values)
        out.append(tuple(stages))
    return tuple(out)


def _check_builds(builds: int) -> None:
    if isinstance(builds, bool) or int(builds) != builds or not 1 <= builds <= MAX_BUILDS:
        raise UserInputError(
            f"number of builds {builds} must be a whole number from 1 to {MAX_BUILDS}; "
            "give e.g. --builds 1000"
        )


# --- closed-form polynomials, vectorised over builds -------------------------------------


def stage_polynomials(
    response: str, order: int, parts: dict[str, np.ndarray], amp: Amplifier | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """s-domain transfer functions of one stage for many part sets at once.

    The node equations of :mod:`filtertwin.circuit.sallenkey`, with every coefficient an array over
    the builds: admittances Y1 (input), Y2 (into the amplifier), Y3 (to ground), Y4
    (feedback) and the amplifier G = Gn / Gd give H = Y1 Y2 Gn / (L Gd - Y4 Y2 Gn),
    L = Y1 (Y2 + Y3) + Y2 Y3 + Y4 (Y2 + Y3). Ideal amplifier: G = K = 1 + RF/RG;
    single-pole: G = wt / (s + wt/A0 + wt/K), plus the amplifier's output resistance terms
    (see :mod:`filtertwin.circuit.sallenkey`). First order: 1 / (R1 C1 s + 1) (low-pass) or
    R1 C1 s / (R1 C1 s + 1) (high-pass), times G.

    Parameters
    ----------
    response : {"lowpass", "highpass"}
    order : {1, 2}
    parts : dict of str -> numpy.ndarray
        ``(builds,)`` values of R1, C1 (R2, C2 for order 2; RF, RG with gain), ohm and farad.
    amp : Amplifier, optional
        None for an ideal amplifier.

    Returns
    -------
    b, a : numpy.ndarray
        ``(builds, m)`` coefficients in s (rad/s), highest power first, ``a[:, 0] == 1``,
        ``b`` padded with leading zeros to the length of ``a``.

    References
    ----------
    Sallen & Key 1955; the same algebra as :func:`filtertwin.circuit.sallenkey.transfer_function`.
    """
    r1 = np.asarray(parts["R1"], float)
    k = (
        1.0 + np.asarray(parts["RF"], float) / np.asarray(parts["RG"], float)
        if "RF" in parts
        else 1.0
    )
    second = order == 2
    b, a = sallenkey.node_polynomials(
        response, order, r1, np.asarray(parts["C1"], float),
        np.asarray(parts["R2"], float) if second else None,
        np.asarray(parts["C2"], float) if second else None,
        k * np.ones_like(r1), amp,
        np.asarray(parts["RF"], float) + np.asarray(parts["RG"], float) if "RF" in parts else None,
    )  # fmt: skip
    lead = a[0]
    return np.stack(b, axis=1) / lead[:, None], np.stack(a, axis=1) / lead[:, None]


def _jw_terms(m: int, w: np.ndarray) -> list[tuple[bool, np.ndarray]]:
    """For k = m-1 ... 0: (is k odd, signed w^k) so that (j w)^k = sign w^k (x j if odd)."""
    out = []
    for k in range(m - 1, -1, -1):
        sign = 1.0 if k % 4 in (0, 1) else -1.0
        out.append((k % 2 == 1, sign * w**k))
    return out


def _abs_sq_at_jw(c: np.ndarray, terms: list[tuple[bool, np.ndarray]]) -> np.ndarray:
    """|c(j w)|^2 for every row of c ``(builds, m)``; all-zero coefficients are skipped."""
    parts: dict[bool, np.ndarray] = {}
    for (odd, wk), col in zip(terms, c.T, strict=True):
        if not col.any():
            continue
        term = col[:, None] * wk[None, :]
        if odd in parts:
            parts[odd] += term
        else:
            parts[odd] = term
    total = np.zeros((c.shape[0], len(terms[0][1])))
    for value in parts.values():
        total += value * value
    return total


def magnitude_sq(b: np.ndarray, a: np.ndarray, f_hz: np.ndarray) -> np.ndarray:
    """|H(j 2 pi f)|^2 for many builds, ``(builds, len(f_hz))``.

    Each polynomial is split into its real (even powers of s) and imaginary (odd powers)
    parts at s = j w, each a sum of coefficient x signed power of w.
    """
    w = 2 * math.pi * np.asarray(f_hz, float)
    terms = _jw_terms(a.shape[1], w)
    return _abs_sq_at_jw(b, terms) / _abs_sq_at_jw(a, terms)


def stage_f0_q(order: int, a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """f0 (Hz) and Q of the dominant poles of many stages' denominators ``(builds, m)``.

    Second-order network: w0 = sqrt(a2), Q = w0 / a1 (a0 = 1). With the amplifier pole
    (a cubic), that pole is the fastest real root and the other two are the stage's pair, as
    in :func:`filtertwin.circuit.sallenkey.analyze`. First-order: the slowest root; Q is nan.
    """
    n, m = a.shape
    if m == 2:  # first order, ideal amplifier
        return a[:, 1] / (2 * math.pi), np.full(n, math.nan)
    if order == 1:  # first order with the amplifier pole: the slower real root
        a1, a0 = a[:, 1], a[:, 2]
        disc = np.sqrt(np.maximum(a1 * a1 - 4 * a0, 0.0))
        return 2 * a0 / (a1 + disc) / (2 * math.pi), np.full(n, math.nan)
    if m == 3:
        w0 = np.sqrt(a[:, 2])
        return w0 / (2 * math.pi), w0 / a[:, 1]
    companion = np.zeros((n, m - 1, m - 1))
    companion[:, 0, :] = -a[:, 1:]
    companion[:, np.arange(1, m - 1), np.arange(m - 2)] = 1.0
    roots = np.linalg.eigvals(companion)
    real = np.abs(roots.imag) < 1e-9 * np.abs(roots)
    far = np.argmax(np.where(real, np.abs(roots), -1.0), axis=1)
    keep = np.ones(roots.shape, bool)
    keep[np.arange(n), far] = False
    pair = roots[keep].reshape(n, m - 2)
    w0 = np.sqrt(np.abs(np.real(pair[:, 0] * pair[:, 1])))
    return w0 / (2 * math.pi), w0 / -np.real(pair.sum(axis=1))


# --- masks -------------------------------------------------------------------------------


def passband_edges_hz(filt: Filter) -> tuple[float, float]:
    """Lower and upper passband edges (0 and inf where open) of a filter.

    The spec's corners for a filter designed from an alignment; otherwise the -3 dB points
    of the nominal analog response relative to its passband gain.
    """
    s = filt.spec
    if s.kind == "alignment" and s.corner_hz:
        if filt.response == "lowpass":
            return 0.0, float(s.corner_hz[0])
        if filt.response == "highpass":
            return float(s.corner_hz[0]), math.inf
        return float(s.corner_hz[0]), float(s.corner_hz[-1])
    lo, hi = filt.characteristic_hz()
    grid = np.geomspace(lo / 100, hi * 100, 8000)
    rel = np.abs(filt.frequency_response(grid)) / abs(filt.passband_gain)
    inside = np.nonzero(rel >= 10 ** (-3.0 / 20))[0]
    if not len(inside):
        return lo, hi
    lower = 0.0 if filt.response == "lowpass" else float(grid[inside[0]])
    upper = math.inf if filt.response == "highpass" else float(grid[inside[-1]])
    return lower, upper


def _grid_for(filt: Filter, edges: Iterable[float], points: int) -> np.ndarray:
    lo, hi = filt.characteristic_hz()
    finite = [e for e in edges if 0 < e < math.inf]
    f_min = min([lo / GRID_SPAN] + [e / 2 for e in finite])
    f_max = max([hi * GRID_SPAN] + [e * 2 for e in finite])
    return np.union1d(np.geomspace(f_min, f_max, points), finite)


def _mask_edges(
    filt: Filter, stop_hz: float | None
) -> tuple[tuple[float, float], list[tuple[float, float]]]:
    """Passband range and stopband ranges (before the grid's ends are known: 0 / inf)."""
    lower, upper = passband_edges_hz(filt)
    if filt.response == "lowpass":
        stops = [(stop_hz or STOP_EDGE * upper, math.inf)]
        return (0.0, PASS_EDGE * upper), stops
    if filt.response == "highpass":
        stops = [(0.0, stop_hz or lower / STOP_EDGE)]
        return (lower * STOP_EDGE, math.inf), stops
    centre = math.sqrt(lower * upper)
    pass_lo, pass_hi = lower * STOP_EDGE, upper * PASS_EDGE
    if pass_lo > pass_hi:
        pass_lo = pass_hi = centre
    if stop_hz is None:
        stops = [(0.0, lower / STOP_EDGE), (upper * STOP_EDGE, math.inf)]
    elif stop_hz < centre:
        stops = [(0.0, stop_hz)]
    else:
        stops = [(stop_hz, math.inf)]
    return (pass_lo, pass_hi), stops


def _build_mask(
    f: np.ndarray,
    nominal_db: np.ndarray,
    passband_db: float,
    pass_range: tuple[float, float],
    stop_ranges: list[tuple[float, float]],
    ripple_db: float,
    stop_db: float | None,
) -> Mask:
    clip = (float(f[0]), float(f[-1]))
    p_lo, p_hi = max(pass_range[0], clip[0]), min(pass_range[1], clip[1])
    stops = []
    for lo, hi in stop_ranges:
        lo, hi = max(lo, clip[0]), min(hi, clip[1])
        edge = hi if lo == clip[0] else lo
        nominal_atten = passband_db - float(np.interp(np.log(edge), np.log(f), nominal_db))
        need = stop_db if stop_db is not None else nominal_atten - STOP_SLACK_DB
        stops.append(StopBand(lo, hi, float(need)))
    return Mask((p_lo, p_hi), float(ripple_db), tuple(stops))


def _inside_mask(db: np.ndarray, f: np.ndarray, passband_db: float, mask: Mask) -> np.ndarray:
    lo, hi = mask.pass_hz
    cols = (f >= lo * (1 - 1e-12)) & (f <= hi * (1 + 1e-12))
    ok = np.all(np.abs(db[:, cols] - passband_db) <= mask.ripple_db, axis=1)
    for s in mask.stops:
        cols = (f >= s.lo_hz * (1 - 1e-12)) & (f <= s.hi_hz * (1 + 1e-12))
        ok &= np.all(passband_db - db[:, cols] >= s.min_atten_db, axis=1)
    return ok


# --- running the builds ------------------------------------------------------------------


Polynomials = list[tuple[np.ndarray, np.ndarray]]
"""Per stage of a filter: ``(b, a)`` of :func:`stage_polynomials`, ``(builds, m)`` each."""


def _filter_polynomials(
    filt: Filter, draws: tuple[dict[str, np.ndarray], ...], amp: Amplifier | None
) -> Polynomials:
    return [
        stage_polynomials(st.circuit.response, st.circuit.order, parts, amp)
        for st, parts in zip(filt.stages, draws, strict=True)
    ]


def _filter_db(polys: Polynomials, f: np.ndarray) -> np.ndarray:
    """Magnitude in dB of a filter for every build, ``(builds, len(f))``, in chunks."""
    builds = len(polys[0][1])
    out = np.empty((builds, len(f)))
    for start in range(0, builds, CHUNK_BUILDS):
        sl = slice(start, start + CHUNK_BUILDS)
        power = magnitude_sq(polys[0][0][sl], polys[0][1][sl], f)
        for b, a in polys[1:]:
            power *= magnitude_sq(b[sl], a[sl], f)
        out[sl] = 10 * np.log10(np.maximum(power, 1e-300))
    return out


def _median_over_builds(db: np.ndarray) -> np.ndarray:
    """Median over axis 0 of ``(builds, F)``; the same value as ``numpy.median(db, axis=0)``,
    found with one partition of the contiguous transpose (several times faster)."""
    x = np.ascontiguousarray(db.T)
    n = x.shape[1]
    k = n // 2
    x.partition(k, axis=1)
    upper = x[:, k]
    if n % 2:
        return upper.copy()
    return (x[:, :k].max(axis=1) + upper) / 2


def _stage_spreads(
    filt: Filter, polys: Polynomials, nominal: Polynomials
) -> tuple[StageSpread, ...]:
    out = []
    for st, (_, a), (_, a_nominal) in zip(filt.stages, polys, nominal, strict=True):
        order = st.circuit.order
        f0, q = stage_f0_q(order, a)
        f0n, qn = stage_f0_q(order, a_nominal)
        q_spread = None if order == 1 else Spread.of(float(qn[0]), q)
        out.append(StageSpread(st.index, Spread.of(float(f0n[0]), f0), q_spread))
    return tuple(out)


def _filter_tolerance(
    filt: Filter,
    polys: Polynomials,
    amp: Amplifier | None,
    f_hz: np.ndarray | None,
    points: int,
    ripple_db: float,
    stop_hz: float | None,
    stop_db: float | None,
) -> tuple[FilterTolerance, np.ndarray, np.ndarray]:
    """One filter's builds against its mask; also which builds pass and their deviation.

    ``worst_db`` is left at the nominal response: the worst build is known only once every
    filter is done.
    """
    nominal_parts = tuple(
        {k: np.array([v]) for k, v in st.circuit.parts().items()} for st in filt.stages
    )
    nominal = _filter_polynomials(filt, nominal_parts, amp)
    pass_range, stop_ranges = _mask_edges(filt, stop_hz)
    if f_hz is None:
        edges = [*pass_range, *(e for r in stop_ranges for e in r)]
        f = _grid_for(filt, edges, points)
    else:
        f = np.asarray(f_hz, float)
    nominal_db = _filter_db(nominal, f)[0]
    db = _filter_db(polys, f)
    passband_db = filt.passband_db
    mask = _build_mask(f, nominal_db, passband_db, pass_range, stop_ranges, ripple_db, stop_db)
    ok = _inside_mask(db, f, passband_db, mask)
    window = nominal_db >= passband_db - WORST_WINDOW_DB
    dev = np.max(np.abs(db[:, window] - nominal_db[window]), axis=1)
    result = FilterTolerance(
        name=filt.name,
        f_hz=f,
        nominal_db=nominal_db,
        min_db=db.min(axis=0),
        median_db=_median_over_builds(db),
        max_db=db.max(axis=0),
        passband_db=passband_db,
        stages=_stage_spreads(filt, polys, nominal),
        mask=mask,
        yield_fraction=float(ok.mean()),
        nominal_passes=bool(_inside_mask(nominal_db[None, :], f, passband_db, mask)[0]),
        worst_deviation_db=float(dev.max()),
        worst_db=nominal_db,
    )
    return result, ok, dev


def run_tolerance(
    design: Design,
    builds: int,
    *,
    distribution: str = "uniform",
    seed: int | None = None,
    ripple_db: float | None = None,
    stop_hz: float | None = None,
    stop_db: float | None = None,
    filter_name: str | None = None,
    points: int = DEFAULT_POINTS,
    f_hz: np.ndarray | None = None,
) -> ToleranceResult:
    """Tolerance builds of a design: envelope, f0/Q spread, yield and the worst build.

    Parameters
    ----------
    design : Design
    builds : int
        Number of builds (1 to 1,000,000).
    distribution : {"uniform", "gaussian"}
        See the module docstring (Gaussian: tolerance = 3 sigma).
    seed : int, optional
        Random seed; a fresh one is chosen (and reported) when None.
    ripple_db : float, optional
        Passband limit, +/- dB around the nominal passband gain (default 1 dB), checked up
        to 0.5 x corner (low-pass), from 2 x corner (high-pass), 2 x lower to 0.5 x upper
        corner (band-pass).
    stop_hz : float, optional
        Stopband edge (default 2 x corner for a low-pass, 0.5 x for a high-pass, both for a
        band-pass); the stopband runs from there away from the passband.
    stop_db : float, optional
        Least attenuation in the stopband, dB re passband gain (default: the nominal
        design's attenuation at the stopband edge less 3 dB).
    filter_name : str, optional
        Only this filter (default every filter of the design).
    points : int
        Frequencies per filter (log-spaced; the mask edges are added).
    f_hz : numpy.ndarray, optional
        Exact frequency grid to use for every filter instead (no edges added).

    Returns
    -------
    ToleranceResult

    Raises
    ------
    UserInputError
        Bad builds, distribution, ripple, stop frequency or attenuation; stop options on a
        design with several filters and no ``filter_name``.
    """
    _check_builds(builds)
    if ripple_db is not None and not (math.isfinite(ripple_db) and ripple_db > 0):
        raise UserInputError(f"ripple {ripple_db:g} dB must be positive; give --ripple-db e.g. 1")
    if stop_hz is not None and not (math.isfinite(stop_hz) and stop_hz > 0):
        raise UserInputError(f"stop frequency {stop_hz:g} Hz must be positive; give --stop-hz")
    if stop_db is not None and not math.isfinite(stop_db):
        raise UserInputError(f"stopband attenuation {stop_db} dB is not a number; give --stop-db")
    chosen = [design.filter(filter_name)] if filter_name else list(design.filters)
    if (stop_hz is not None or stop_db is not None) and len(chosen) > 1:
        names = ", ".join(f.name for f in chosen)
        raise UserInputError(
            f"{design.spec.source}: --stop-hz/--stop-db describe one filter but the design has "
            f"several ({names}); choose one with --filter NAME"
        )
    if seed is None:
        seed = secrets.randbits(32)
    all_draws = draw_parts(design, builds, distribution=distribution, seed=seed)
    draws_of = dict(zip((f.name for f in design.filters), all_draws, strict=True))
    amp = design.amplifier

    results, inside, deviation = [], np.ones(builds, bool), np.zeros(builds)
    worst_polys = []
    for filt in chosen:
        polys = _filter_polynomials(filt, draws_of[filt.name], amp)
        result, ok, dev = _filter_tolerance(
            filt, polys, amp, f_hz, points, ripple_db or DEFAULT_RIPPLE_DB, stop_hz, stop_db
        )
        inside &= ok
        deviation = np.maximum(deviation, dev)
        results.append(result)
        worst_polys.append(polys)
    worst = int(np.argmax(deviation))
    worst_parts = tuple(
        tuple({k: float(v[worst]) for k, v in stage.items()} for stage in draws)
        for draws in all_draws
    )
    one = slice(worst, worst + 1)
    for i, (res, polys) in enumerate(zip(results, worst_polys, strict=True)):
        results[i] = replace(
            res, worst_db=_filter_db([(b[one], a[one]) for b, a in polys], res.f_hz)[0]
        )
    return ToleranceResult(
        builds=int(builds),
        distribution=distribution,
        seed=int(seed),
        resistor_tolerance=design.spec.parts.resistor_tolerance,
        capacitor_tolerance=design.spec.parts.capacitor_tolerance,
        filters=tuple(results),
        yield_fraction=float(inside.mean()),
        worst_build=worst,
        worst_deviation_db=float(deviation[worst]),
        worst_parts=worst_parts,
    )


def worst_build_design(design: Design, result: ToleranceResult) -> Design:
    """The design rebuilt with the worst build's parts, ready to render or play.

    Every filter becomes a filter given by its parts (kind ``"built"``) with the same name,
    response, polarity and stage order; the amplifier and part rules stay. With zero
    tolerance the parts are exactly the nominal ones.

    Raises
    ------
    ValueError
        ``result`` was computed from a different design.
    """
    if len(result.worst_parts) != len(design.filters) or any(
        len(parts) != len(f.stages)
        for parts, f in zip(result.worst_parts, design.filters, strict=True)
    ):
        raise ValueError("the tolerance result does not belong to this design")
    parts = {f.name: p for f, p in zip(design.filters, result.worst_parts, strict=True)}
    title = f"{design.title} (worst of {result.builds} builds: build {result.worst_build})"
    return with_built_filters(design, parts, title)
