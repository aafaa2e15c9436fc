"""Spectra (streaming Welch), figures, the HTML report and the summary of a render."""

from __future__ import annotations

import base64
import json
import re

import numpy as np
import pytest
import scipy.signal
import soundfile as sf

from filtertwin import examples
from filtertwin.circuit import units
from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import load_design
from filtertwin.digital import render
from filtertwin.digital.spectra import WelchAccumulator, segment_frames
from filtertwin.digital.twin import build_twin
from filtertwin.files import recordings
from filtertwin.report import figures, summary
from filtertwin.report.html import CAUTION, ReportSection, render_html, write_html

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature


def _design(name: str = "studio-3way"):
    return build_design(load_design(examples.resolve(name)))


# --- spectra ------------------------------------------------------------------------------


@pytest.mark.parametrize("block", [1, 17, 509, 4096, 50000])
def test_streaming_psd_equals_scipy_welch_for_any_block_size(block):
    rng = np.random.default_rng(11)
    x = rng.standard_normal((10007, 2)) + np.array([0.3, -2.0])  # offsets: detrend matters
    acc = WelchAccumulator(1000.0, 2, 256)
    for start in range(0, len(x), block):
        acc.update(x[start : start + block])
    spectrum = acc.result()
    f_hz, psd = scipy.signal.welch(x, fs=1000.0, nperseg=256, axis=0)  # scipy.signal.welch
    np.testing.assert_allclose(spectrum.f_hz, f_hz, rtol=0, atol=1e-12)
    np.testing.assert_allclose(spectrum.psd, psd, rtol=1e-10, atol=1e-12 * psd.max())
    assert spectrum.segments == (10007 - 256) // 128 + 1  # Welch 1967: K overlapping segments


def test_streaming_psd_equals_welch_with_odd_segments_and_another_window():
    x = np.random.default_rng(5).standard_normal(3001)
    acc = WelchAccumulator(48000.0, 1, 255, noverlap=100, window=("kaiser", 8.0))
    for piece in np.array_split(x, 7):
        acc.update(piece[:, None])
    _, psd = scipy.signal.welch(x, fs=48000.0, window=("kaiser", 8.0), nperseg=255, noverlap=100)
    np.testing.assert_allclose(acc.result().psd[:, 0], psd, rtol=1e-10)  # scipy.signal.welch


def test_psd_integrates_to_the_variance_of_white_noise():
    sigma = 0.25
    x = sigma * np.random.default_rng(2).standard_normal((2**18, 1))
    acc = WelchAccumulator(8000.0, 1, 1024)
    acc.update(x)
    # Parseval: the integral of a density-scaled PSD is the signal's variance (Welch 1967);
    # statistical error of ~500 averaged Hann segments is well under 2 % (common practice)
    assert acc.result().variance()[0] == pytest.approx(np.var(x), rel=0.02)
    assert acc.result().variance()[0] == pytest.approx(sigma**2, rel=0.02)


def test_psd_of_a_sine_integrates_to_half_its_squared_amplitude():
    rate, amplitude = 48000.0, 0.5
    t = np.arange(2**16) / rate
    x = amplitude * np.sin(2 * np.pi * 1234.5 * t)
    acc = WelchAccumulator(rate, 1, 4096)
    acc.update(x[:, None])
    # Parseval for a sine: mean power A^2 / 2 (any signals textbook, e.g. Oppenheim & Schafer)
    assert acc.result().variance()[0] == pytest.approx(amplitude**2 / 2, rel=1e-3)


def test_segment_length_is_a_power_of_two_that_fits_the_signal():
    assert segment_frames(48000.0, 10**7) == 8192
    assert segment_frames(48000.0, 10**7, resolution_hz=1.0) == 32768
    short = segment_frames(48000.0, 5000)
    assert short & (short - 1) == 0 and 3 * short // 2 <= 5000
    assert segment_frames(100.0, 10) == 16


# --- HTML -----------------------------------------------------------------------------------


def _png(tmp_path, name="plot.png"):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(2, 1.5))
    fig.subplots().plot([1, 2, 3])
    return figures.save_png(fig, tmp_path / name)


def test_html_embeds_figures_as_base64_and_escapes_text(tmp_path):
    png = _png(tmp_path)
    section = ReportSection(
        "Checks <all>",
        ["R1 < R2 & C1 > C2"],
        tables=[(("check", "verdict"), [("swing", "PASS"), ("<script>", "FAIL")])],
        figures=[png],
        captions=["a caption"],
    )
    page = render_html("Report & title", [section])
    encoded = re.search(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page).group(1)
    assert base64.b64decode(encoded) == png.read_bytes()
    assert base64.b64decode(encoded).startswith(PNG_SIGNATURE)
    assert "<script>" not in page and "&lt;script&gt;" in page
    assert "R1 &lt; R2 &amp; C1 &gt; C2" in page
    assert '<td class="verdict-pass">PASS</td>' in page and 'class="verdict-fail"' in page
    assert page.count("<tr>") == 3 and "a caption" in page and CAUTION in page


def test_write_html_is_atomic_and_refuses_an_input(tmp_path):
    target = write_html(tmp_path / "report.html", "T", [ReportSection("S", ["p"])])
    assert target.read_text().startswith("<!DOCTYPE html>")
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]
    from filtertwin.errors import UserInputError

    with pytest.raises(UserInputError, match="refusing to write"):
        write_html(target, "T", [], protect=[target])


# --- figures --------------------------------------------------------------------------------


def test_twin_group_delay_matches_the_derivative_of_its_phase():
    twin = build_twin(_design(), 48000.0, oversampling=1)
    ft = twin.filters[1]
    f_hz = np.geomspace(50.0, 15000.0, 4000)
    h, delay_s = figures.twin_response(ft, f_hz)
    _, h_ref = scipy.signal.sosfreqz(ft.sos, worN=f_hz, fs=ft.rate_hz)  # scipy.signal.sosfreqz
    np.testing.assert_allclose(h, h_ref, rtol=1e-12)
    # group delay = -d(phase)/d(omega) (Oppenheim & Schafer 5.1.2), by central differences
    phase = np.unwrap(np.angle(h))
    numeric = -np.gradient(phase, 2 * np.pi * f_hz)
    np.testing.assert_allclose(delay_s[1:-1], numeric[1:-1], rtol=2e-3, atol=1e-7)


def test_figures_are_png_files_with_the_expected_size(tmp_path):
    from matplotlib.image import imread

    design = _design()
    twin = build_twin(design, 48000.0, oversampling=2)
    acc = WelchAccumulator(48000.0, 1, 256)
    acc.update(np.random.default_rng(0).standard_normal((4096, 1)))
    spectra = [("input (before)", acc.result()), ("low", acc.result()), ("sum", acc.result())]
    a = figures.spectra_figure(tmp_path / "s.png", spectra, "spectra")
    b = figures.response_figure(tmp_path / "r.png", design, twin, "response")
    for path, inches in ((a, (8, 10)), (b, (8.5, 12))):
        assert path.read_bytes().startswith(PNG_SIGNATURE)
        height, width = imread(path).shape[:2]
        assert (height, width) == (round(inches[0] * figures.DPI), round(inches[1] * figures.DPI))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.png", "s.png"]  # no temporaries


# --- tables and summary ---------------------------------------------------------------------


def test_design_sections_list_every_stage_and_its_parts():
    design = _design()
    sections = summary.design_sections(design)
    assert [s.heading for s in sections] == [
        "Design: amplifier, parts and warnings",
        *(f"Filter '{f.name}': stages and parts" for f in design.filters),
        "Parts list",
    ]
    for section, f in zip(sections[1:-1], design.filters, strict=True):
        (stage_header, stage_rows), (parts_header, parts_rows) = section.tables
        assert len(stage_rows) == len(parts_rows) == len(f.stages)
        for row, stage in zip(parts_rows, f.stages, strict=True):
            for name, cell in zip(parts_header[1:], row[1:], strict=True):
                value = stage.circuit.parts().get(name)
                if value is None:
                    assert cell == "-"
                else:  # IEC 60062 letter code, three significant figures
                    assert units.parse_quantity(cell, "ohm" if name[0] == "R" else "F") == (
                        pytest.approx(value, rel=5e-3)
                    )


def test_render_report_lists_every_file_and_figure(tmp_path):
    rate = 48000
    source = tmp_path / "in.wav"
    sf.write(source, 0.1 * np.random.default_rng(1).standard_normal((9600, 2)), rate, "PCM_16")
    info = recordings.inspect(source)
    design = _design("bookshelf-2way")
    twin = build_twin(design, rate, oversampling=1)
    out = tmp_path / "out"
    out.mkdir()
    plan = render.plan_outputs([f.name for f in twin.filters], out, ".flac")
    result = render.render(twin, info, plan, "PCM_16", render.RenderSettings(block_frames=2000))
    written = summary.write_render_report(out, result, info, design, twin)
    data = json.loads((out / "summary.json").read_text())
    assert written[-1] == out / "summary.json" and data["report"] == "report.html"
    for entry in data["files"]:
        assert (out / entry["path"]).is_file() and entry["subtype"] == "PCM_16"
        peak = np.abs(sf.read(out / entry["path"])[0]).max()
        assert entry["peak_dbfs"] == pytest.approx(20 * np.log10(peak), abs=0.01)
    assert [(out / p).is_file() for p in data["figures"]] == [True, True]
    assert data["twin"]["oversampling"] == 1 and data["clipping"] == []
    assert data["input"]["frames"] == 9600 and data["caution"] == CAUTION
    page = (out / "report.html").read_text()
    assert page.count("data:image/png;base64,") == 2 and "PASS" in page
    # the circuit's noise over the twin's band (20 Hz to 20 kHz at 48 kHz), as design computes it
    from filtertwin.circuit.noise import design_noise

    noise = design_noise(design, (20.0, 20000.0))
    assert data["noise"]["filters"]["woofer"]["rms_v"] == pytest.approx(noise.filters[0].rms_v)
    assert data["noise"]["sum"]["snr_db"] == pytest.approx(noise.sum.snr_db)
    assert "Circuit noise" in page


def _as_built_lowpass(c1: str, c2: str, r2: str = "10k"):
    from filtertwin.circuit.design import build_design
    from filtertwin.circuit.spec import parse_design

    spec = {"filter": [{"name": "lp", "response": "lowpass", "stage": [
        {"topology": "unity", "R1": "10k", "R2": r2, "C1": c1, "C2": c2}]}]}  # fmt: skip
    return build_design(parse_design(spec, "<test>")).filters[0]


def test_a_near_butterworth_stage_is_called_close_to_butterworth_with_its_q_and_minus_3_db():
    import math

    import scipy.optimize
    import scipy.signal

    from filtertwin.report.design_text import resemblance

    f = _as_built_lowpass("22n", "10n", r2="12k")
    # textbook unity-gain Sallen-Key low-pass (Horowitz & Hill 3rd ed. 6.3):
    # w0 = 1 / sqrt(R1 R2 C1 C2), Q = sqrt(R1 R2 C1 C2) / (C2 (R1 + R2))
    r1, r2, c1, c2 = 10e3, 12e3, 22e-9, 10e-9
    w0 = 1 / math.sqrt(r1 * r2 * c1 * c2)
    q = math.sqrt(r1 * r2 * c1 * c2) / (c2 * (r1 + r2))
    # Butterworth Q of a 2nd-order section is 1/sqrt(2) (scipy.signal.butter's poles)
    high_pct = 100 * (q * math.sqrt(2) - 1)

    def level_db(f_hz: float) -> float:  # scipy.signal.freqs of the same textbook section
        _, h = scipy.signal.freqs([w0 * w0], [1, w0 / q, w0 * w0], worN=[2 * math.pi * f_hz])
        return 20 * math.log10(abs(h[0])) + 3.0

    f3 = scipy.optimize.brentq(level_db, w0 / (2 * math.pi) / 2, 2 * w0 / (2 * math.pi))
    text = resemblance(f)
    assert text.startswith(f"close to Butterworth, Q {high_pct:.0f} % high, -3 dB at ")
    shown = text.split("-3 dB at ")[1]
    assert float(shown.split()[0]) * (1e3 if "kHz" in shown else 1) == pytest.approx(f3, rel=1e-3)
    assert "Chebyshev" not in text


def test_a_stage_with_real_ripple_keeps_its_chebyshev_name():
    from filtertwin.report.design_text import resemblance

    # Chebyshev 1 dB 2nd order: Q = 0.9565 (Williams & Taylor table, from memory); with equal
    # resistors C1 / C2 = 4 Q^2 = 3.66 (common practice, REFERENCES.md)
    text = resemblance(_as_built_lowpass("36.6n", "10n"))
    assert text.startswith("Chebyshev 1.0") and "ripple" in text and "close to" not in text


def test_the_report_names_the_amplifier_parts_warnings_and_every_part():
    from filtertwin.circuit.design import build_design
    from filtertwin.circuit.spec import parse_design

    spec = {"amplifier": {"preset": "low-noise bipolar"},
            "parts": {"resistors": "E24", "capacitors": "E6"},
            "filter": [{"name": "big", "response": "lowpass", "stage": [
                {"topology": "unity", "R1": "2M2", "R2": "2M2", "C1": "200p", "C2": "100p"}]},
                {"name": "lp", "response": "lowpass", "alignment": "butterworth", "order": 4,
                 "corner": "1k"}]}  # fmt: skip
    design = build_design(parse_design(spec, "<test>"))
    overview, *_, parts = summary.design_sections(design)
    text = " ".join(overview.paragraphs)
    assert "Amplifier: low-noise bipolar" in text
    assert "resistors E24 +/-5 %" in text and "capacitors E6 +/-20 %" in text  # series defaults
    assert sum(p.startswith("Warning: big stage 1: R1 = 2M2") for p in overview.paragraphs) == 1
    ((header, rows),) = parts.tables
    assert header[:2] == ("designator", "value")
    assert len(rows) == sum(len(s.circuit.parts()) for f in design.filters for s in f.stages)


def test_the_crossover_plot_unwraps_its_phase_and_reaches_60_db_down(tmp_path):
    import math

    import matplotlib.pyplot as plt
    import scipy.signal

    from filtertwin.report import check_figures

    # LR4 sum = all-pass, phase falling 0 -> -360 degrees (Linkwitz 1976); scipy.signal.freqs
    b, a = scipy.signal.butter(2, 2 * math.pi * 2200.0, analog=True)
    w = 2 * math.pi * np.geomspace(10.0, 40000.0, 800)
    _, h = scipy.signal.freqs(b, a, worN=w)
    bh, ah = scipy.signal.butter(2, 2 * math.pi * 2200.0, "high", analog=True)
    _, hh = scipy.signal.freqs(bh, ah, worN=w)
    allpass = h * h + hh * hh
    deg = check_figures._unwrapped_deg(allpass)
    assert np.max(np.abs(np.diff(deg))) < 10  # no 360-degree jumps
    # the LR4 sum is the 2nd-order all-pass (1 - j a x - x^2) / (1 + j a x - x^2), a = sqrt 2,
    # x = f / fc (Linkwitz 1976): its phase is -2 atan2(a x, 1 - x^2), continuous in x
    x = w / (2 * math.pi * 2200.0)
    closed_form = -2 * np.degrees(np.arctan2(math.sqrt(2) * x, 1 - x * x))
    np.testing.assert_allclose(deg, closed_form, atol=1e-6)
    fig, ax = plt.subplots()
    check_figures._phase_axis(ax, [deg])
    lo, hi = ax.get_ylim()
    assert lo <= -360 and hi >= 0 and lo % 90 == 0 and hi % 90 == 0
    plt.close(fig)
    # common practice: show the ways well into their stopbands (an LR4 way falls 24 dB an
    # octave, Linkwitz 1976: 60 dB spans 2.5 octaves past the crossover)
    assert check_figures.CROSSOVER_FLOOR_DB >= 60


def test_the_tolerance_panels_measure_the_worst_build_where_the_check_does():
    from filtertwin.checks.tolerance import WORST_WINDOW_DB, run_tolerance
    from filtertwin.report import check_figures

    design = _design("studio-3way")
    result = run_tolerance(design, 200, seed=1)
    overall = max(check_figures.worst_here_db(ft) for ft in result.filters)
    # the red curve is the worst build overall: its largest deviation within 20 dB of the
    # passband, over the filters, is the deviation the check reports for it
    assert overall == pytest.approx(result.worst_deviation_db, rel=1e-9)
    assert WORST_WINDOW_DB == 20.0
    for ft in result.filters:  # no build of a filter deviates more than its panel says
        assert check_figures.worst_here_db(ft) <= ft.worst_deviation_db + 1e-12


def test_the_spectra_plot_names_the_roll_off_toward_nyquist():
    import matplotlib.pyplot as plt

    from filtertwin.digital.twin import build_twin, resampling_response
    from filtertwin.report import figures

    twin = build_twin(_design("bookshelf-2way"), 48000.0, oversampling=4)
    f = np.linspace(10.0, 24000.0, 4000)
    fig, (top, bottom) = plt.subplots(2)
    figures._mark_nyquist_rolloff((top, bottom), twin, f)
    (label,) = [t for t in bottom.get_legend_handles_labels()[1] if "Nyquist" in t]
    assert label == "resampling filters of the 4x twin roll off toward Nyquist (24 kHz)"
    # the shading starts where the resampling filters (filtertwin.digital.resample, the FIR of
    # scipy.signal.resample_poly) have lost 0.1 dB
    loss = -20 * np.log10(np.abs(resampling_response(4, f, twin.rate_hz, twin.resampling)))
    start = f[loss > figures.ROLLOFF_DB][0]
    (patch,) = bottom.patches
    assert patch.get_x() == pytest.approx(start)
    assert patch.get_x() + patch.get_width() == pytest.approx(24000.0)  # Nyquist of 48 kHz
    plt.close(fig)
