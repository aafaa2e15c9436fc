"""Whole designs: the as-built cascade against scipy's analog prototypes and Linkwitz 1976."""

import math

import numpy as np
import pytest
from scipy import signal

from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import parse_design


def design(parts=None, **filt):
    table = {"name": "f", **filt}
    data = {"filter": [table], "parts": parts or {}}
    return build_design(parse_design(data, "<test>")).filters[0]


def db(h):
    return 20 * np.log10(np.abs(h))


CORNER = 1000.0
F = CORNER * np.geomspace(0.1, 10, 81)


def scipy_reference(kind, order, btype, **kw):
    w = 2 * math.pi * CORNER
    if kind == "butterworth":
        b, a = signal.butter(order, w, btype, analog=True)
    elif kind == "bessel":
        b, a = signal.bessel(order, w, btype, analog=True, norm=kw["norm"])
    else:
        b, a = signal.cheby1(order, kw["ripple"], w, btype, analog=True)
        if order % 2 == 0:
            # circuit stages have unity DC gain; scipy scales even orders to 0 dB peak
            b = b * 10 ** (kw["ripple"] / 20)
    return signal.freqs(b, a, worN=2 * math.pi * F)[1]


CASES = (
    [("butterworth", n, {}) for n in range(1, 11)]
    + [("bessel", n, {"norm": norm}) for n in (2, 3, 4, 6, 9) for norm in ("mag", "phase", "delay")]
    + [("chebyshev", n, {"ripple": r}) for n in (2, 3, 5, 8) for r in (0.5, 1.0)]
)


@pytest.mark.parametrize("btype", ["lowpass", "highpass"])
@pytest.mark.parametrize("kind,order,kw", CASES)
def test_as_built_cascade_matches_scipy_analog_prototype(kind, order, kw, btype):
    spec = {"response": btype, "alignment": kind, "order": order, "corner": CORNER}
    if kind == "bessel":
        spec["bessel_norm"] = kw["norm"]
    if kind == "chebyshev":
        spec["ripple_db"] = kw["ripple"]
    if kind == "chebyshev" and order >= 5:
        # Q up to 14: a unity-gain stage would need a part spread of 4 Q^2 = 800, and an
        # equal-component stage a gain accurate to 0.05 %; stages with K = 2 reach it
        spec["topology"] = "gain"
        spec["gain"] = 2.0 ** math.ceil(order / 2)
    f = design(**spec)
    ref = scipy_reference(kind, order, btype, **kw)  # scipy.signal butter/bessel/cheby1 analog
    ours = f.frequency_response(F) / f.passband_gain
    in_view = db(ref) > -40
    # standard parts move each stage by well under 1 %: within 0.35 dB where the response is
    # above -40 dB (a high-Q Chebyshev stage is the most sensitive)
    # and an edge of a Q > 5 Chebyshev is so steep that 0.2 % in f0 moves it 0.5 dB
    limit = 0.6 if (kind == "chebyshev" and order >= 5) else 0.35
    assert np.max(np.abs(db(ours)[in_view] - db(ref)[in_view])) < limit
    # and the ideal targets themselves are exact
    for s in f.stages:
        assert s.target is not None


def test_linkwitz_riley_4_is_two_butterworth_2_and_minus_6_db_at_the_corner():
    # Linkwitz 1976: LR4 = Butterworth-2 squared; both ways -6.02 dB at the crossover
    for kind in ("lowpass", "highpass"):
        f = design(response=kind, alignment="linkwitz-riley", order=4, corner=CORNER)
        assert [round(s.target.q, 4) for s in f.stages] == [0.7071, 0.7071]
        level = db(f.frequency_response(np.array([CORNER])))[0]
        assert level == pytest.approx(-6.02, abs=0.1)


def test_band_pass_is_a_high_pass_then_a_low_pass():
    f = design(response="bandpass", alignment="butterworth", order=2, corner=[300.0, 3000.0])
    kinds = [s.circuit.response for s in f.stages]
    assert sorted(kinds) == ["highpass", "lowpass"]
    b1, a1 = signal.butter(2, 2 * math.pi * 300, "highpass", analog=True)
    b2, a2 = signal.butter(2, 2 * math.pi * 3000, "lowpass", analog=True)
    f_hz = np.geomspace(30, 30000, 50)
    w = 2 * math.pi * f_hz
    ref = signal.freqs(b1, a1, w)[1] * signal.freqs(b2, a2, w)[1]  # scipy.signal.butter analog
    assert np.max(np.abs(db(f.frequency_response(f_hz)) - db(ref))) < 0.15


def test_stages_are_ordered_lowest_q_first_and_peak_gain_reported():
    f = design(response="lowpass", alignment="chebyshev", ripple_db=1.0, order=6, corner=CORNER)
    qs = [s.target.q for s in f.stages]
    # common practice (Williams & Taylor, Electronic Filter Design Handbook, cascade ordering):
    # low-Q stages first so the peaking stage does not clip inside the filter
    assert qs == sorted(qs)
    f_rev = design(
        response="lowpass", alignment="chebyshev", ripple_db=1.0, order=6, corner=CORNER,
        stage_order="highest-q-first",
    )  # fmt: skip
    # the high-Q stage first peaks inside the filter: a 1 dB Chebyshev 6th order has a last
    # stage Q of about 8 (Zverev's stage-Q tables, from memory), a peak near 20 log Q = 18 dB
    # above the first stage's, so more than 6 dB is safe
    assert f_rev.stages[0].peak_gain_db > f.stages[0].peak_gain_db + 6


def test_gain_topology_splits_the_passband_gain_over_the_stages():
    f = design(
        response="lowpass",
        alignment="butterworth",
        order=4,
        corner=CORNER,
        topology="gain",
        gain="12 dB",
    )
    assert 20 * math.log10(f.passband_gain) == pytest.approx(12.0, abs=0.1)
    assert all(s.ideal.gain == pytest.approx(10 ** (6 / 20), rel=0.01) for s in f.stages)


def test_a_slow_amplifier_is_warned_about_with_its_figure():
    spec = {
        "amplifier": {"gbw": "100 kHz", "swing": "13 V", "slew": "0.5 V/us"},
        "filter": [
            {
                "name": "hot",
                "response": "lowpass",
                "alignment": "butterworth",
                "order": 2,
                "corner": "5 kHz",
                "topology": "equal",
            }
        ],
    }
    d = build_design(parse_design(spec, "<test>"))
    text = " ".join(str(w) for w in d.warnings)
    # common practice: GBW 50x above K f0 Q
    assert "gain-bandwidth 1e+05 Hz is below 50 x K x f0 x Q" in text
    stage = d.filters[0].stages[0]
    assert stage.built.f0_hz < stage.ideal.f0_hz  # the amplifier pulls f0 down


def test_as_built_circuit_reports_its_f0_q_and_nearest_alignment():
    # two unity-gain stages with the Butterworth-4 capacitor ratios 4 Q^2 (common practice)
    q1, q2 = 0.5412, 1.3066
    c = 10e-9  # sqrt(C1 C2) = c keeps both stages at the same f0
    stages = [
        {"R1": "10k", "R2": "10k", "C1": 2 * q1 * c, "C2": c / (2 * q1)},
        {"R1": "10k", "R2": "10k", "C1": 2 * q2 * c, "C2": c / (2 * q2)},
    ]
    spec = {"filter": [{"name": "b", "response": "lowpass", "stage": stages}]}
    f = build_design(parse_design(spec, "<test>")).filters[0]
    assert [round(s.ideal.q, 4) for s in f.stages] == [q1, q2]
    assert f.resembles.alignment == "butterworth" and f.resembles.order == 4
    assert f.resembles.distance < 0.01
    assert f.resembles.corner_scale == pytest.approx(1 / (2 * math.pi * 10e3 * c), rel=1e-3)


def test_a_stage_made_sensitive_by_its_part_spread_is_warned_about():
    # unity-gain low-pass, R1 C1 / (R2 C2) = 48: dQ/dK = Q^2 sqrt(R1 C1 / (R2 C2)) is about 190
    # (from the textbook Q formula), so even a 3 MHz amplifier (250 x f0 Q) moves it
    stage = {"R1": "27k", "R2": "1k2", "C1": "47n", "C2": "470p"}
    spec = {
        "amplifier": {"gbw": "3 MHz", "swing": "13 V", "slew": "10 V/us"},
        "filter": [{"name": "spread", "response": "lowpass", "stage": [stage]}],
    }
    d = build_design(parse_design(spec, "<test>"))
    s = d.filters[0].stages[0]
    assert s.built.f0_hz < 0.97 * s.ideal.f0_hz  # nodal solve with the amplifier model
    text = " ".join(str(w) for w in d.warnings)
    assert "sensitive to the amplifier" in text and "the amplifier moves f0 -4.4 %" in text


def test_synthesis_with_the_amplifier_model_picks_parts_that_stay_on_target_as_built():
    spec = {
        "parts": {"resistors": "E24", "capacitors": "E6"},
        "amplifier": {"gbw": "3 MHz", "swing": "13 V", "slew": "10 V/us"},
        "filter": [
            {"name": "lp", "response": "lowpass", "alignment": "chebyshev", "ripple_db": 1.0,
             "order": 3, "corner": "6 kHz"}
        ],
    }  # fmt: skip
    d = build_design(parse_design(spec, "<test>"))
    for s in d.filters[0].stages:
        assert s.built.f0_hz == pytest.approx(s.target.f0_hz, rel=0.02)
        if not math.isnan(s.target.q):
            assert s.built.q == pytest.approx(s.target.q, rel=0.02)
    assert d.warnings == ()


def _built(stage: dict) -> list:
    spec = {"filter": [{"name": "bench", "response": "lowpass",
                        "stage": [{"topology": "unity", **stage}]}]}  # fmt: skip
    return [str(w) for w in build_design(parse_design(spec, "<test>")).warnings]


def test_a_given_circuit_with_q_23_is_warned_about_with_its_peak_and_part_range():
    warned = _built({"R1": "10k", "R2": "10k", "C1": "2u2", "C2": "1n"})
    # textbook unity-gain Sallen-Key with equal R: Q = sqrt(C1 / C2) / 2 (Horowitz & Hill
    # 3rd ed. 6.3); a second-order low-pass peaks at Q / sqrt(1 - 1/(4 Q^2)) above DC
    q = math.sqrt(2.2e-6 / 1e-9) / 2
    peak_db = 20 * math.log10(q / math.sqrt(1 - 1 / (4 * q * q)))
    (high_q,) = [w for w in warned if "is above 10" in w]
    assert f"Q {q:.1f} is above 10" in high_q  # 23.5 (textbook closed form)
    assert f"peaks {peak_db:+.1f} dB above the passband gain" in high_q  # +27.4 dB
    (cap,) = [w for w in warned if w.startswith("bench stage 1: C1 = 2u2")]
    assert "outside the part range 100p..1u" in cap  # the default capacitor range


def test_a_tiny_capacitor_is_warned_about_strays():
    warned = _built({"R1": "10k", "R2": "10k", "C1": "47p", "C2": "22p"})
    assert any("C2 = 22p" in w and "stray" in w for w in warned)


def test_resistors_above_1_megohm_get_their_noise_and_bias_current_offset():
    warned = _built({"R1": "2M2", "R2": "2M2", "C1": "200p", "C2": "100p"})
    (r1,) = [w for w in warned if w.startswith("bench stage 1: R1 = 2M2")]
    # Johnson 1928 / Nyquist 1928: sqrt(4 k T R), k exact (SI brochure 2019), T = 298.15 K
    noise_nv = math.sqrt(4 * 1.380649e-23 * 298.15 * 2.2e6) * 1e9
    assert f"thermal noise is {noise_nv:.0f} nV/rtHz" in r1  # 190 nV/rtHz
    assert "each 1 nA of amplifier input bias current through it makes 2.2 mV" in r1  # Ohm's law
    assert not any("Q " in w and "is above 10" in w for w in warned)  # Q 0.707: no Q warning
