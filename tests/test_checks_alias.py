"""Anti-alias check: sampling, folding, the filter's effect and the ADC requirement."""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
import soundfile as sf

from filtertwin.checks.alias import (
    alias_frequency,
    capture,
    check_alias,
    ideal_dynamic_range_db,
)
from filtertwin.checks.foldpower import plan_spectrum, spectrum
from filtertwin.circuit.design import design_filter, load
from filtertwin.errors import UserInputError
from filtertwin.files import recordings

SAMPLES = Path(__file__).resolve().parents[1] / "audio_samples"


def lowpass(order: int = 4, corner: str = "2 kHz"):
    """A Butterworth low-pass with an ideal amplifier (E96/E12 parts)."""
    return design_filter("aa", response="lowpass", alignment="butterworth", order=order,
                         corner=corner)  # fmt: skip


def tones(rate_hz: float, seconds: float, parts: list[tuple[float, float]]) -> np.ndarray:
    t = np.arange(int(rate_hz * seconds)) / rate_hz
    return sum(a * np.cos(2 * np.pi * f * t + 0.3 * i) for i, (f, a) in enumerate(parts))


def fitted_amplitudes(x: np.ndarray, rate_hz: float, f_hz: list[float]) -> np.ndarray:
    """Least-squares amplitudes of sinusoids at known frequencies (independent of the PSD)."""
    t = np.arange(len(x)) / rate_hz
    cols = [g(2 * np.pi * f * t) for f in f_hz for g in (np.cos, np.sin)]
    coef, *_ = np.linalg.lstsq(np.column_stack(cols), x, rcond=None)
    return np.hypot(coef[0::2], coef[1::2])


def test_ideal_dynamic_range_is_6_02_n_plus_1_76_db():
    # Bennett 1948; Kester, Data Conversion Handbook 2005, ch. 2: SNR = 6.02 N + 1.76 dB
    assert ideal_dynamic_range_db(16) == pytest.approx(98.09, abs=0.005)
    assert ideal_dynamic_range_db(12) == pytest.approx(6.02 * 12 + 1.76, abs=0.01)
    assert ideal_dynamic_range_db(24) == pytest.approx(6.02 * 24 + 1.76, abs=0.02)


def test_alias_frequency_is_the_distance_to_the_nearest_multiple_of_the_rate():
    # Oppenheim & Schafer 4.2: f appears at |f - k fs| for the k that brings it into [0, fs/2]
    fs = 8000.0
    f = np.array([0.0, 1000.0, 3999.0, 4001.0, 6700.0, 13100.0, 24612.5, 31999.0])
    k = np.arange(0, 10)[:, None]
    independent = np.min(np.abs(f[None, :] - k * fs), axis=0)
    np.testing.assert_allclose(alias_frequency(f, fs), independent)
    assert float(alias_frequency(6700.0, fs)) == 1300.0  # 8000 - 6700


@pytest.mark.parametrize("rate_hz", [48000.0, 44100.0])  # whole-number ratio 6, and 441/80
def test_a_captured_tone_above_nyquist_sits_at_its_alias_with_its_level(rate_hz):
    # Oppenheim & Schafer 4.2: sampling cos(2 pi f t + p) at fs gives cos(2 pi (f - k fs) n / fs
    # + p), k the nearest whole number to f / fs: 5300 Hz -> -2700 Hz, 11100 Hz -> +3100 Hz
    adc = 8000.0
    parts = [(500.0, 0.5), (5300.0, 0.1), (11100.0, 0.05)]
    x = tones(rate_hz, 1.0, parts)
    y, cap_rate = capture(x, rate_hz, adc)
    assert cap_rate == pytest.approx(adc, rel=1e-12)
    assert len(y) == pytest.approx(len(x) * adc / rate_hz, abs=1)
    inner = y[200:-200]  # the band-limited interpolator's edges
    t = (np.arange(len(y)) / cap_rate)[200:-200]
    signed = [(f - round(f / adc) * adc, a) for f, a in parts]
    expected = sum(a * np.cos(2 * np.pi * f * t + 0.3 * i) for i, (f, a) in enumerate(signed))
    # whole-number ratio: the very samples; otherwise Kaiser-sinc interpolation (~1e-5 error)
    tol = 1e-12 if rate_hz == 48000.0 else 1e-4
    np.testing.assert_allclose(inner, expected, atol=tol)


def test_welch_psd_integrates_to_the_variance():
    # Parseval's theorem for the Welch estimate (Welch 1967): sum(P) df = mean square
    rng = np.random.default_rng(5)
    rate = 48000.0
    x = 0.2 * rng.standard_normal(96000) + tones(rate, 2.0, [(1234.5, 0.3)]) + 0.7
    plan = plan_spectrum(len(x), rate, 2000.0, 150.0)
    f, p = spectrum(x, rate, plan)
    assert np.sum(p) * (f[1] - f[0]) == pytest.approx(np.var(x), rel=0.01)
    assert f[1] - f[0] <= 2000.0 / 100  # well under a hundredth of the band


def test_check_finds_tones_their_aliases_and_the_filtered_levels():
    rate, adc, band = 48000.0, 8000.0, 3500.0
    design = lowpass()
    filt = design.filters[0]
    parts = [(500.0, 0.5), (5300.0, 0.1), (11100.0, 0.05)]
    x = tones(rate, 2.0, parts)
    # 16 bits: the twin must follow the model down to 108 dB, which covers both spurs
    check, caps = check_alias(design, x, rate, adc, band_hz=band, bits=16)

    found = {round(c.source_hz / 100) * 100: c for c in check.components}
    assert set(found) == {5300, 11100}
    gain = np.abs(filt.frequency_response(np.array([500.0, 5300.0, 11100.0])))
    for (f, a), g in zip(parts[1:], gain[1:], strict=True):
        c = found[f]
        # Oppenheim & Schafer 4.2: lands at |f - k fs|
        assert c.alias_hz == pytest.approx(float(alias_frequency(f, adc)), abs=6)
        assert c.without_filter_peak == pytest.approx(a, rel=0.01)
        # level times |H(f)| of the analog model (the twin runs oversampled: within 0.3 dB)
        assert c.note == ""
        assert 20 * math.log10(c.with_filter_peak / (a * g)) == pytest.approx(0, abs=0.3)
        assert c.in_band

    # power folding into the band relative to the in-band tone: (0.1^2 + 0.05^2) / 0.5^2
    assert check.aliased_without_db == pytest.approx(10 * math.log10(0.0125 / 0.25), abs=0.05)
    with_filter = (0.1 * gain[1]) ** 2 + (0.05 * gain[2]) ** 2
    expected = 10 * math.log10(with_filter / (0.5 * gain[0]) ** 2)
    assert check.aliased_with_db == pytest.approx(expected, abs=0.3)

    # the captures themselves, measured by a least-squares fit at the alias frequencies
    skip = int(0.1 * adc)  # the filter's start-up transient
    amp = fitted_amplitudes(caps.with_filter[skip:], caps.rate_hz, [500.0, 2700.0, 3100.0])
    np.testing.assert_allclose(amp, [0.5 * gain[0], 0.1 * gain[1], 0.05 * gain[2]], rtol=0.04)
    amp = fitted_amplitudes(caps.without_filter, caps.rate_hz, [500.0, 2700.0, 3100.0])
    np.testing.assert_allclose(amp, [0.5, 0.1, 0.05], rtol=1e-6)


def test_requirement_is_attenuation_at_adc_rate_minus_band():
    design = lowpass()
    x = tones(48000.0, 0.5, [(500.0, 0.5), (9000.0, 0.1)])
    check, _ = check_alias(design, x, 48000.0, 8000.0, band_hz=3500.0, bits=8)
    # Oppenheim & Schafer 3rd ed. 4.2: a tone at f aliases to fs - f, so the first one to
    # fold into the band [0, 3500] comes from 8000 - 3500 = 4500 Hz (ADC rate minus band)
    assert check.attenuation_at_hz == 4500.0  # Oppenheim & Schafer 4.2
    # scipy.signal.butter analog prototype; the as-built E96/E12 parts are within 0.5 dB
    b, a = scipy.signal.butter(4, 2 * np.pi * 2000.0, analog=True)
    _, h = scipy.signal.freqs(b, a, worN=[2 * np.pi * 4500.0])
    assert check.attenuation_db == pytest.approx(-20 * np.log10(abs(h[0])), abs=0.5)
    assert check.required_db == pytest.approx(6.02 * 8 + 1.76, abs=0.01)  # Bennett; Kester
    assert not check.passed
    assert check.margin_db == pytest.approx(check.attenuation_db - check.required_db)
    # 20 dB asked and met at 4.5 kHz, but the band reaches beyond the 2 kHz corner: FAIL
    wide, _ = check_alias(design, x, 48000.0, 8000.0, band_hz=3500.0, reject_db=20.0)
    assert wide.margin_db > 0 and not wide.passed
    assert "beyond the filter's passband edge" in " ".join(wide.reasons())
    passing, _ = check_alias(design, x, 48000.0, 8000.0, band_hz=1900.0, reject_db=20.0)
    assert passing.passed and passing.margin_db == pytest.approx(passing.attenuation_db - 20)


def test_default_band_is_where_the_droop_reaches_its_limit_capped_at_the_adc_nyquist():
    x = tones(48000.0, 0.5, [(500.0, 0.5)])
    check, _ = check_alias(lowpass(corner="2 kHz"), x, 48000.0, 8000.0)
    # a Butterworth filter is 3.01 dB down at its corner (10 log10 2, Butterworth 1930)
    assert 1950.0 <= check.band_hz <= 2000.0
    assert check.droop.max_droop_db <= 3.0 and check.droop.passed
    check, _ = check_alias(lowpass(corner="6 kHz"), x, 48000.0, 8000.0)
    assert check.band_hz == 4000.0


def test_demo_vibration_file_shows_its_listed_spurs_folding_at_an_8_khz_adc():
    listing = json.loads((SAMPLES / "vibration_51k2.json").read_text())
    info = recordings.inspect(SAMPLES / "vibration_51k2.wav")
    x = recordings.read_all(info)[:, 0]
    check, _ = check_alias(load("vibration-antialias"), x, info.rate_hz, 8000.0)
    spurs = [c for c in listing["components"] if c["freq_hz"] > 4000.0]
    assert len(check.components) == len(spurs)
    for comp, spur in zip(sorted(check.components, key=lambda c: c.source_hz),
                          sorted(spurs, key=lambda s: s["freq_hz"]), strict=True):  # fmt: skip
        # tone frequencies and amplitudes: the generator's listing (invented demo data);
        # where they land: Oppenheim & Schafer 4.2
        assert comp.source_hz == pytest.approx(spur["freq_hz"], abs=4)
        f = spur["freq_hz"]
        assert comp.alias_hz == pytest.approx(abs(f - round(f / 8000.0) * 8000.0), abs=4)
        assert comp.without_filter_peak == pytest.approx(spur["amplitude_g"], rel=0.02)
    assert check.required_db == pytest.approx(98.09, abs=0.005)  # 16 bits: Bennett; Kester
    assert not check.passed  # a 6th-order filter at 2.2 kHz gives about 50 dB at 5.8 kHz
    assert check.aliased_with_db < check.aliased_without_db - 50


def test_bad_inputs_are_refused_with_what_and_how():
    design = lowpass()
    x = tones(48000.0, 0.5, [(500.0, 0.5)])
    with pytest.raises(UserInputError, match=r"band of interest 5000 Hz .* Nyquist .* 4000 Hz"):
        check_alias(design, x, 48000.0, 8000.0, band_hz=5000.0)
    with pytest.raises(UserInputError, match=r"ADC rate 96000 Hz is above the recording's rate"):
        check_alias(design, x, 48000.0, 96000.0)
    with pytest.raises(UserInputError, match=r"outside 1\.\.32"):
        check_alias(design, x, 48000.0, 8000.0, bits=0)
    with pytest.raises(UserInputError, match=r"too short .* at least"):
        check_alias(design, x[:500], 48000.0, 8000.0)
    with pytest.raises(UserInputError, match=r"is a high-pass"):
        check_alias(load("turntable-rumble"), x, 48000.0, 8000.0)
    with pytest.raises(UserInputError, match=r"several filters .* --filter"):
        check_alias(load("bookshelf-2way"), x, 48000.0, 8000.0)


def write_inputs(folder: Path) -> dict[str, str]:
    rate = 48000
    mono = folder / "sensor.wav"
    sf.write(mono, tones(rate, 0.5, [(500.0, 0.5), (6700.0, 0.1)]), rate, subtype="FLOAT")
    stereo = folder / "two.wav"
    sf.write(stereo, np.zeros((24000, 2)), rate, subtype="FLOAT")
    table = folder / "sensor.csv"
    values = tones(rate, 0.5, [(500.0, 1.0)])
    table.write_text("a,b\n" + "".join(f"{v:.6f},{v:.6f}\n" for v in values))
    design = folder / "aa.toml"
    design.write_text(
        '[[filter]]\nname = "aa"\nresponse = "lowpass"\nalignment = "butterworth"\n'
        'order = 4\ncorner = "2 kHz"\n'
    )
    return {"mono": str(mono), "stereo": str(stereo), "csv": str(table), "design": str(design)}


BAD_INPUTS = [
    (("mono", "--adc-rate", "8k", "--band", "5k"), r"band of interest 5000 Hz .* Nyquist"),
    (("mono", "--adc-rate", "96k"), r"ADC rate 96000 Hz is above the recording's rate 48000 Hz"),
    (("mono", "--adc-rate", "fast"), r"argument --adc-rate: cannot read 'fast'"),
    (("mono", "--adc-rate", "8k", "--bits", "40"), r"outside 1\.\.32"),
    (("mono", "--adc-rate", "8k", "--out", "aa.toml"), r"--out aa.toml: is a file"),
    (("stereo", "--adc-rate", "8k", "--segment", "5:2"), r"--segment: must be START:END"),
]


@pytest.mark.parametrize(("args", "pattern"), BAD_INPUTS)
def test_bad_command_line_input_gives_one_line_and_status_2(args, pattern, tmp_path, capsys,
                                                            monkeypatch):  # fmt: skip
    from filtertwin import cli

    inputs = write_inputs(tmp_path)
    monkeypatch.chdir(tmp_path)
    status = cli.main(["alias", inputs["design"], inputs[args[0]], *args[1:]])
    err = capsys.readouterr().err
    assert status == 2
    assert err.count("\n") == 1 and re.search(pattern, err), err


def test_command_line_json_run_writes_captures_and_figure(tmp_path):
    inputs = write_inputs(tmp_path)

    def run(*args: str) -> subprocess.Popen[str]:
        return subprocess.Popen(
            [sys.executable, "-m", "filtertwin", "alias", inputs["design"], *args],
            cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )  # fmt: skip

    good = run(inputs["mono"], "--adc-rate", "8k", "--json", "--reject-db", "20", "--out", "out")
    bad = run(inputs["mono"], "--adc-rate", "96k")

    out, err = good.communicate()
    assert good.returncode == 0, err  # PASS: 20 dB asked, about 38 dB at 6 kHz
    data = json.loads(out)
    assert set(data) >= {"adc_rate_hz", "band_hz", "required_db", "attenuation_db",
                         "margin_db", "pass", "aliased_db", "components"}  # fmt: skip
    assert set(data["aliased_db"]) >= {"without_filter", "with_filter"}
    assert set(data["components"][0]) >= {"source_hz", "alias_hz", "without_filter_db",
                                          "with_filter_db"}  # fmt: skip
    assert data["components"][0]["alias_hz"] == pytest.approx(1300.0, abs=4)  # 8000 - 6700
    for key in ("without_filter", "with_filter"):
        written = sf.info(tmp_path / data["files"][key])
        assert written.samplerate == 8000 and written.subtype == "FLOAT"
        assert written.frames == 4000  # 0.5 s at 8 kHz
    assert (tmp_path / data["files"]["figure"]).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not list((tmp_path / "out").glob(".*partial*"))  # no temporary left behind

    out, err = bad.communicate()
    assert bad.returncode == 2 and out == ""
    assert err.startswith("filtertwin: ADC rate 96000 Hz is above") and err.count("\n") == 1


def test_csv_input_gives_csv_captures_at_the_adc_rate(tmp_path, capsys, monkeypatch):
    from filtertwin import cli

    inputs = write_inputs(tmp_path)
    monkeypatch.chdir(tmp_path)
    argv = ["alias", inputs["design"], inputs["csv"], "--adc-rate", "8k", "--column", "b",
            "--rate", "48k", "--out", "csvout"]  # fmt: skip
    status = cli.main(argv)
    out = capsys.readouterr().out
    assert status == 1  # FAIL: 16 bits need 98 dB; a 4th-order filter gives 38 dB at 6 kHz
    assert "verdict: FAIL" in out
    back = recordings.inspect(tmp_path / "csvout" / "sensor-adc-with-filter.csv")
    assert back.rate_hz == pytest.approx(8000.0) and back.channel_names == ("b",)
    assert back.frames == 4000


def test_command_defaults_agree_with_the_check():
    import inspect

    from filtertwin.checks import suggest
    from filtertwin.commands import alias as command

    defaults = inspect.signature(check_alias).parameters
    assert command.DEFAULT_BITS == defaults["bits"].default
    assert command.DEFAULT_MAX_DROOP_DB == defaults["max_droop_db"].default
    assert command.DEFAULT_BUILDS == suggest.DEFAULT_BUILDS
    assert command.DEFAULT_MIN_YIELD_PCT == 100 * suggest.DEFAULT_MIN_YIELD


def test_command_suggests_designs_writes_the_first_and_records_the_column(
    tmp_path, capsys, monkeypatch
):
    from filtertwin import cli

    inputs = write_inputs(tmp_path)
    monkeypatch.chdir(tmp_path)
    argv = ["alias", inputs["design"], inputs["csv"], "--adc-rate", "8k", "--column", "b",
            "--rate", "48k", "--band", "1k", "--reject-db", "60", "--max-droop", "1",
            "--suggest", "--save-suggestion", "better.toml", "--json", "--out", "o"]  # fmt: skip
    status = cli.main(argv)
    data = json.loads(capsys.readouterr().out)
    assert status in (0, 1)
    assert data["column"] == "b"
    assert data["suggestions"] and data["saved_design"] == "better.toml"
    first = data["suggestions"][0]
    # the design written passes the same check (exit status 0)
    again = cli.main(["alias", "better.toml", inputs["csv"], "--adc-rate", "8k", "--column", "b",
                      "--rate", "48k", "--band", "1k", "--reject-db", "60", "--max-droop", "1",
                      "--out", "o2"])  # fmt: skip
    out = capsys.readouterr().out
    assert again == 0 and "verdict: PASS" in out, out
    assert first["yield"] >= 0.99  # the default target, 99 % of the builds
    # never overwritten
    assert cli.main(argv) == 2
    assert "exists" in capsys.readouterr().err


def test_csv_messages_name_the_real_cause_and_an_option_that_exists(tmp_path, capsys,
                                                                    monkeypatch):  # fmt: skip
    from filtertwin import cli

    inputs = write_inputs(tmp_path)
    monkeypatch.chdir(tmp_path)
    comma = tmp_path / "comma.csv"
    comma.write_text("time;value\n0,000;0,25\n0,001;0,30\n0,002;0,10\n")
    table = recordings.inspect(comma)  # a decimal comma is read, not refused
    assert table.rate_hz == pytest.approx(1000.0)  # 1 ms steps
    np.testing.assert_array_equal(recordings.read_all(table)[:, 0], [0.25, 0.30, 0.10])
    # an uneven logger clock: one step 5 % long (common practice: 1 % is the default limit)
    rate = 8000.0
    t = np.arange(4000) / rate
    t[2000:] += 0.05 / rate
    values = np.sin(2 * np.pi * 500 * t)
    jitter = tmp_path / "jitter.csv"
    jitter.write_text(
        "time,v\n" + "".join(f"{a:.9f},{b:.6f}\n" for a, b in zip(t, values, strict=True))
    )
    argv = ["alias", inputs["design"], str(jitter), "--adc-rate", "2000", "--band", "900",
            "--reject-db", "10"]  # fmt: skip
    assert cli.main(argv) == 2
    err = capsys.readouterr().err
    assert "--max-jitter" in err
    assert cli.main([*argv, "--max-jitter", "10"]) in (0, 1)  # the option exists and works
