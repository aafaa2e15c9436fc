"""Sallen-Key analysis against textbook closed forms and an independent nodal solve."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from filtertwin.sallenkey import (
    Amplifier,
    StageCircuit,
    analyze,
    ideal_f0_q,
    response,
    split_sections,
    transfer_function,
)

AMP = Amplifier("test amplifier, 1 MHz", 1e6, 13.0, 1e6, 10e-9, 1e-12, 1e5)


def nodal_solve(c: StageCircuit, f_hz: np.ndarray, amp: Amplifier | None) -> np.ndarray:
    """Independent complex nodal analysis: Vout/Vin at each frequency.

    Unknowns VA (junction), VB (+ input), VOUT, VN (- input). KCL at A and B, the gain divider
    at N, and the amplifier as a voltage-controlled voltage source VOUT = A(s) (VB - VN) with
    A(s) = A0 / (1 + s A0 / wt) (single pole), or a very large gain for the ideal case.
    """
    out = []
    for f in f_hz:
        s = 2j * math.pi * f
        if c.response == "lowpass":
            y1, y2, y3, y4 = 1 / c.r1, 1 / c.r2, s * c.c2, s * c.c1
        else:
            y1, y2, y3, y4 = s * c.c1, s * c.c2, 1 / c.r2, 1 / c.r1
        if amp is None:
            a_ol = 1e12
        else:
            wt = 2 * math.pi * amp.gbw_hz
            a_ol = amp.open_loop_gain / (1 + s * amp.open_loop_gain / wt)
        m = np.zeros((4, 4), complex)
        rhs = np.zeros(4, complex)
        # KCL at A: (VA - Vin) y1 + (VA - VB) y2 + (VA - VOUT) y4 = 0, Vin = 1
        m[0] = [y1 + y2 + y4, -y2, -y4, 0]
        rhs[0] = y1
        # KCL at B: (VB - VA) y2 + VB y3 = 0
        m[1] = [-y2, y2 + y3, 0, 0]
        # divider at N: VN = VOUT * RG / (RF + RG), or VN = VOUT at unity gain
        beta = 1.0 if c.rf is None else c.rg / (c.rf + c.rg)
        m[2] = [0, 0, -beta, 1]
        # amplifier: VOUT - A (VB - VN) = 0
        m[3] = [0, -a_ol, 1, a_ol]
        v = np.linalg.solve(m, rhs)
        out.append(v[2])
    return np.array(out)


parts = st.tuples(
    st.floats(1e3, 100e3), st.floats(1e3, 100e3), st.floats(1e-9, 1e-6), st.floats(1e-9, 1e-6)
)


@settings(max_examples=60, deadline=None)
@given(parts, st.sampled_from(["lowpass", "highpass"]), st.floats(1.0, 2.8), st.booleans())
def test_transfer_function_matches_an_independent_nodal_solve(p, response_kind, k, with_amp):
    r1, r2, c1, c2 = p
    rf, rg = (None, None) if k == 1.0 else ((k - 1) * 10e3, 10e3)
    c = StageCircuit(response_kind, 2, "gain", r1=r1, c1=c1, r2=r2, c2=c2, rf=rf, rg=rg)
    amp = AMP if with_amp else None
    b, a = transfer_function(c, amp)
    f0 = 1 / (2 * math.pi * math.sqrt(r1 * r2 * c1 * c2))
    f = f0 * np.geomspace(0.05, 20, 41)
    s = 2j * math.pi * f
    ours = np.polyval(b, s) / np.polyval(a, s)
    ref = nodal_solve(c, f, amp)  # independent nodal analysis written in this test
    assert np.allclose(ours, ref, rtol=1e-6, atol=1e-9 * np.max(np.abs(ref)))


def test_unity_gain_lowpass_matches_the_textbook_closed_form():
    # Sallen & Key 1955 / any active-filter textbook: w0 = 1/sqrt(R1 R2 C1 C2),
    # Q = sqrt(R1 R2 C1 C2) / (C2 (R1 + R2)) at unity gain
    c = StageCircuit("lowpass", 2, "unity", r1=10e3, c1=22e-9, r2=10e3, c2=10e-9)
    m = analyze(c)
    t = math.sqrt(10e3 * 10e3 * 22e-9 * 10e-9)
    assert m.f0_hz == pytest.approx(1 / (2 * math.pi * t), rel=1e-12)
    assert m.q == pytest.approx(t / (10e-9 * 20e3), rel=1e-12)
    assert m.gain == pytest.approx(1.0)


def test_equal_resistor_unity_lowpass_needs_capacitor_ratio_four_q_squared():
    # common practice (no source): equal resistors, C_feedback / C_ground = 4 Q^2
    for q in (0.5412, 0.7071, 1.3066, 3.0):
        c = StageCircuit("lowpass", 2, "unity", r1=10e3, c1=4 * q * q * 1e-9, r2=10e3, c2=1e-9)
        assert analyze(c).q == pytest.approx(q, rel=1e-9)


def test_equal_resistor_unity_highpass_needs_resistor_ratio_four_q_squared():
    # common practice (no source): the high-pass twin, equal capacitors, R_ground/R_feedback = 4 Q^2
    for q in (0.5412, 0.7071, 1.3066):
        c = StageCircuit("highpass", 2, "unity", r1=1e3, c1=10e-9, r2=4 * q * q * 1e3, c2=10e-9)
        assert analyze(c).q == pytest.approx(q, rel=1e-9)


@pytest.mark.parametrize("k", [1.2, 1.586, 2.0, 2.5, 2.9])
@pytest.mark.parametrize("kind", ["lowpass", "highpass"])
def test_equal_component_q_is_one_over_three_minus_k(k, kind):
    # common practice (no source): equal-component Sallen-Key, Q = 1 / (3 - K)
    c = StageCircuit(
        kind, 2, "equal", r1=10e3, c1=10e-9, r2=10e3, c2=10e-9, rf=(k - 1) * 1e4, rg=1e4
    )
    m = analyze(c)
    assert m.q == pytest.approx(1 / (3 - k), rel=1e-9)
    assert m.f0_hz == pytest.approx(1 / (2 * math.pi * 10e3 * 10e-9), rel=1e-9)
    assert m.gain == pytest.approx(k, rel=1e-12)


@settings(max_examples=50, deadline=None)
@given(parts, st.sampled_from(["lowpass", "highpass"]), st.floats(1.0, 2.5))
def test_analysis_agrees_with_the_gain_k_closed_forms(p, kind, k):
    # textbook gain-K forms (Sallen & Key 1955): see sallenkey.ideal_f0_q
    r1, r2, c1, c2 = p
    c = StageCircuit(kind, 2, "gain", r1=r1, c1=c1, r2=r2, c2=c2, rf=(k - 1) * 1e4 or None, rg=1e4)
    if c.rf is None:
        c = StageCircuit(kind, 2, "unity", r1=r1, c1=c1, r2=r2, c2=c2)
    f0, q = ideal_f0_q(c)
    if q <= 0:
        return  # an unstable stage has no Q to compare
    m = analyze(c)
    assert m.f0_hz == pytest.approx(f0, rel=1e-9)
    assert m.q == pytest.approx(q, rel=1e-7)


def test_finite_gain_bandwidth_lowers_f0_and_raises_q_of_a_gain_stage():
    # Horowitz & Hill, The Art of Electronics 3rd ed., ch. 6 (from memory): a slow amplifier
    # shifts a Sallen-Key stage's f0 down and enhances its Q. Magnitudes cross-checked by the
    # nodal solve above.
    c = StageCircuit("lowpass", 2, "equal", r1=10e3, c1=10e-9, r2=10e3, c2=10e-9, rf=1.5e4, rg=1e4)
    slow = Amplifier("slow", 0.2e6, 13, 1e6, 1e-8, 1e-12, 1e5)
    ideal, built = analyze(c), analyze(c, slow)
    assert built.f0_hz < ideal.f0_hz
    assert built.q > ideal.q
    assert built.extra_pole_hz is not None and built.extra_pole_hz > ideal.f0_hz


def test_split_sections_multiply_back_to_the_stage():
    c = StageCircuit("highpass", 2, "gain", r1=5e3, c1=10e-9, r2=20e3, c2=10e-9, rf=5e3, rg=1e4)
    m = analyze(c, AMP)
    secs = split_sections(m)
    assert len(secs) == 2 and len(secs[1][1]) == 2
    f = np.geomspace(10, 1e6, 50)
    whole = response([(m.b, m.a)], f)
    assert np.allclose(response(secs, f), whole, rtol=1e-9)


def test_first_order_stage_corner_is_one_over_two_pi_rc():
    # RC network: corner 1 / (2 pi R C), from memory (any circuits textbook)
    m = analyze(StageCircuit("lowpass", 1, "unity", r1=15.8e3, c1=10e-9))
    assert m.f0_hz == pytest.approx(1 / (2 * math.pi * 15.8e3 * 10e-9), rel=1e-12)
    assert math.isnan(m.q)
