"""The digital twin against scipy's bilinear transform and the analog model it came from."""

import math

import numpy as np
import pytest
from scipy import signal

from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import parse_design
from filtertwin.digital.twin import bilinear_section, build_twin, characteristic_hz
from filtertwin.errors import UserInputError

AMP = {"gbw": "3 MHz", "swing": "13 V", "slew": "10 V/us"}


def make(filters, amplifier=None, full_scale="1 V"):
    data = {"filter": filters, "signal": {"full_scale": full_scale}}
    if amplifier:
        data["amplifier"] = amplifier
    return build_design(parse_design(data, "<test>"))


LP4 = {
    "name": "lp",
    "response": "lowpass",
    "alignment": "butterworth",
    "order": 4,
    "corner": "2 kHz",
}
HP3 = {"name": "hp", "response": "highpass", "alignment": "bessel", "order": 3, "corner": "150 Hz"}


@pytest.mark.parametrize(
    "b,a",
    [
        ([1.0], [1.0, 2 * math.pi * 1000 / 0.7071, (2 * math.pi * 1000) ** 2]),
        ([1.0, 0.0, 0.0], [1.0, 2 * math.pi * 300 / 2.5, (2 * math.pi * 300) ** 2]),
        ([2 * math.pi * 40.0], [1.0, 2 * math.pi * 40.0]),
        ([1.0, 0.0], [1.0, 2 * math.pi * 5000.0]),
    ],
)
def test_each_section_equals_scipy_bilinear_zpk_with_prewarping(b, a):
    # Oppenheim & Schafer 3rd ed. 7.1.2: prewarp by evaluating the bilinear map with
    # fs' = w0 / (2 tan(w0 / (2 fs))); scipy.signal.bilinear_zpk is the reference transform
    fs = 48000.0
    f0 = characteristic_hz(np.array(b), np.array(a))
    ours = bilinear_section(np.array(b), np.array(a), fs, f0)
    w0 = 2 * math.pi * f0
    fs_warp = w0 / (2 * math.tan(w0 / (2 * fs)))
    z, p, k = signal.tf2zpk(b, a)
    ref = signal.zpk2sos(*signal.bilinear_zpk(z, p, k, fs_warp))[0]
    assert np.allclose(ours, ref, rtol=1e-10, atol=1e-13)
    # the section's own f0 lands exactly at the same digital frequency
    ha = signal.freqs(b, a, worN=[w0])[1][0]
    hd = signal.sosfreqz(ours[None, :], worN=[f0], fs=fs)[1][0]
    assert abs(hd) == pytest.approx(abs(ha), rel=1e-9)


def test_low_pass_gain_is_exact_at_dc_and_high_pass_at_nyquist():
    d = make([LP4, HP3], amplifier=AMP)
    t = build_twin(d, 48000.0)
    lp, hp = t.filters
    dc = signal.sosfreqz(lp.sos, worN=[0.0], fs=48000)[1][0]
    assert abs(dc) == pytest.approx(
        abs(d.filter("lp").frequency_response(np.array([0.0]))[0]), rel=1e-12
    )
    # high-pass with an amplifier pole: the analog gain at infinity is zero, so compare the
    # ideal-amplifier twin at Nyquist with the ideal analog gain at infinity (= K = 1)
    ideal = build_twin(d, 48000.0, amplifier=False)
    ny = signal.sosfreqz(ideal.filters[1].sos, worN=[24000.0], fs=48000)[1][0]
    assert abs(ny) == pytest.approx(1.0, rel=1e-12)
    assert hp.sos.shape == (4, 6)  # 1st-order + 2nd-order stage, each plus an amplifier pole


def test_band_pass_gain_is_exact_at_the_centre():
    bp = {
        "name": "bp",
        "response": "bandpass",
        "alignment": "butterworth",
        "order": 2,
        "corner": ["300", "3000"],
    }
    d = make([bp])
    t = build_twin(d, 44100.0)
    fc = math.sqrt(300 * 3000)
    hd = signal.sosfreqz(t.filters[0].sos, worN=[fc], fs=44100)[1][0]
    ha = d.filters[0].frequency_response(np.array([fc]))[0]
    assert abs(hd) == pytest.approx(abs(ha), rel=1e-12)


def test_corner_at_or_above_nyquist_is_a_clear_error():
    d = make([dict(LP4, corner="30 kHz")])
    with pytest.raises(
        UserInputError,
        match=r"stage 1 f0 \d+ Hz is at or above the Nyquist frequency 24000 Hz of the "
        r"48000 Hz twin; --oversample auto runs the twin at a multiple of the rate",
    ):
        build_twin(d, 48000.0)


def test_impulse_response_spectrum_matches_the_analog_model_within_the_reported_fidelity():
    d = make([LP4, HP3], amplifier=AMP)
    t = build_twin(d, 96000.0)
    n = 1 << 16
    x = np.zeros(n)
    x[0] = 1.0
    for ft, f in zip(t.filters, d.filters, strict=True):
        y = signal.sosfilt(ft.sos, x)  # scipy.signal.sosfilt as the runner of reference
        spec = np.fft.rfft(y)
        freqs = np.fft.rfftfreq(n, 1 / 96000.0)
        lo, hi = ft.fidelity.band_hz
        sel = (freqs >= lo) & (freqs <= hi)
        ha = f.frequency_response(freqs[sel])
        inside = np.abs(ha) >= np.max(np.abs(ha)) * 1e-3
        err_db = np.abs(20 * np.log10(np.abs(spec[sel][inside] / ha[inside])))
        # the report samples 4000 log-spaced points: allow for the FFT grid falling between them
        assert np.max(err_db) <= 1.01 * ft.fidelity.max_db + 1e-3


def test_auto_oversampling_picks_the_smallest_factor_that_meets_the_tolerance():
    hp4 = {
        "name": "hp",
        "response": "highpass",
        "alignment": "butterworth",
        "order": 4,
        "corner": "1 kHz",
    }
    d = make([hp4])
    base = build_twin(d, 48000.0)
    # Oppenheim & Schafer 3rd ed. 7.1.2: the bilinear map compresses frequency as
    # w_d = 2 atan(w_a T / 2), so away from the one prewarped frequency the phase departs
    # from the analog filter's, most near Nyquist; oversampling shrinks w_a T and the error
    assert not base.filters[0].fidelity.within(0.1, 1.0)  # phase warps visibly near 20 kHz
    auto = build_twin(d, 48000.0, oversampling="auto")
    assert auto.oversampling in (2, 4, 8, 16) and auto.rate_hz == 48000.0 * auto.oversampling
    assert auto.filters[0].fidelity.within(0.1, 1.0)  # Oppenheim & Schafer 7.1.2 (above)
    smaller = build_twin(d, 48000.0, oversampling=auto.oversampling // 2)
    # the smallest factor: half of it still warps (Oppenheim & Schafer 7.1.2)
    assert not smaller.filters[0].fidelity.within(0.1, 1.0)


def test_clip_levels_are_the_swing_in_full_scale_units_at_each_stage_output():
    d = make([LP4], amplifier=AMP, full_scale="2 V")
    ft = build_twin(d, 48000.0).filters[0]
    # two stages, each a 2nd-order section plus the amplifier pole section
    assert ft.stage_of_section == (1, 1, 2, 2)
    assert list(ft.clip_fs) == [math.inf, 6.5, math.inf, 6.5]  # 13 V / 2 V


def test_the_twin_follows_the_output_resistance_floor_when_oversampled_enough():
    # the amplifier's output resistance gives each stage zeros (a numerator of the same degree
    # as its denominator); the twin's sections must still multiply to the analog model, so
    # that well below Nyquist (bilinear warping small, Oppenheim & Schafer 7.1.2) its stopband
    # reaches the same floor
    spec = {
        "amplifier": {"preset": "general-purpose bipolar"},
        "filter": [{"name": "lp", "response": "lowpass", "alignment": "butterworth",
                    "order": 4, "corner": "1 kHz"}],
    }  # fmt: skip
    d = build_design(parse_design(spec, "<test>"))
    floor = d.filters[0].stopband_floor()
    twin = build_twin(d, 48000, oversampling=64)  # 3.072 MHz: the floor far below Nyquist
    sos = twin.filters[0].sos
    f = np.geomspace(2e3, 4 * floor.at_hz, 400)
    _, h_twin = signal.sosfreqz(sos, worN=f, fs=twin.rate_hz)  # scipy.signal reference
    h_analog = d.filters[0].frequency_response(f)
    err_db = np.abs(20 * np.log10(np.abs(h_twin) / np.abs(h_analog)))
    assert np.max(err_db) < 1.0
    twin_floor_db = 20 * np.log10(np.min(np.abs(h_twin)) / abs(d.filters[0].passband_gain))
    assert twin_floor_db == pytest.approx(floor.level_db, abs=1.0)


def test_the_largest_deviation_is_placed_on_the_response_and_sized_re_the_peak():
    from filtertwin.digital.twin import resampling_response
    from filtertwin.report.design_text import fidelity_line

    # an invented 10th-order Butterworth low-pass at 10 kHz: a 60 dB/octave skirt whose
    # -60 dB point is at 20 kHz, outside the tolerance even at the largest factor
    design = make([dict(LP4, order=10, corner="10 kHz")], amplifier=AMP)
    twin = build_twin(design, 48000.0, oversampling="auto")
    assert twin.oversampling == 16
    ft = twin.filters[0]  # its largest deviation is far down its skirt
    fid = ft.fidelity
    grid = np.geomspace(*fid.band_hz, 4000)
    analog = design.filter(ft.name)
    peak = np.max(np.abs(analog.frequency_response(grid)))
    f = np.array([fid.at_hz, fid.at_hz])  # two points: freqz reads a lone number as a count
    ha = analog.frequency_response(f)[0]
    # the twin as render plays it: scipy.signal.sosfreqz of the sections times the
    # resamplers' response
    hd = signal.sosfreqz(ft.sos, f, fs=ft.rate_hz)[1][0] * resampling_response(16, f, ft.rate_hz)[0]
    assert abs(20 * np.log10(abs(hd) / abs(ha))) == pytest.approx(fid.max_db, abs=1e-6)
    assert fid.at_level_db == pytest.approx(20 * np.log10(abs(ha) / peak), abs=0.01)
    assert fid.at_error_db == pytest.approx(20 * np.log10(abs(hd - ha) / peak), abs=0.05)
    line = fidelity_line(ft, twin)
    assert not fid.within(0.1, 1.0)  # the line says where, how far down, what it amounts to
    assert "even at 16x, the largest factor" in line
    assert f"{-fid.at_level_db:.1f} dB down the response" in line
    assert f"{fid.at_error_db:.1f} dB re the peak" in line


# --- the shipped examples at the factor `auto` picks, and where each section is prewarped ---


def _example(name):
    from filtertwin import examples
    from filtertwin.circuit.spec import load_design

    return build_design(load_design(examples.resolve(name)))


def _analog(sections, f_hz):
    """The analog cascade by scipy.signal.freqs, section by section (the outside reference)."""
    h = np.ones(len(f_hz), complex)
    for b, a in sections:
        h *= signal.freqs(b, a, worN=2 * np.pi * f_hz)[1]
    return h


@pytest.mark.parametrize("rate_hz", [44100.0, 48000.0])
@pytest.mark.parametrize("name", ["bookshelf-2way", "studio-3way"])
def test_the_shipped_crossovers_as_rendered_meet_the_tolerance_at_the_factor_auto_picks(
    name, rate_hz
):
    from filtertwin.digital import render

    design = _example(name)
    twin = build_twin(design, rate_hz, oversampling="auto")
    # 8x leaves the woofer / mid skirt 0.12 to 0.26 dB off at its -60 dB point, so auto goes on
    assert twin.oversampling == 16
    n, at = 1 << 16, 4096
    x = np.zeros((n, 1))
    x[at] = 1e-2  # small: far from the swing and slew limits, so the render is linear
    y = render.render_array(twin, x, 8192)[:, :, 0] / 1e-2  # engine and resamplers, as played
    f = np.fft.rfftfreq(n, 1 / rate_hz)
    lo, hi = twin.filters[0].fidelity.band_hz
    sel = (f >= lo) & (f <= hi)
    for k, ft in enumerate(twin.filters):
        played = np.fft.rfft(y[k])[sel] * np.exp(2j * np.pi * f[sel] * at / rate_hz)
        ha = _analog(design.filter(ft.name).analog_sections(), f[sel])  # scipy.signal.freqs
        inside = np.abs(ha) >= np.max(np.abs(ha)) * 1e-3  # the 60 dB window (README)
        ratio = played[inside] / ha[inside]
        err_db = np.max(np.abs(20 * np.log10(np.abs(ratio))))
        err_deg = np.max(np.abs(np.degrees(np.angle(ratio))))
        # the FFT of the rendered impulse against scipy.signal.freqs: within the fidelity
        # tolerance (0.1 dB, 1 deg), and no worse than the fidelity line says (its grid of
        # 4000 points may miss the FFT's worst bin by a little)
        assert err_db < 0.1 and err_deg < 1.0
        assert err_db <= 1.01 * ft.fidelity.max_db + 1e-3
        assert err_deg <= 1.01 * ft.fidelity.max_deg + 1e-3


def _warped(sections, warps_hz, f_hz, rate_hz):
    """What the bilinear transform prewarped at ``warps_hz`` gives at ``f_hz``: each section's
    analog response at c tan(pi f / fs), c = 2 pi fw / tan(pi fw / fs) (Oppenheim & Schafer,
    Discrete-Time Signal Processing, 3rd ed., 7.1.2), by scipy.signal.freqs."""
    h = np.ones(len(f_hz), complex)
    for (b, a), fw in zip(sections, warps_hz, strict=True):
        c = 2 * np.pi * fw / np.tan(np.pi * fw / rate_hz)
        h *= signal.freqs(b, a, worN=c * np.tan(np.pi * f_hz / rate_hz))[1]
    return h


def _warps(sections):
    """Network sections at their own f0 (sqrt(a2), or a1 for a first order), amplifier
    sections (a first-order section after each second-order one here) at 20 kHz."""
    return [math.sqrt(a[2]) / (2 * math.pi) if len(a) == 3 else 20000.0 for b, a in sections]


def test_the_skirt_error_falls_four_times_per_doubling_of_the_rate_as_the_warp_formula_says():
    design = _example("bookshelf-2way")
    sections = design.filter("woofer").analog_sections()
    f = np.array([2202.0, 12373.1])  # the corner, and the skirt at -60 dB
    ha = _analog(sections, f)
    errors = {}
    for factor in (8, 16):
        rate = 48000.0 * factor
        ft = build_twin(design, 48000.0, oversampling=factor, filters=["woofer"]).filters[0]
        hd = signal.sosfreqz(ft.sos, worN=f, fs=rate)[1]
        # the twin's sections are the bilinear transform prewarped as the rule says: the
        # tan(pi f / fs) map of Oppenheim & Schafer 7.1.2 gives the same response
        np.testing.assert_allclose(hd, _warped(sections, _warps(sections), f, rate), rtol=1e-9)
        errors[factor] = np.abs(20 * np.log10(np.abs(hd / ha)))
    # the corner is exact at both rates (each section matched at its f0)
    assert errors[8][0] < 1e-4 and errors[16][0] < 1e-4
    # the skirt's shift, (pi^2 / 3)(f^2 - f0^2) / fs^2 to first order (the series of tan),
    # is a quarter at twice the rate: 0.116 dB at 8x, outside 0.1 dB; 0.029 dB at 16x
    assert errors[8][1] > 0.1 > errors[16][1]
    assert errors[16][1] / errors[8][1] == pytest.approx(0.25, abs=0.01)


def test_an_amplifier_section_above_the_band_is_prewarped_at_the_top_of_the_band():
    design = _example("candidate-butterworth")
    topcut = design.filter("topcut")
    sections = topcut.analog_sections()
    rate = 48000.0 * 8
    f = np.array([1000.0, 10000.0, 20000.0])
    ft = build_twin(design, 48000.0, oversampling=8).filters[0]
    for (b, a), row in zip(sections, ft.sos, strict=True):
        ha = signal.freqs(b, a, worN=2 * np.pi * f)[1]  # scipy.signal.freqs
        hd = signal.sosfreqz(row[None], worN=f, fs=rate)[1]  # scipy.signal.sosfreqz
        deg = np.abs(np.degrees(np.angle(hd / ha)))
        if len(a) == 2:  # the amplifier's pole (4.9 MHz) and output-resistance zero (160 kHz)
            zero_hz = abs(b[1] / b[0]) / (2 * math.pi)
            assert 1e5 < zero_hz < rate / 2
            assert np.max(deg) < 0.05  # matched at 20 kHz: hundredths of a degree below it
            # prewarped at its own zero, near Nyquist, the same section would be several
            # degrees off at 20 kHz (the tan map of Oppenheim & Schafer 7.1.2 squeezes the
            # band onto the lower part of its response)
            at_zero = _warped([(b, a)], [zero_hz], f, rate)
            assert np.degrees(abs(np.angle(at_zero[-1] / ha[-1]))) > 3.0  # 3.4 and 4.5 deg
    # the whole filter at 8x: the phase error over the band, 6.9 deg before, is under 1 deg
    assert ft.fidelity.max_deg < 1.0
