"""Normalised low-pass prototypes: filter alignments as cascades of (f0 ratio, Q) sections.

A low-pass filter of order n with corner frequency fc is a cascade of second-order sections
``1 / (s**2 / w0**2 + s / (Q w0) + 1)`` and, for odd n, one first-order section
``1 / (s / w0 + 1)``. Each section is given here by ``f0_ratio = w0 / wc`` and Q, so the same
table serves any corner frequency. A high-pass filter uses the reciprocal ratios and the same
Q values.

Conventions (those of scipy.signal's analog prototypes):

* Butterworth: -3 dB at the corner.
* Bessel: norm "mag" (-3 dB at the corner, the default), "phase" (phase mid-point, -n*45
  degrees, at the corner) or "delay" (group delay 1 / wc at DC).
* Chebyshev type I: the corner is the edge of the ripple band, where the response last
  leaves the ripple band (it is ``-ripple_db`` there).
* Linkwitz-Riley of order 2n: two cascaded Butterworth filters of order n, -6.02 dB at the
  corner (orders 2, 4 and 8).

Every section has unity gain at DC. An even-order Chebyshev cascade therefore peaks at
``+ripple_db``; :func:`dc_gain` gives the factor that brings its peak to 0 dB as scipy does.

References
----------
A. B. Williams, F. J. Taylor, Electronic Filter Design Handbook (pole and stage-Q tables).
S. H. Linkwitz, "Active Crossover Networks for Noninteracting Drivers", J. Audio Eng. Soc.
24(1), 1976.
"""

from __future__ import annotations

import math
import operator
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, minimize_scalar

ALIGNMENTS = ("butterworth", "bessel", "chebyshev", "linkwitz-riley")
BESSEL_NORMS = ("mag", "phase", "delay")
MAX_ORDER = 10
LINKWITZ_RILEY_ORDERS = (2, 4, 8)
# Ripple range searched by nearest_alignment, dB.
CHEBYSHEV_SEARCH_DB = (0.01, 3.0)

_REAL_TOL = 1e-9  # |Im p| / |p| below this is a real pole
_PAIR_TOL = 1e-6  # relative mismatch allowed between a pole and its conjugate partner


@dataclass(frozen=True)
class Section:
    """One section of a normalised low-pass prototype.

    Attributes
    ----------
    order : int
        1 (first-order) or 2 (second-order).
    f0_ratio : float
        Natural frequency (order 2) or corner frequency (order 1) of the section divided by
        the filter's corner frequency, for the low-pass prototype.
    q : float
        Quality factor of a second-order section; NaN for a first-order section.
    """

    order: int
    f0_ratio: float
    q: float = math.nan

    def __post_init__(self) -> None:
        if self.order not in (1, 2):
            raise ValueError(f"Section order must be 1 or 2 (got {self.order!r})")
        if not (math.isfinite(self.f0_ratio) and self.f0_ratio > 0.0):
            raise ValueError(f"Section f0_ratio must be finite and > 0 (got {self.f0_ratio!r})")
        if self.order == 2 and not (math.isfinite(self.q) and self.q > 0.0):
            raise ValueError(f"second-order Section q must be finite and > 0 (got {self.q!r})")
        if self.order == 1 and not math.isnan(self.q):
            raise ValueError(f"first-order Section q must be NaN (got {self.q!r})")


@dataclass(frozen=True)
class AlignmentMatch:
    """The standard alignment closest to a set of sections, from :func:`nearest_alignment`.

    Attributes
    ----------
    alignment : str
        One of ``ALIGNMENTS``.
    order : int
        Filter order.
    corner_scale : float
        Corner frequency of the match divided by the corner the sections were normalised to.
    distance : float
        RMS of the log-f0 residuals (natural log) and the relative Q errors; 0 is exact.
    bessel_norm : str or None
        The Bessel normalisation, for a Bessel match.
    ripple_db : float or None
        The passband ripple in dB, for a Chebyshev match.
    """

    alignment: str
    order: int
    corner_scale: float
    distance: float
    bessel_norm: str | None = None
    ripple_db: float | None = None

    @property
    def description(self) -> str:
        """Plain-words summary, e.g. "Butterworth, 4th order, corner 1.02 x"."""
        if self.alignment == "bessel":
            name = f"Bessel ({self.bessel_norm} norm)"
        elif self.alignment == "chebyshev":
            name = f"Chebyshev {self.ripple_db:.2f} dB ripple"
        else:
            name = self.alignment.title()
        return f"{name}, {_ordinal(self.order)} order, corner {self.corner_scale:.2f} x"


def _ordinal(n: int) -> str:
    suffix = {1: "st", 2: "nd", 3: "rd"}.get(n if n < 20 else n % 10, "th")
    return f"{n}{suffix}"


def _check_request(alignment: str, order: int, ripple_db: float | None, bessel_norm: str) -> int:
    if alignment not in ALIGNMENTS:
        raise ValueError(f"alignment must be one of {', '.join(ALIGNMENTS)} (got {alignment!r})")
    if isinstance(order, bool):
        raise TypeError(f"order must be an integer (got {order!r})")
    order = operator.index(order)
    if not 1 <= order <= MAX_ORDER:
        raise ValueError(f"order must be 1 <= order <= {MAX_ORDER} (got {order})")
    if alignment == "linkwitz-riley" and order not in LINKWITZ_RILEY_ORDERS:
        raise ValueError(f"linkwitz-riley order must be 2, 4 or 8 (got {order})")
    if bessel_norm not in BESSEL_NORMS:
        raise ValueError(
            f"bessel_norm must be one of {', '.join(BESSEL_NORMS)} (got {bessel_norm!r})"
        )
    if alignment == "chebyshev":
        if ripple_db is None:
            raise ValueError("ripple_db is required for chebyshev (passband ripple in dB, > 0)")
        if not (math.isfinite(ripple_db) and ripple_db > 0.0):
            raise ValueError(f"ripple_db must be finite and > 0 dB (got {ripple_db!r})")
    elif ripple_db is not None:
        raise ValueError(
            f"ripple_db applies only to chebyshev, not {alignment} (got {ripple_db!r})"
        )
    return order


def _butterworth_poles(order: int) -> np.ndarray:
    k = np.arange(order)
    return np.exp(1j * np.pi * (2 * k + order + 1) / (2 * order))


def _chebyshev_poles(order: int, ripple_db: float) -> np.ndarray:
    epsilon = math.sqrt(10.0 ** (ripple_db / 10.0) - 1.0)
    mu = math.asinh(1.0 / epsilon) / order
    theta = np.pi * (2 * np.arange(1, order + 1) - 1) / (2 * order)
    return -math.sinh(mu) * np.sin(theta) + 1j * math.cosh(mu) * np.cos(theta)


def _bessel_poles(order: int, norm: str) -> np.ndarray:
    # Reverse Bessel polynomial, ascending powers: a_k = (2n-k)! / (2**(n-k) k! (n-k)!).
    coeffs = [
        math.factorial(2 * order - k)
        // (2 ** (order - k) * math.factorial(k) * math.factorial(order - k))
        for k in range(order + 1)
    ]
    poles = np.roots(coeffs[::-1])  # group delay 1 s at DC ("delay" norm)
    if norm == "phase":
        return poles / coeffs[0] ** (1.0 / order)
    if norm == "mag":
        return poles / _minus_3db_frequency(poles)
    return poles


def _minus_3db_frequency(poles: np.ndarray) -> float:
    """Frequency (rad/s) where the all-pole, unity-DC-gain response is 1/sqrt(2)."""

    def excess(w: float) -> float:
        return float(np.sum(np.log(np.abs(1j * w - poles) / np.abs(poles))) - 0.5 * math.log(2))

    return float(brentq(excess, 1e-6, 10.0 * float(np.max(np.abs(poles))), xtol=1e-15))


def prototype_poles(
    alignment: str, order: int, *, ripple_db: float | None = None, bessel_norm: str = "mag"
) -> np.ndarray:
    """Poles (rad/s, corner at 1 rad/s) of a normalised low-pass prototype.

    Parameters and raised errors are those of :func:`sections`.

    Returns
    -------
    numpy.ndarray
        Complex poles, all in the left half plane. A Linkwitz-Riley filter of order 2n has
        each Butterworth-n pole twice.
    """
    order = _check_request(alignment, order, ripple_db, bessel_norm)
    if alignment == "butterworth":
        return _butterworth_poles(order)
    if alignment == "linkwitz-riley":
        return np.repeat(_butterworth_poles(order // 2), 2)
    if alignment == "chebyshev":
        assert ripple_db is not None  # checked above
        return _chebyshev_poles(order, ripple_db)
    return _bessel_poles(order, bessel_norm)


def sections(
    alignment: str, order: int, *, ripple_db: float | None = None, bessel_norm: str = "mag"
) -> tuple[Section, ...]:
    """The (f0 ratio, Q) sections of a normalised low-pass alignment.

    Parameters
    ----------
    alignment : str
        One of ``ALIGNMENTS``: "butterworth", "bessel", "chebyshev", "linkwitz-riley".
    order : int
        Filter order, 1 to 10; 2, 4 or 8 for "linkwitz-riley".
    ripple_db : float, optional
        Passband ripple in dB, > 0; required for "chebyshev" and refused for the others.
    bessel_norm : {"mag", "phase", "delay"}, default "mag"
        Bessel normalisation (see the module description); ignored by other alignments.

    Returns
    -------
    tuple of Section
        The first-order section (odd orders; exactly one) first, then second-order sections
        by ascending Q. Each has unity DC gain; see :func:`dc_gain`.

    Raises
    ------
    ValueError
        Naming the parameter, rule and value: unknown alignment, order outside 1..10, a
        Linkwitz-Riley order other than 2, 4, 8, missing or non-positive ripple, ripple for
        an alignment other than Chebyshev, unknown Bessel norm.
    TypeError
        If `order` is not an integer.

    References
    ----------
    scipy.signal.buttap, besselap, cheb1ap (same normalisations). Williams & Taylor,
    Electronic Filter Design Handbook (stage tables). Linkwitz, JAES 24(1), 1976.

    Examples
    --------
    >>> [round(s.q, 4) for s in sections("butterworth", 4)]
    [0.5412, 1.3066]
    >>> sections("linkwitz-riley", 2)
    (Section(order=2, f0_ratio=1.0, q=0.5),)
    """
    poles = prototype_poles(alignment, order, ripple_db=ripple_db, bessel_norm=bessel_norm)
    return sections_from_poles(poles)


def dc_gain(alignment: str, order: int, *, ripple_db: float | None = None) -> float:
    """DC gain of the prototype whose passband peak is 0 dB (scipy.signal's convention).

    Parameters
    ----------
    alignment, order, ripple_db
        As for :func:`sections`.

    Returns
    -------
    float
        ``10 ** (-ripple_db / 20)`` for an even-order Chebyshev filter, else 1.0. Multiply
        the unity-DC-gain cascade of :func:`sections` by it to keep the passband at or
        below 0 dB.

    Raises
    ------
    ValueError, TypeError
        As for :func:`sections`.
    """
    order = _check_request(alignment, order, ripple_db, "mag")
    if alignment == "chebyshev" and order % 2 == 0:
        assert ripple_db is not None  # checked above
        return 10.0 ** (-ripple_db / 20.0)
    return 1.0


def sections_from_poles(poles: np.ndarray) -> tuple[Section, ...]:
    """Group analog poles into first- and second-order sections.

    Complex poles form second-order sections with their conjugates. Real poles are paired,
    nearest in magnitude first, into second-order sections of Q <= 0.5; an odd count leaves
    the smallest-magnitude real pole as the one first-order section.

    Parameters
    ----------
    poles : array_like of complex
        Poles in rad/s (normalised, corner at 1 rad/s), strictly in the left half plane.
        A pole whose imaginary part is below 1e-9 of its magnitude counts as real.

    Returns
    -------
    tuple of Section
        First-order section first, then second-order sections by ascending Q (ties by
        ascending f0 ratio).

    Raises
    ------
    ValueError
        If there are no poles, a pole is not finite or not in the left half plane, or the
        complex poles do not come in conjugate pairs (within 1e-6 relative).

    Examples
    --------
    >>> sections_from_poles(np.array([-1.0, -1.0]))
    (Section(order=2, f0_ratio=1.0, q=0.5),)
    """
    p = np.atleast_1d(np.asarray(poles, dtype=complex)).ravel()
    if p.size == 0:
        raise ValueError("poles must hold at least one pole (got none)")
    if not np.all(np.isfinite(p)) or not np.all(p.real < 0.0):
        raise ValueError(f"poles must be finite with negative real part (got {p.tolist()})")
    is_real = np.abs(p.imag) <= _REAL_TOL * np.abs(p)
    real = np.sort(-p[is_real].real)
    upper = _sorted_complex(p[~is_real & (p.imag > 0)])
    lower = _sorted_complex(np.conj(p[~is_real & (p.imag < 0)]))
    if upper.size != lower.size or not np.all(np.abs(upper - lower) <= _PAIR_TOL * np.abs(upper)):
        raise ValueError(f"complex poles must come in conjugate pairs (got {p.tolist()})")
    first: list[Section] = []
    if real.size % 2 == 1:
        first.append(Section(1, float(real[0])))
        real = real[1:]
    second = [_pair_section(float(a), float(b)) for a, b in zip(real[::2], real[1::2], strict=True)]
    for pole in upper:
        w0 = float(abs(pole))
        second.append(Section(2, w0, w0 / (-2.0 * float(pole.real))))
    second.sort(key=lambda s: (s.q, s.f0_ratio))
    return tuple(first + second)


def _sorted_complex(values: np.ndarray) -> np.ndarray:
    return values[np.lexsort((values.imag, values.real))]


def _pair_section(a: float, b: float) -> Section:
    """Second-order section with real poles -a and -b: (s + a)(s + b)."""
    w0 = math.sqrt(a * b)
    return Section(2, w0, w0 / (a + b))


def _poles_of(given: Sequence[Section]) -> np.ndarray:
    poles: list[complex] = []
    for s in given:
        if s.order == 1:
            poles.append(-s.f0_ratio)
        else:
            poles.extend(np.roots([1.0, s.f0_ratio / s.q, s.f0_ratio**2]).tolist())
    return np.array(poles, dtype=complex)


def _fit(given: Sequence[Section], candidate: Sequence[Section]) -> tuple[float, float]:
    """(corner scale, distance) of `given` against `candidate`, both in canonical order."""
    log_error = np.array(
        [math.log(g.f0_ratio / c.f0_ratio) for g, c in zip(given, candidate, strict=True)]
    )
    log_scale = float(np.mean(log_error))
    q_error = [(g.q - c.q) / c.q for g, c in zip(given, candidate, strict=True) if c.order == 2]
    errors = np.concatenate([log_error - log_scale, np.array(q_error)])
    return math.exp(log_scale), float(np.sqrt(np.mean(errors**2)))


def _canonical(given: Sequence[Section]) -> tuple[Section, ...]:
    order = sum(s.order for s in given)
    firsts = sum(1 for s in given if s.order == 1)
    if firsts == order % 2:
        ones = [s for s in given if s.order == 1]
        twos = sorted((s for s in given if s.order == 2), key=lambda s: (s.q, s.f0_ratio))
        return tuple(ones + twos)
    return sections_from_poles(_poles_of(given))


def nearest_alignment(given: Sequence[Section]) -> AlignmentMatch:
    """The standard alignment of the same order that a set of sections resembles most.

    Candidates: Butterworth, Bessel, Chebyshev with ripple from 0.01 to 3 dB, and
    Linkwitz-Riley for orders 2, 4 and 8. The Bessel norms "phase" and "delay" have the same
    sections as "mag" with every f0 scaled by one factor, so a Bessel match is reported in the
    "mag" norm, its corner scale the -3 dB corner. Sections are matched in canonical order
    (first-order first, then by ascending Q); the corner scale is fitted by least squares in
    log f0; the distance is the RMS of the remaining log-f0 errors and the relative Q errors.

    Parameters
    ----------
    given : sequence of Section
        Low-pass sections in any order, total order 1 to 10, normalised to any corner.

    Returns
    -------
    AlignmentMatch
        The closest candidate; ties go to the earlier of ``ALIGNMENTS``.

    Raises
    ------
    ValueError
        If `given` is empty or its total order exceeds 10.

    Examples
    --------
    >>> built = [Section(2, 1.1 * s.f0_ratio, s.q) for s in sections("butterworth", 4)]
    >>> nearest_alignment(built).description
    'Butterworth, 4th order, corner 1.10 x'
    """
    order = sum(s.order for s in given)
    if not 1 <= order <= MAX_ORDER:
        raise ValueError(f"total order of the sections must be 1 to {MAX_ORDER} (got {order})")
    target = _canonical(given)
    best: AlignmentMatch | None = None

    def consider(alignment: str, ripple_db: float | None = None, norm: str = "mag") -> float:
        nonlocal best
        candidate = sections(alignment, order, ripple_db=ripple_db, bessel_norm=norm)
        scale, distance = _fit(target, candidate)
        if best is None or distance < best.distance:
            best = AlignmentMatch(
                alignment,
                order,
                scale,
                distance,
                bessel_norm=norm if alignment == "bessel" else None,
                ripple_db=ripple_db,
            )
        return distance

    consider("butterworth")
    consider("bessel")  # the three norms differ only by a corner scale: "mag" stands for all
    low_db, high_db = CHEBYSHEV_SEARCH_DB
    grid = np.geomspace(low_db, high_db, 41)
    scores = [consider("chebyshev", ripple_db=float(r)) for r in grid]
    i = int(np.argmin(scores))
    bounds = (math.log(grid[max(i - 1, 0)]), math.log(grid[min(i + 1, grid.size - 1)]))
    minimize_scalar(
        lambda x: consider("chebyshev", ripple_db=math.exp(x)),
        bounds=bounds,
        method="bounded",
        options={"xatol": 1e-6},
    )
    if order in LINKWITZ_RILEY_ORDERS:
        consider("linkwitz-riley")
    assert best is not None
    return best


NEAR_FLAT_RIPPLE_DB = 0.1
"""A Chebyshev match with less ripple than this is reported as close to Butterworth: its
ripple is smaller than what 1 % parts move a stage's peak by, and a builder reads "Chebyshev"
as a filter chosen for its ripple (common practice, no source)."""


def q_deviation_pct(given: Sequence[Section], alignment: str = "butterworth") -> list[float]:
    """How far each second-order section's Q is from the alignment's, in percent.

    Sections are compared in canonical order (first-order first, then ascending Q), as
    :func:`nearest_alignment` matches them.

    Parameters
    ----------
    given : sequence of Section
        Low-pass sections, total order 1 to 10.
    alignment : str
        ``"butterworth"``, ``"bessel"`` or ``"linkwitz-riley"`` (no options needed).

    Returns
    -------
    list of float
        ``100 * (Q / Q_alignment - 1)`` per second-order section, in canonical order.

    Examples
    --------
    >>> [round(d, 1) for d in q_deviation_pct([Section(2, 1.0, 0.729)])]
    [3.1]
    """
    order = sum(s.order for s in given)
    if not 1 <= order <= MAX_ORDER:
        raise ValueError(f"total order of the sections must be 1 to {MAX_ORDER} (got {order})")
    reference = sections(alignment, order)
    return [
        100 * (g.q / c.q - 1)
        for g, c in zip(_canonical(given), reference, strict=True)
        if c.order == 2
    ]
