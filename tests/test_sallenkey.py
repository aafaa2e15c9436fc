"""Sallen-Key analysis against textbook closed forms and an independent nodal solve."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from filtertwin.circuit.sallenkey import (
    Amplifier,
    StageCircuit,
    analyze,
    ideal_f0_q,
    response,
    split_sections,
    transfer_function,
)

AMP = Amplifier("test amplifier, 1 MHz", 1e6, 13.0, 1e6, 10e-9, 1e-12, 1e5)
AMP_RO = Amplifier("test amplifier, 1 MHz, 100 ohm out", 1e6, 13.0, 1e6, 10e-9, 1e-12, 1e5, 100.0)


def nodal_solve(c: StageCircuit, f_hz: np.ndarray, amp: Amplifier | None) -> np.ndarray:
    """Independent complex nodal analysis: Vout/Vin at each frequency.

    Unknowns VA (junction), VB (+ input), VOUT, VN (- input), VS (the amplifier's internal
    source). KCL at A, B and OUT, the gain divider at N, and the amplifier as a voltage-
    controlled voltage source VS = A(s) (VB - VN) behind its output resistance Ro (VOUT = VS
    when Ro = 0), with A(s) = A0 / (1 + s A0 / wt) (single pole), or a very large gain for the
    ideal case. The gain leg RF + RG loads OUT.
    """
    out = []
    ro = 0.0 if amp is None else amp.output_resistance_ohm
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
        yf = 0.0 if c.rf is None else 1 / (c.rf + c.rg)
        m = np.zeros((5, 5), complex)
        rhs = np.zeros(5, complex)
        # KCL at A: (VA - Vin) y1 + (VA - VB) y2 + (VA - VOUT) y4 = 0, Vin = 1
        m[0] = [y1 + y2 + y4, -y2, -y4, 0, 0]
        rhs[0] = y1
        # KCL at B: (VB - VA) y2 + VB y3 = 0
        m[1] = [-y2, y2 + y3, 0, 0, 0]
        # divider at N: VN = VOUT * RG / (RF + RG), or VN = VOUT at unity gain
        beta = 1.0 if c.rf is None else c.rg / (c.rf + c.rg)
        m[2] = [0, 0, -beta, 1, 0]
        # amplifier's internal source: VS - A (VB - VN) = 0
        m[3] = [0, -a_ol, 0, a_ol, 1]
        if ro == 0:
            m[4] = [0, 0, 1, 0, -1]  # VOUT = VS
        else:
            # KCL at OUT: (VOUT - VS) / Ro + (VOUT - VA) y4 + VOUT yf = 0
            m[4] = [-y4, 0, 1 / ro + y4 + yf, 0, -1 / ro]
        v = np.linalg.solve(m, rhs)
        out.append(v[2])
    return np.array(out)


def first_order_nodal_solve(c: StageCircuit, f_hz: np.ndarray, amp: Amplifier) -> np.ndarray:
    """The RC (or CR) network into the amplifier, solved node by node: V+ from the divider,
    then VS = A (V+ - VN), VN = beta VOUT and KCL at OUT with Ro and the gain leg."""
    s = 2j * math.pi * np.asarray(f_hz, float)
    z_r, z_c = c.r1, 1 / (s * c.c1)
    vp = z_c / (z_r + z_c) if c.response == "lowpass" else z_r / (z_r + z_c)
    wt = 2 * math.pi * amp.gbw_hz
    a_ol = amp.open_loop_gain / (1 + s * amp.open_loop_gain / wt)
    beta = 1.0 if c.rf is None else c.rg / (c.rf + c.rg)
    yf = 0.0 if c.rf is None else 1 / (c.rf + c.rg)
    go = 1 / amp.output_resistance_ohm
    # (VOUT - A (V+ - beta VOUT)) go + VOUT yf = 0
    return go * a_ol * vp / (go + yf + go * a_ol * beta)


parts = st.tuples(
    st.floats(1e3, 100e3), st.floats(1e3, 100e3), st.floats(1e-9, 1e-6), st.floats(1e-9, 1e-6)
)


@settings(max_examples=60, deadline=None)
@given(
    parts,
    st.sampled_from(["lowpass", "highpass"]),
    st.floats(1.0, 2.8),
    st.sampled_from([None, AMP, AMP_RO]),
)
def test_transfer_function_matches_an_independent_nodal_solve(p, response_kind, k, amp):
    r1, r2, c1, c2 = p
    rf, rg = (None, None) if k == 1.0 else ((k - 1) * 10e3, 10e3)
    c = StageCircuit(response_kind, 2, "gain", r1=r1, c1=c1, r2=r2, c2=c2, rf=rf, rg=rg)
    b, a = transfer_function(c, amp)
    f0 = 1 / (2 * math.pi * math.sqrt(r1 * r2 * c1 * c2))
    f = f0 * np.geomspace(0.05, 1000, 61)
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


@pytest.mark.parametrize("response_kind", ["lowpass", "highpass"])
@pytest.mark.parametrize("k", [1.0, 2.0])
def test_first_order_stage_with_output_resistance_matches_a_nodal_solve(response_kind, k):
    rf, rg = (None, None) if k == 1.0 else (10e3, 10e3)
    c = StageCircuit(response_kind, 1, "gain", r1=15.8e3, c1=10e-9, rf=rf, rg=rg)
    b, a = transfer_function(c, AMP_RO)
    f = np.geomspace(10, 1e8, 50)
    ours = np.polyval(b, 2j * math.pi * f) / np.polyval(a, 2j * math.pi * f)
    ref = first_order_nodal_solve(c, f, AMP_RO)  # independent solve written in this test
    assert np.allclose(ours, ref, rtol=1e-9, atol=1e-15)


def test_output_resistance_gives_the_unity_lowpass_its_high_frequency_asymptote():
    # Derivation (node arrangement of sallenkey's docstring): far above f0 and above the
    # amplifier's gain-bandwidth, C1 shorts the R1/R2 junction A to the output, C2 shorts the
    # + input B to ground, and A(s) -> 0 so the internal source VS -> 0 (VN = VOUT, but
    # VS = A (VB - VN) vanishes). The output node then sees R1 from the input, Ro to the
    # (grounded) source and R2 into the grounded + input:
    #   Vout/Vin -> (Ro || R2) / (R1 + Ro || R2).
    # With a gain leg RF + RG it is in parallel too: (Ro || R2 || (RF + RG)) / (R1 + ...).
    par = lambda *r: 1 / sum(1 / x for x in r)  # noqa: E731
    for rf, rg in ((None, None), (12e3, 10e3)):
        c = StageCircuit("lowpass", 2, "gain", r1=10e3, c1=22e-9, r2=4.7e3, c2=10e-9, rf=rf, rg=rg)
        legs = (AMP_RO.output_resistance_ohm, c.r2) + (() if rf is None else (rf + rg,))
        expect = par(*legs) / (c.r1 + par(*legs))
        m = analyze(c, AMP_RO)
        h_inf = abs(response(split_sections(m), np.array([1e13]))[0])
        assert h_inf == pytest.approx(expect, rel=1e-4)
        assert abs(nodal_solve(c, np.array([1e13]), AMP_RO)[0]) == pytest.approx(expect, rel=1e-4)


def test_the_lowpass_floor_is_the_minimum_of_an_independent_solve():
    from filtertwin.circuit.design import design_filter

    d = design_filter(
        response="lowpass", alignment="butterworth", order=4, corner="1 kHz",
        amplifier={"preset": "general-purpose bipolar"},
    )  # fmt: skip
    f = d.filters[0]
    floor = f.stopband_floor()
    grid = np.geomspace(2e3, 1e9, 20000)
    ref = np.ones(grid.shape, complex)
    for stage in f.stages:  # the cascade from per-stage nodal solves written in this test
        ref *= nodal_solve(stage.circuit, grid, d.amplifier)
    db = 20 * np.log10(np.abs(ref))
    i = int(np.argmin(db))
    assert floor.level_db == pytest.approx(db[i], abs=0.05)
    assert floor.at_hz == pytest.approx(grid[i], rel=0.01)
    assert floor.rises_to_db == pytest.approx(db[-1], abs=0.1)
    # without the amplifier model the 4th-order skirt keeps falling, 80 dB a decade
    ideal_db = 20 * np.log10(abs(f.frequency_response(np.array([10 * floor.at_hz]), False)[0]))
    assert ideal_db < floor.level_db - 60


@pytest.mark.parametrize("response_kind", ["lowpass", "highpass"])
def test_split_sections_with_output_resistance_stay_proper_and_multiply_back(response_kind):
    c = StageCircuit(response_kind, 2, "gain", r1=10e3, c1=22e-9, r2=10e3, c2=10e-9, rf=5e3, rg=1e4)
    m = analyze(c, AMP_RO)
    secs = split_sections(m)
    assert all(len(np.trim_zeros(b, "f")) <= len(a) <= 3 for b, a in secs)
    f = np.geomspace(10, 1e9, 80)
    ref = nodal_solve(c, f, AMP_RO)  # independent nodal solve
    assert np.allclose(response(secs, f), ref, rtol=1e-6, atol=1e-12)
