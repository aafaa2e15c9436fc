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
    assert auto.oversampling in (2, 4, 8) and auto.rate_hz == 48000.0 * auto.oversampling
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
    from filtertwin import examples
    from filtertwin.circuit.spec import load_design
    from filtertwin.digital.twin import resampling_response
    from filtertwin.report.design_text import fidelity_line

    design = build_design(load_design(examples.resolve("bookshelf-2way")))
    twin = build_twin(design, 48000.0, oversampling=8)
    ft = twin.filters[0]  # the woofer: its largest deviation is far down its skirt
    fid = ft.fidelity
    grid = np.geomspace(*fid.band_hz, 4000)
    analog = design.filter(ft.name)
    peak = np.max(np.abs(analog.frequency_response(grid)))
    f = np.array([fid.at_hz, fid.at_hz])  # two points: freqz reads a lone number as a count
    ha = analog.frequency_response(f)[0]
    # the twin as render plays it: scipy.signal.sosfreqz of the sections times the
    # resamplers' response
    hd = signal.sosfreqz(ft.sos, f, fs=ft.rate_hz)[1][0] * resampling_response(8, f, ft.rate_hz)[0]
    assert abs(20 * np.log10(abs(hd) / abs(ha))) == pytest.approx(fid.max_db, abs=1e-6)
    assert fid.at_level_db == pytest.approx(20 * np.log10(abs(ha) / peak), abs=0.01)
    assert fid.at_error_db == pytest.approx(20 * np.log10(abs(hd - ha) / peak), abs=0.05)
    line = fidelity_line(ft, twin)
    if not fid.within(0.1, 1.0):  # the line says where, how far down, and what it amounts to
        assert f"{-fid.at_level_db:.1f} dB down the response" in line
        assert f"{fid.at_error_db:.1f} dB re the peak" in line
