"""Aliased power, tone frequencies and spectra of the anti-alias check, against analytic
tones and white noise at low and high recording rates (the recordings are invented)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.signal

from filtertwin.checks.alias import check_alias
from filtertwin.checks.foldpower import alias_frequency, kaiser_beta, plan_spectrum
from filtertwin.circuit.design import design_filter

CASES = {
    # rate, seconds, ADC rate, band, (order, corner), in-band tone, tone above Nyquist, noise rms
    # the example: 60 s at 100 Hz, 0.7 Hz tone, 1e-3 rms noise, 20 Hz ADC, 5 Hz band
    "100 Hz seismometer-like (invented)": (
        100.0,
        60.0,
        20.0,
        5.0,
        (6, "5 Hz"),
        (0.7, 1.0),
        None,
        1e-3,
    ),  # fmt: skip
    "1 kHz logger (invented)": (
        1000.0,
        30.0,
        200.0,
        40.0,
        (6, "45 Hz"),
        (30.0, 1.0),
        (173.0, 0.01),
        1e-3,
    ),  # fmt: skip
    "40 kHz test tones (invented)": (
        40000.0,
        2.0,
        4000.0,
        1000.0,
        (6, "1.1 kHz"),
        (700.0, 1.0),
        (12620.0, 0.1),
        1e-3,
    ),  # fmt: skip
    "51.2 kHz vibration (invented)": (
        51200.0,
        2.0,
        8000.0,
        2000.0,
        (6, "2.2 kHz"),
        (500.0, 0.5),
        (6700.0, 0.1),
        1e-3,
    ),  # fmt: skip
}


def fold_intervals(rate_hz: float, adc_hz: float, band_hz: float) -> list[tuple[float, float]]:
    """Frequencies in (adc/2, rate/2] that land in [0, band], written out from |f - k fs|
    (Oppenheim & Schafer 4.2), independently of the check's code."""
    out = []
    for k in range(1, int(rate_hz / adc_hz) + 2):
        lo, hi = max(k * adc_hz - band_hz, adc_hz / 2), min(k * adc_hz + band_hz, rate_hz / 2)
        if hi > lo:
            out.append((lo, hi))
    return out


def integral(fn, intervals, points=20001) -> float:
    return sum(scipy.integrate.trapezoid(fn(f), f) for f in
               (np.linspace(lo, hi, points) for lo, hi in intervals))  # fmt: skip


def recording(rate, seconds, inband, above, noise, seed=3):
    rng = np.random.default_rng(seed)
    t = np.arange(round(rate * seconds)) / rate
    x = inband[1] * np.sin(2 * np.pi * inband[0] * t + 0.4) + noise * rng.standard_normal(len(t))
    if above is not None:
        x += above[1] * np.sin(2 * np.pi * above[0] * t + 1.1)
    return x


@pytest.mark.parametrize("name", list(CASES))
def test_aliased_power_matches_the_analytic_tones_and_white_noise(name):
    rate, seconds, adc, band, (order, corner), inband, above, noise = CASES[name]
    design = design_filter("aa", response="lowpass", alignment="butterworth", order=order,
                           corner=corner, parts={"capacitor_range": ["1n", "10u"]})  # fmt: skip
    filt = design.filters[0]
    x = recording(rate, seconds, inband, above, noise)
    check, _ = check_alias(design, x, rate, adc, band_hz=band)

    def h2(f):
        return np.abs(filt.frequency_response(np.asarray(f, float))) ** 2

    density = noise**2 / (rate / 2)  # white noise: variance spread evenly over 0..fs/2
    folds = fold_intervals(rate, adc, band)
    tone_in = inband[1] ** 2 / 2
    lands_in = above is not None and alias_frequency(above[0], adc) <= band
    tone_above = above[1] ** 2 / 2 if lands_in else 0.0
    fold_width = sum(hi - lo for lo, hi in folds)
    # Parseval: the power folding in is the noise density times the width of the folding set
    # plus the tones that land in the band (Oppenheim & Schafer 4.2)
    without = (tone_above + density * fold_width) / (tone_in + density * band)
    ref_with = tone_in * h2(inband[0]) + density * integral(h2, [(1e-9, band)])
    with_filter = tone_above * (h2(above[0]) if above else 0) + density * integral(h2, folds)
    assert check.aliased_without_db == pytest.approx(10 * math.log10(without), abs=1.0)
    assert check.aliased_with_db == pytest.approx(10 * math.log10(with_filter / ref_with), abs=1.0)
    assert check.twin.reached  # the twin follows the model where this is measured
    if name.startswith("100 Hz"):
        # the figures: truth about -61 dB without and about -130 dB with the filter
        assert check.aliased_without_db == pytest.approx(-61, abs=1.0)
        assert check.aliased_with_db == pytest.approx(-130, abs=2.0)
        assert check.spectrum.bin_hz < band / 100  # a bin well under a hundredth of the band


def test_a_tone_between_bins_is_refined_and_its_in_band_flag_follows_the_refined_frequency():
    # the case: 1803.5 Hz into a 2 kHz ADC folds to 196.5 Hz, inside a 197 Hz band
    rate = 48000.0
    x = recording(rate, 1.0, (100.0, 1.0), (1803.5, 0.1), 0.0)
    design = design_filter("aa", response="lowpass", alignment="butterworth", order=6,
                           corner="200 Hz")  # fmt: skip
    check, _ = check_alias(design, x, rate, 2000.0, band_hz=197.0)
    (comp,) = check.components
    bin_hz = check.spectrum.bin_hz
    assert abs(comp.source_hz - 1803.5) <= 0.1 * bin_hz  # a tenth of a bin
    assert comp.alias_hz == pytest.approx(2000.0 - 1803.5, abs=0.1 * bin_hz)  # O&S 4.2
    assert comp.in_band
    # the total is never below its largest component; here they are the same tone
    assert check.aliased_without_db >= comp.without_filter_db - 1e-9
    assert check.aliased_without_db == pytest.approx(10 * math.log10(0.01 / 1.0), abs=0.05)


@pytest.mark.parametrize("rate", [100.0, 1000.0, 40000.0, 51200.0])
def test_refined_tone_frequencies_are_within_a_tenth_of_a_bin(rate):
    rng = np.random.default_rng(int(rate))
    adc = rate / 5
    band = 0.4 * adc
    seconds = 600 / rate * 100 if rate < 1000 else 4.0
    t = np.arange(round(rate * seconds)) / rate
    # three tones above the ADC's Nyquist frequency at arbitrary places between bins
    freqs = np.sort(rng.uniform(0.6 * adc, 0.45 * rate, 3))
    x = (
        np.sin(2 * np.pi * 0.05 * adc * t)
        + sum(0.01 * np.sin(2 * np.pi * f * t + i) for i, f in enumerate(freqs))
        + 1e-6 * rng.standard_normal(len(t))
    )
    design = design_filter("aa", response="lowpass", alignment="butterworth", order=4,
                           corner=band, parts={"capacitor_range": ["1n", "10u"]})  # fmt: skip
    check, _ = check_alias(design, x, rate, adc, band_hz=band, max_components=10)
    found = sorted(c.source_hz for c in check.components)
    assert len(found) == 3
    # the true frequencies are those synthesised; a tenth of the spectrum's bin
    np.testing.assert_array_less(np.abs(np.array(found) - freqs), 0.1 * check.spectrum.bin_hz)


@pytest.mark.parametrize("sidelobe_db", [60.0, 100.0, 148.0, 200.0])
def test_kaiser_window_sidelobes_sit_where_asked(sidelobe_db):
    # Kaiser & Schafer 1980: beta = 0.12438 (A + 6.3); highest sidelobe measured numerically
    beta = kaiser_beta(sidelobe_db)
    w = scipy.signal.windows.kaiser(2048, beta, sym=False)
    spec = np.abs(np.fft.rfft(w, 2048 * 32)) ** 2
    spec /= spec[0]
    bins = np.arange(len(spec)) / 32
    null = math.sqrt(1 + (beta / math.pi) ** 2)  # first null of the I0-sinh window's spectrum
    highest = 10 * np.log10(spec[bins > null + 0.05].max())
    assert highest <= -sidelobe_db + 2.0


def test_plan_uses_bins_under_a_hundredth_of_the_band_when_the_recording_allows():
    plan = plan_spectrum(6000, 100.0, 5.0, 148.0)
    assert plan.bin_hz < 5.0 / 100
    plan = plan_spectrum(100 * 3600, 100.0, 5.0, 148.0)  # an hour: the wanted 200 bins per band
    assert plan.bin_hz == pytest.approx(5.0 / 200, rel=0.01) and not plan.limited_by_length


def test_with_filter_figures_equal_without_plus_the_model_gain_or_say_why():
    # a filter is linear: a spur keeps its ratio to the noise beside it, so after the filter
    # it sits where the model puts it (without + |H| in dB) unless the row says why not
    rate, adc, band = 48000.0, 8000.0, 1500.0
    design = design_filter("aa", response="lowpass", alignment="butterworth", order=6,
                           corner="2 kHz")  # fmt: skip
    x = recording(rate, 2.0, (300.0, 1.0), (9300.0, 0.1), 1e-3, seed=8)
    check, _ = check_alias(design, x, rate, adc, band_hz=band)
    (comp,) = check.components
    gain = abs(design.filters[0].frequency_response(np.array([9300.0]))[0])
    # the analog model's gain at the source frequency, in dB (Oppenheim & Schafer 4.2 for
    # where it lands; the model is the reference the twin must follow)
    assert comp.filter_db == pytest.approx(20 * math.log10(gain), abs=0.01)
    assert comp.expected_with_db == pytest.approx(comp.without_filter_db + comp.filter_db, abs=0.1)
    assert abs(comp.with_filter_db - comp.expected_with_db) <= 1.0 or comp.note
    assert comp.with_filter_db == pytest.approx(comp.expected_with_db, abs=1.0)
