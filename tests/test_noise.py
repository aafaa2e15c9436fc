"""The circuit's noise against Johnson-Nyquist, kT/C, IEC 61672-1 and an independent solve."""

import math

import numpy as np
import pytest

from filtertwin.circuit.design import build_design, design_filter
from filtertwin.circuit.noise import (
    BOLTZMANN_J_PER_K,
    a_weighting_db,
    design_noise,
    filter_noise,
    stage_noise_psd,
    thermal_noise_v_per_rthz,
)
from filtertwin.circuit.sallenkey import Amplifier, StageCircuit
from filtertwin.circuit.spec import parse_design

AMP_RO = Amplifier("test amplifier, 10 MHz, 75 ohm out", 10e6, 13.0, 5e6, 4e-9, 2e-12, 2e5, 75.0)
FAST = Amplifier("near-ideal amplifier", 1e12, 13.0, 1e9, 4e-9, 2e-12, 1e9, 0.0)
T_K = 298.15


def test_resistor_thermal_noise_is_four_k_t_r():
    # Johnson 1928; Nyquist 1928: sqrt(4 k T R); 10 kOhm at 290 K is 12.65 nV/rtHz (the
    # figure as usually quoted, truncated: 12.655)
    assert BOLTZMANN_J_PER_K == 1.380649e-23  # SI brochure, 9th ed. (2019): exact
    assert float(thermal_noise_v_per_rthz(10e3, 290.0)) == pytest.approx(12.65e-9, abs=0.01e-9)


def test_a_weighting_matches_the_standard_table():
    # IEC 61672-1:2013, table 3 (A-weighting, to 0.1 dB): 100 Hz -19.1, 1 kHz 0.0, 10 kHz -2.5
    got = a_weighting_db(np.array([100.0, 1000.0, 10000.0]))
    assert got == pytest.approx([-19.1, 0.0, -2.5], abs=0.05)


def independent_noise(c: StageCircuit, amp: Amplifier, f_hz: float, temperature_k: float):
    """Output noise power density of a stage, written independently of filtertwin.circuit.noise.

    Every resistor's noise is a voltage source 4kTR in series with it (Thevenin form), the
    amplifier's voltage noise in series with its + input, its current noise into each input;
    the stage input is grounded. Unknowns: the node voltages and, at Ro = 0, the amplifier's
    output current. One solve per source, powers added (uncorrelated sources).
    Returns (total V^2/Hz, signal transfer Vout/Vin).
    """
    s = 2j * math.pi * f_hz
    names = ["A", "B", "O", "N", "S", "IOUT"]
    idx = {n: i for i, n in enumerate(names)}
    two = c.order == 2
    lp = c.response == "lowpass"
    # branches: (name, from node, to node, admittance, is resistor); "IN" is the input
    if two:
        branches = [
            ("R1" if lp else "C1", "IN", "A"), ("R2" if lp else "C2", "A", "B"),
            ("C1" if lp else "R1", "A", "O"), ("C2" if lp else "R2", "B", "GND"),
        ]  # fmt: skip
    else:
        branches = [("R1" if lp else "C1", "IN", "B"), ("C1" if lp else "R1", "B", "GND")]
    if c.rf is not None:
        branches += [("RF", "O", "N"), ("RG", "N", "GND")]
    values = c.parts()
    wt = 2 * math.pi * amp.gbw_hz
    a_ol = amp.open_loop_gain / (1 + s * amp.open_loop_gain / wt)
    ro = amp.output_resistance_ohm

    def solve(vin, e_series, e_amp, i_plus, i_minus):
        m = np.zeros((6, 6), complex)
        rhs = np.zeros(6, complex)
        for name, p, q in branches:
            y = 1 / values[name] if name.startswith("R") else s * values[name]
            e = e_series.get(name, 0.0)
            # current p -> q: y (Vp - Vq - e); KCL rows: sum of currents leaving = injected
            for node, sign in ((p, 1), (q, -1)):
                if node in ("GND", "IN"):
                    continue
                r = idx[node]
                for other, osign in ((p, 1), (q, -1)):
                    if other == "GND":
                        continue
                    if other == "IN":
                        rhs[r] -= sign * osign * y * vin
                    else:
                        m[r, idx[other]] += sign * osign * y
                rhs[r] += sign * y * e
        if c.rf is None:
            m[idx["N"], idx["N"]], m[idx["N"], idx["O"]] = 1, -1  # N is the output
            out_i_node = "O"
        else:
            out_i_node = "N"
        rhs[idx["B"]] += i_plus
        rhs[idx[out_i_node]] += i_minus
        # amplifier source: VS = A (VB + e_amp - VN)
        m[idx["S"], idx["S"]], m[idx["S"], idx["B"]], m[idx["S"], idx["N"]] = 1, -a_ol, a_ol
        rhs[idx["S"]] = a_ol * e_amp
        # output current IOUT from S into O through Ro: VS - VO = Ro IOUT
        m[idx["IOUT"], idx["S"]], m[idx["IOUT"], idx["O"]] = 1, -1
        m[idx["IOUT"], idx["IOUT"]] = -ro
        m[idx["O"], idx["IOUT"]] -= 1  # IOUT enters O
        if not two:
            m[idx["A"], idx["A"]] = 1  # no junction node in a first-order stage
        return np.linalg.solve(m, rhs)[idx["O"]]

    zero = {}
    total = 0.0
    for name, _, _ in branches:
        if name.startswith("R"):
            four_ktr = 4 * 1.380649e-23 * temperature_k * values[name]
            total += abs(solve(0, {name: 1.0}, 0, 0, 0)) ** 2 * four_ktr
    total += abs(solve(0, zero, 1.0, 0, 0)) ** 2 * amp.noise_v_per_rthz**2
    total += abs(solve(0, zero, 0, 1.0, 0)) ** 2 * amp.noise_a_per_rthz**2
    total += abs(solve(0, zero, 0, 0, 1.0)) ** 2 * amp.noise_a_per_rthz**2
    return total, solve(1.0, zero, 0, 0, 0)


STAGES = [
    StageCircuit("lowpass", 2, "unity", r1=10e3, c1=22e-9, r2=10e3, c2=10e-9),
    StageCircuit("lowpass", 2, "gain", r1=12e3, c1=10e-9, r2=8.2e3, c2=4.7e-9, rf=6.8e3, rg=10e3),
    StageCircuit("highpass", 2, "gain", r1=5.6e3, c1=10e-9, r2=22e3, c2=10e-9, rf=4.7e3, rg=10e3),
    StageCircuit("highpass", 2, "unity", r1=2.32e3, c1=22e-9, r2=4.64e3, c2=22e-9),
    StageCircuit("lowpass", 1, "gain", r1=15.8e3, c1=10e-9, rf=10e3, rg=10e3),
    StageCircuit("highpass", 1, "unity", r1=15.8e3, c1=10e-9),
]


@pytest.mark.parametrize("c", STAGES, ids=lambda c: f"{c.response}{c.order}-{c.topology}")
def test_stage_output_noise_matches_an_independent_nodal_solve(c):
    f = np.geomspace(10, 5e6, 25)
    ours = sum(stage_noise_psd(c, AMP_RO, f, T_K).values())
    ref = np.array([independent_noise(c, AMP_RO, x, T_K)[0] for x in f])  # written in this test
    assert np.allclose(ours, ref, rtol=1e-6)


def test_unity_lowpass_noise_far_below_f0_is_the_resistors_and_the_amplifier_in_series():
    # common practice (e.g. Horowitz & Hill ch. 8, from memory): below f0 the capacitors are
    # open, R1 + R2 sit in series with the follower's + input, so
    # e_out^2 = 4 k T (R1 + R2) + en^2 + (in (R1 + R2))^2
    c = STAGES[0]
    r = c.r1 + c.r2
    expect = 4 * BOLTZMANN_J_PER_K * T_K * r + FAST.noise_v_per_rthz**2
    expect += (FAST.noise_a_per_rthz * r) ** 2
    got = sum(stage_noise_psd(c, FAST, np.array([1.0]), T_K).values())[0]
    assert got == pytest.approx(expect, rel=1e-4)


def test_rc_lowpass_integrates_to_k_t_over_c():
    # kT/C: the total thermal noise on a capacitor fed through any resistor (from memory;
    # every text on noise): an RC low-pass into an ideal follower, integrated to far above
    # its corner, gives k T / C whatever R is
    spec = {
        "filter": [{"name": "rc", "response": "lowpass",
                    "stage": [{"R1": "10k", "C1": "10n"}]}],
    }  # fmt: skip
    d = build_design(parse_design(spec, "<test>"))
    n = design_noise(d, (0.01, 1e8), points=6000)
    assert n.filters[0].rms_v ** 2 == pytest.approx(BOLTZMANN_J_PER_K * T_K / 10e-9, rel=2e-3)


def test_cascade_noise_is_each_stage_shaped_by_the_stages_after_it():
    d = design_filter(
        response="lowpass", alignment="butterworth", order=4, corner="2 kHz",
        amplifier={"preset": "low-noise bipolar"},
    )  # fmt: skip
    f = np.geomspace(20, 200e3, 15)
    filt = d.filters[0]
    ours = filter_noise(filt, d.amplifier, f, T_K).psd_v2_per_hz
    one, two = (s.circuit for s in filt.stages)
    ref = []
    for x in f:  # independent: stage 1's noise through stage 2's signal path, plus stage 2's
        n1, _ = independent_noise(one, d.amplifier, x, T_K)
        n2, h2 = independent_noise(two, d.amplifier, x, T_K)
        ref.append(n1 * abs(h2) ** 2 + n2)
    assert np.allclose(ours, ref, rtol=1e-6)


def test_a_crossover_sum_adds_the_ways_noise_powers_and_snr_follows_full_scale():
    from filtertwin.circuit.design import load

    d = load("bookshelf-2way")
    n = design_noise(d)
    # separate amplifiers: uncorrelated, powers add
    assert n.sum.rms_v**2 == pytest.approx(sum(f.rms_v**2 for f in n.filters), rel=1e-9)
    woofer = n.filters[0]
    # a full-scale sine (peak = full scale) through unity gain has rms FS / sqrt 2
    fs_rms = d.spec.full_scale_v / math.sqrt(2)
    assert woofer.snr_db == pytest.approx(20 * math.log10(fs_rms / woofer.rms_v), abs=1e-9)
    # no internal peak, unity gain: the largest clean output is the amplifier's swing
    assert woofer.dynamic_range_db == pytest.approx(
        20 * math.log10(d.amplifier.swing_v / math.sqrt(2) / woofer.rms_v), abs=1e-9
    )
    assert woofer.rms_a_v is not None and n.weighted


def test_temperature_comes_from_the_design_file():
    spec = {
        "parts": {"temperature_c": 85},
        "filter": [{"name": "rc", "response": "lowpass", "stage": [{"R1": "10k", "C1": "10n"}]}],
    }
    d = build_design(parse_design(spec, "<test>"))
    assert d.spec.parts.temperature_k == pytest.approx(358.15)
    hot = design_noise(d).filters[0].rms_v
    cold = design_noise(build_design(parse_design({**spec, "parts": {}}, "<t>"))).filters[0].rms_v
    # 4kTR: noise power proportional to absolute temperature (Johnson 1928)
    assert (hot / cold) ** 2 == pytest.approx(358.15 / 298.15, rel=1e-9)


def test_rendered_circuit_noise_has_the_computed_density(tmp_path):
    import subprocess
    import sys

    import soundfile as sf
    from scipy import signal

    from filtertwin.circuit.design import load

    rate = 48000
    source = tmp_path / "silence.wav"
    sf.write(source, np.zeros((60 * rate, 1)), rate, "FLOAT")
    out = tmp_path / "out"
    r = subprocess.run(
        [sys.executable, "-m", "filtertwin", "render", "bookshelf-2way", str(source),
         "--out", str(out), "--circuit-noise", "--oversample", "1", "--no-report"],
        capture_output=True, text=True,
    )  # fmt: skip
    assert "circuit noise: added" in r.stdout, r.stderr
    d = load("bookshelf-2way")
    for name in ("woofer", "tweeter", "sum"):
        x, _ = sf.read(out / f"{name}.wav")
        f, psd = signal.welch(x, rate, nperseg=4096)  # Welch 1967, via scipy.signal
        band = (f >= 20) & (f <= 20000)
        ways = ("woofer", "tweeter") if name == "sum" else (name,)
        expect = sum(filter_noise(d.filter(w), d.amplifier, f[band], T_K).psd_v2_per_hz
                     for w in ways)  # fmt: skip
        expect /= d.spec.full_scale_v**2  # the twin's units: 1.0 = full scale
        assert np.max(np.abs(10 * np.log10(psd[band] / expect))) < 1.0, name
