"""filtertwin.circuit.prototypes against scipy.signal's analog prototypes and published tables."""

import math

import numpy as np
import pytest
from scipy import signal

from filtertwin.circuit.prototypes import (
    ALIGNMENTS,
    BESSEL_NORMS,
    AlignmentMatch,
    Section,
    dc_gain,
    nearest_alignment,
    prototype_poles,
    sections,
    sections_from_poles,
)

ORDERS = range(1, 11)
RIPPLES_DB = (0.1, 0.5, 1.0, 3.0)
W = np.geomspace(1e-2, 1e2, 401)  # rad/s, normalised


def cascade_response(secs, w):
    """H(jw) rebuilt from the sections, each with unity DC gain (written out in the test)."""
    s = 1j * np.asarray(w)
    h = np.ones_like(s)
    for sec in secs:
        if sec.order == 1:
            h = h / (s / sec.f0_ratio + 1)
        else:
            h = h / (s**2 / sec.f0_ratio**2 + s / (sec.q * sec.f0_ratio) + 1)
    return h


def cascade_poles(secs):
    """Poles of the sections: roots of s + w0 and of s^2 + (w0/Q) s + w0^2."""
    poles = []
    for sec in secs:
        if sec.order == 1:
            poles.append(-sec.f0_ratio)
        else:
            poles.extend(np.roots([1.0, sec.f0_ratio / sec.q, sec.f0_ratio**2]))
    return np.array(poles, dtype=complex)


def assert_same_poles(ours, reference, tol=1e-8):
    """Every reference pole matched by a distinct pole of ours within tol (relative)."""
    left = list(np.asarray(ours, dtype=complex))
    assert len(left) == len(reference)
    for p in reference:
        i = int(np.argmin([abs(q - p) for q in left]))
        assert abs(left[i] - p) <= tol * abs(p), (p, left)
        left.pop(i)


def zpk_response_db(zpk, w):
    _, h = signal.freqs_zpk(*zpk, worN=w)
    return 20 * np.log10(np.abs(h))


def db(h):
    return 20 * np.log10(np.abs(h))


@pytest.mark.parametrize("order", ORDERS)
def test_butterworth_sections_rebuild_the_scipy_butterworth_prototype(order):
    secs = sections("butterworth", order)
    zpk = signal.butter(order, 1.0, analog=True, output="zpk")
    # scipy.signal.butter analog: magnitude and poles
    np.testing.assert_allclose(db(cascade_response(secs, W)), zpk_response_db(zpk, W), atol=1e-8)
    assert_same_poles(cascade_poles(secs), zpk[1])


@pytest.mark.parametrize("norm", BESSEL_NORMS)
@pytest.mark.parametrize("order", ORDERS)
def test_bessel_sections_rebuild_the_scipy_bessel_prototype_in_each_norm(order, norm):
    secs = sections("bessel", order, bessel_norm=norm)
    zpk = signal.bessel(order, 1.0, analog=True, output="zpk", norm=norm)
    # scipy.signal.bessel analog (norm='mag' | 'phase' | 'delay'): magnitude and poles
    np.testing.assert_allclose(db(cascade_response(secs, W)), zpk_response_db(zpk, W), atol=1e-7)
    assert_same_poles(cascade_poles(secs), zpk[1], tol=1e-8)


@pytest.mark.parametrize("ripple_db", RIPPLES_DB)
@pytest.mark.parametrize("order", ORDERS)
def test_chebyshev_sections_rebuild_the_scipy_chebyshev_prototype(order, ripple_db):
    secs = sections("chebyshev", order, ripple_db=ripple_db)
    zpk = signal.cheby1(order, ripple_db, 1.0, analog=True, output="zpk")
    gain = dc_gain("chebyshev", order, ripple_db=ripple_db)
    # scipy.signal.cheby1 analog: magnitude (with the even-order DC gain) and poles
    ours_db = db(gain * cascade_response(secs, W))
    np.testing.assert_allclose(ours_db, zpk_response_db(zpk, W), atol=1e-8)
    assert_same_poles(cascade_poles(secs), zpk[1])
    # scipy.signal.cheby1: DC gain k / prod(-p) is 10**(-rp/20) for even orders, 1 for odd
    assert gain == pytest.approx(float(np.real(zpk[2] / np.prod(-zpk[1]))), rel=1e-12)
    # scipy.signal.cheby1 convention: the corner is the ripple-band edge, -rp dB there
    assert db(gain * cascade_response(secs, [1.0]))[0] == pytest.approx(-ripple_db, abs=1e-9)


@pytest.mark.parametrize("order", [2, 4, 8])
def test_linkwitz_riley_is_a_squared_butterworth(order):
    secs = sections("linkwitz-riley", order)
    zpk = signal.butter(order // 2, 1.0, analog=True, output="zpk")
    # Linkwitz 1976: LR(2n) poles are the Butterworth(n) poles, each twice (scipy.signal.butter)
    assert_same_poles(cascade_poles(secs), np.repeat(zpk[1], 2), tol=1e-6)
    # ... so |H| is the Butterworth magnitude squared
    np.testing.assert_allclose(
        db(cascade_response(secs, W)), 2 * zpk_response_db(zpk, W), atol=1e-8
    )
    # Linkwitz 1976: -6.02 dB at the crossover frequency
    assert db(cascade_response(secs, [1.0]))[0] == pytest.approx(-6.0206, abs=1e-4)


def test_linkwitz_riley_second_order_is_one_section_of_q_one_half():
    # Linkwitz 1976: two coincident first-order Butterworth poles, Q = 0.5
    assert sections("linkwitz-riley", 2) == (Section(2, 1.0, 0.5),)


def test_linkwitz_riley_eighth_order_repeats_the_butterworth_fourth_order_sections():
    # Williams & Taylor, Butterworth 4th-order stage Q 0.5412 and 1.3066 (from memory)
    qs = [s.q for s in sections("linkwitz-riley", 8)]
    assert qs == pytest.approx([0.5412, 0.5412, 1.3066, 1.3066], abs=1e-4)


@pytest.mark.parametrize(
    ("alignment", "order", "kwargs", "expected"),
    [
        # Williams & Taylor, Electronic Filter Design Handbook, stage tables (from memory)
        ("butterworth", 4, {}, [(1.0, 0.5412), (1.0, 1.3066)]),
        ("butterworth", 3, {}, [(1.0, math.nan), (1.0, 1.0)]),
        ("bessel", 2, {}, [(1.2720, 0.5774)]),
        ("chebyshev", 2, {"ripple_db": 0.5}, [(1.231, 0.864)]),
        ("chebyshev", 3, {"ripple_db": 1.0}, [(0.494, math.nan), (0.997, 2.018)]),
    ],
)
def test_sections_match_published_stage_tables(alignment, order, kwargs, expected):
    got = [(s.f0_ratio, s.q) for s in sections(alignment, order, **kwargs)]
    np.testing.assert_allclose(np.array(got), np.array(expected), atol=1e-3)


def test_bessel_second_order_magnitude_norm_matches_its_closed_form():
    # Reverse Bessel polynomial s^2 + 3 s + 3 (Williams & Taylor, from memory): w0 = sqrt(3),
    # Q = 1/sqrt(3); |H|^2 = 1/2 where w^4 + 3 w^2 - 9 = 0, so w_3dB^2 = (sqrt(45) - 3) / 2
    (sec,) = sections("bessel", 2)
    w_3db = math.sqrt((math.sqrt(45.0) - 3.0) / 2.0)
    assert sec.f0_ratio == pytest.approx(math.sqrt(3.0) / w_3db, rel=1e-12)
    assert sec.q == pytest.approx(1.0 / math.sqrt(3.0), rel=1e-12)


@pytest.mark.parametrize(
    ("order", "expected_q"),
    [(3, [0.6910]), (4, [0.5219, 0.8055]), (5, [0.5635, 0.9165])],
)
def test_bessel_stage_q_values_match_the_tables_in_every_norm(order, expected_q):
    # Williams & Taylor stage-Q tables (from memory); Q does not depend on the norm
    for norm in BESSEL_NORMS:
        qs = [s.q for s in sections("bessel", order, bessel_norm=norm) if s.order == 2]
        assert qs == pytest.approx(expected_q, abs=2e-4)


@pytest.mark.parametrize("alignment", ["butterworth", "bessel", "chebyshev"])
@pytest.mark.parametrize("order", ORDERS)
def test_odd_orders_have_exactly_one_first_order_section_placed_first(alignment, order):
    kwargs = {"ripple_db": 0.5} if alignment == "chebyshev" else {}
    secs = sections(alignment, order, **kwargs)
    assert sum(s.order for s in secs) == order
    assert [s.order for s in secs].count(1) == order % 2
    assert all(s.order == 1 for s in secs[: order % 2])
    qs = [s.q for s in secs if s.order == 2]
    assert qs == sorted(qs)  # common practice (no source): lowest Q first


ALL_ALIGNMENTS = r"butterworth, bessel, chebyshev, linkwitz-riley"


@pytest.mark.parametrize(
    ("call", "error", "match"),
    [
        (lambda: sections("elliptic", 4), ValueError,
         rf"alignment must be one of {ALL_ALIGNMENTS} \(got 'elliptic'\)"),
        (lambda: sections("butterworth", 0), ValueError,
         r"order must be 1 <= order <= 10 \(got 0\)"),
        (lambda: sections("bessel", 11), ValueError,
         r"order must be 1 <= order <= 10 \(got 11\)"),
        (lambda: sections("butterworth", 2.0), TypeError, "integer"),  # type: ignore[arg-type]
        (lambda: sections("butterworth", True), TypeError, "order must be an integer"),
        (lambda: sections("linkwitz-riley", 6), ValueError,
         r"linkwitz-riley order must be 2, 4 or 8 \(got 6\)"),
        (lambda: sections("chebyshev", 4), ValueError, "ripple_db is required for chebyshev"),
        (lambda: sections("chebyshev", 4, ripple_db=0.0), ValueError,
         r"ripple_db must be finite and > 0 dB \(got 0.0\)"),
        (lambda: sections("chebyshev", 4, ripple_db=math.nan), ValueError, "ripple_db must be"),
        (lambda: sections("butterworth", 4, ripple_db=1.0), ValueError,
         "ripple_db applies only to chebyshev, not butterworth"),
        (lambda: sections("bessel", 4, bessel_norm="gain"), ValueError,
         r"bessel_norm must be one of mag, phase, delay \(got 'gain'\)"),
    ],
)  # fmt: skip
def test_sections_reject_bad_requests_naming_parameter_rule_and_value(call, error, match):
    with pytest.raises(error, match=match):
        call()


def test_sections_from_poles_groups_conjugates_and_pairs_real_poles():
    # (s + 1)(s + 4): w0 = 2, Q = 2 / 5; (s^2 + s + 1): w0 = 1, Q = 1 (algebra)
    poles = np.array([-4.0, -0.5 - 1j * math.sqrt(3) / 2, -1.0, -0.5 + 1j * math.sqrt(3) / 2])
    got = sections_from_poles(poles)
    # pairing: (s - p)(s - p*) = s^2 - 2 Re(p) s + |p|^2, so w0 = |p| and Q = |p| / (-2 Re p)
    # (Williams & Taylor, Electronic Filter Design Handbook, section from poles)
    assert [s.order for s in got] == [2, 2]
    assert (got[0].f0_ratio, got[0].q) == pytest.approx((2.0, 0.4))
    assert (got[1].f0_ratio, got[1].q) == pytest.approx((1.0, 1.0))


def test_sections_from_poles_leaves_the_smallest_real_pole_first_order():
    got = sections_from_poles(np.array([-3.0, -0.5, -2.0]))
    # algebra: (s + 2)(s + 3) = s^2 + 5 s + 6, so w0 = sqrt(6) and Q = sqrt(6) / 5
    assert got[0].order == 1 and got[0].f0_ratio == 0.5
    assert (got[1].f0_ratio, got[1].q) == pytest.approx((math.sqrt(6.0), math.sqrt(6.0) / 5.0))


@pytest.mark.parametrize(
    ("poles", "match"),
    [
        (np.array([], dtype=complex), "at least one pole"),
        (np.array([-1.0, 0.5]), "negative real part"),
        (np.array([1j, -1j]), "negative real part"),
        (np.array([-1.0 + 1j]), "conjugate pairs"),
        (np.array([-1.0 + 1j, -1.0 - 1.1j]), "conjugate pairs"),
    ],
)
def test_sections_from_poles_rejects_unusable_poles(poles, match):
    with pytest.raises(ValueError, match=match):
        sections_from_poles(poles)


@pytest.mark.parametrize(
    ("args", "match"),
    [
        ((3, 1.0, 0.7), "order must be 1 or 2"),
        ((2, 0.0, 0.7), "f0_ratio must be finite and > 0"),
        ((2, 1.0, -0.7), "q must be finite and > 0"),
        ((2, 1.0), "q must be finite and > 0"),
        ((1, 1.0, 0.7), "first-order Section q must be NaN"),
    ],
)
def test_section_refuses_inconsistent_fields(args, match):
    with pytest.raises(ValueError, match=match):
        Section(*args)


def test_prototype_poles_lie_in_the_left_half_plane_with_scipy_gain_conventions():
    # scipy.signal.buttap: Butterworth poles on the unit circle
    assert np.abs(prototype_poles("butterworth", 7)) == pytest.approx(np.ones(7))
    for alignment in ALIGNMENTS:
        order = 4
        kwargs = {"ripple_db": 1.0} if alignment == "chebyshev" else {}
        assert np.all(prototype_poles(alignment, order, **kwargs).real < 0)


def scaled(secs, factor):
    return [Section(s.order, factor * s.f0_ratio, s.q) for s in secs]


def test_nearest_alignment_recognises_a_scaled_bessel_fourth_order():
    # a Bessel 4 (scipy.signal.bessel norm='mag') moved up 1.1x
    match = nearest_alignment(scaled(sections("bessel", 4), 1.1))
    assert isinstance(match, AlignmentMatch)
    assert (match.alignment, match.order, match.bessel_norm) == ("bessel", 4, "mag")
    assert match.corner_scale == pytest.approx(1.1, rel=1e-9)
    assert match.distance < 1e-9
    assert match.description == "Bessel (mag norm), 4th order, corner 1.10 x"


@pytest.mark.parametrize("norm", ["phase", "delay"])
def test_nearest_alignment_reports_any_bessel_norm_as_mag_with_its_corner(norm):
    match = nearest_alignment(scaled(sections("bessel", 6, bessel_norm=norm), 0.7))
    assert (match.alignment, match.bessel_norm) == ("bessel", "mag")
    # the norms differ only by a corner scale, so the mag norm is found with another scale:
    # the corner ratio equals scipy.signal.bessel's pole ratio between the norms
    ref_mag = signal.bessel(6, 1.0, analog=True, output="zpk", norm="mag")[1]
    ref_norm = signal.bessel(6, 1.0, analog=True, output="zpk", norm=norm)[1]
    ratio = np.max(np.abs(ref_norm)) / np.max(np.abs(ref_mag))
    assert match.corner_scale == pytest.approx(0.7 * ratio, rel=1e-9)


def test_nearest_alignment_identifies_a_perturbed_butterworth():
    # Butterworth 6 (scipy.signal.butter) at 0.8x, each Q off by +/-2 %, f0 by +/-1 %
    built = [
        Section(2, s.f0_ratio * 0.8 * f, s.q * g)
        for s, f, g in zip(
            sections("butterworth", 6), (1.01, 0.99, 1.0), (1.02, 0.98, 1.02), strict=True
        )
    ]
    match = nearest_alignment(built[::-1])  # any order
    assert (match.alignment, match.order) == ("butterworth", 6)
    assert match.corner_scale == pytest.approx(0.8, rel=0.01)
    assert 0.005 < match.distance < 0.03
    assert match.description == "Butterworth, 6th order, corner 0.80 x"


def test_nearest_alignment_estimates_a_chebyshev_ripple():
    match = nearest_alignment(scaled(sections("chebyshev", 5, ripple_db=1.0), 1.3))
    assert (match.alignment, match.order) == ("chebyshev", 5)
    assert match.ripple_db == pytest.approx(1.0, rel=1e-4)
    assert match.corner_scale == pytest.approx(1.3, rel=1e-5)
    assert match.description == "Chebyshev 1.00 dB ripple, 5th order, corner 1.30 x"


def test_nearest_alignment_prefers_linkwitz_riley_for_doubled_butterworth_sections():
    # Linkwitz 1976: LR4 = Butterworth 2 twice (Q 0.7071, 0.7071)
    match = nearest_alignment([Section(2, 2.0, 0.7071), Section(2, 2.0, 0.7071)])
    assert (match.alignment, match.order) == ("linkwitz-riley", 4)
    assert match.corner_scale == pytest.approx(2.0)


def test_nearest_alignment_regroups_two_first_order_sections():
    # two equal first-order RC sections are LR2: a double real pole, Q = 0.5 (Linkwitz 1976)
    match = nearest_alignment([Section(1, 3.0), Section(1, 3.0)])
    assert (match.alignment, match.order) == ("linkwitz-riley", 2)
    assert match.corner_scale == pytest.approx(3.0)


@pytest.mark.parametrize(
    ("given", "match"),
    [([], r"total order of the sections must be 1 to 10 \(got 0\)"),
     ([Section(2, 1.0, 0.7)] * 6, r"must be 1 to 10 \(got 12\)")],
)  # fmt: skip
def test_nearest_alignment_rejects_empty_or_too_high_orders(given, match):
    with pytest.raises(ValueError, match=match):
        nearest_alignment(given)
