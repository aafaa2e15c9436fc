"""Spectra (streaming Welch), figures, the HTML report and the summary of a render."""

from __future__ import annotations

import base64
import json
import re

import numpy as np
import pytest
import scipy.signal
import soundfile as sf

from filtertwin import examples, recordings, render, units
from filtertwin.design import build_design
from filtertwin.report import figures, summary
from filtertwin.report.html import CAUTION, ReportSection, render_html, write_html
from filtertwin.spec import load_design
from filtertwin.spectra import WelchAccumulator, segment_frames
from filtertwin.twin import build_twin

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
        f"Filter '{f.name}': stages and parts" for f in design.filters
    ]
    for section, f in zip(sections, design.filters, strict=True):
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
    from filtertwin.noise import design_noise

    noise = design_noise(design, (20.0, 20000.0))
    assert data["noise"]["filters"]["woofer"]["rms_v"] == pytest.approx(noise.filters[0].rms_v)
    assert data["noise"]["sum"]["snr_db"] == pytest.approx(noise.sum.snr_db)
    assert "Circuit noise" in page
