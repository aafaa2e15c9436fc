"""Slew-rate limiting of the twin: full-power bandwidth, slope, design warning, render."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import soundfile as sf

from filtertwin import cli
from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import parse_design
from filtertwin.digital.engine import CascadeRunner
from filtertwin.digital.twin import build_twin, slew_rate_needed_hz

SLOW = {"preset": "general-purpose bipolar"}  # 0.5 V/us, swing 13 V (sallenkey presets)
SLOW_SR = 0.5e6  # V/s
HIGHPASS = {
    "name": "rumble",
    "response": "highpass",
    "alignment": "butterworth",
    "order": 2,
    "corner": "20 Hz",
}


def make(full_scale: str, amplifier: dict | None = None):
    """An invented rumble high-pass: flat from well below the frequencies tested here."""
    data = {
        "filter": [HIGHPASS],
        "signal": {"full_scale": full_scale},
        "amplifier": amplifier or SLOW,
    }
    return build_design(parse_design(data, "<test>"))


def run_sine(twin, amplitude_fs: float, f_hz: float, seconds: float = 0.01):
    """A sine at the twin's rate through its sections with its limits; output and runner."""
    rate = twin.rate_hz
    t = np.arange(int(seconds * rate)) / rate
    x = (amplitude_fs * np.sin(2 * math.pi * f_hz * t))[:, np.newaxis]
    steps = twin.slew_steps()
    runner = CascadeRunner(twin.chains(), 1, len(x), twin.clip_levels(), slew_steps=steps)
    return runner.process(x)[0, :, 0].copy(), runner


def test_slew_steps_use_the_same_volts_to_full_scale_mapping_as_the_clip_levels():
    design = make("2 V")
    ft = build_twin(design, 48000.0, oversampling=2).filters[0]
    step = SLOW_SR / 2.0 / 96000.0  # slew rate / full scale / twin rate: FS per sample
    assert ft.stage_of_section == (1, 1)  # the network section, then the amplifier pole
    assert ft.slew_fs is not None
    np.testing.assert_allclose(ft.slew_fs, [math.inf, step], rtol=1e-15)
    np.testing.assert_allclose(ft.clip_fs, [math.inf, 13.0 / 2.0], rtol=1e-15)


def test_a_sine_above_the_full_power_bandwidth_at_full_swing_slews_and_one_below_does_not():
    design = make("13 V")
    twin = build_twin(design, 48000.0, oversampling=8)
    amplitude_v = 0.98 * 13.0
    # full-power bandwidth SR / (2 pi Vpeak) (Horowitz & Hill, The Art of Electronics, ch. 4)
    f_power = SLOW_SR / (2 * math.pi * amplitude_v)
    below, runner_below = run_sine(twin, 0.98, 0.9 * f_power)
    above, runner_above = run_sine(twin, 0.98, 1.1 * f_power)
    assert runner_below.slew_counts.sum() == 0
    assert runner_above.slew_counts.sum() > 0
    assert runner_below.clip_counts.sum() == runner_above.clip_counts.sum() == 0
    # below it the sine passes at its full level (a flat high-pass, as the analog model says)
    assert abs(np.max(np.abs(below[len(below) // 2 :])) / 0.98 - 1) < 0.01
    # the design's own figure is the same textbook one, at its full-scale output
    slew = design.filters[0].slew_demands(design.amplifier, 13.0)[0]
    assert math.isclose(slew.full_power_hz, SLOW_SR / (2 * math.pi * slew.peak_v), rel_tol=1e-12)
    assert abs(slew.peak_v - 13.0) < 0.01  # a flat pass band: full scale reaches the output


def test_the_slewed_waveform_is_a_triangle_whose_slope_is_the_slew_rate():
    design = make("13 V")
    twin = build_twin(design, 48000.0, oversampling=8)
    f_hz = 3 * SLOW_SR / (2 * math.pi * 13.0)  # three times the full-power bandwidth
    y, runner = run_sine(twin, 0.98, f_hz, seconds=0.02)
    slope_v_per_s = np.diff(y) * 13.0 * twin.rate_hz
    # the output moves at the slew rate, never faster (Horowitz & Hill, ch. 4)
    assert math.isclose(np.max(np.abs(slope_v_per_s)), SLOW_SR, rel_tol=1e-9)
    steady = y[len(y) // 2 :] * 13.0
    slewing = np.abs(np.abs(np.diff(steady) * twin.rate_hz) - SLOW_SR) < 1e-6 * SLOW_SR
    assert np.mean(slewing) > 0.9  # slewing all the time but at the turns (a sample each)
    # a triangle of slope SR at f has peak-to-peak SR / (2 f) (the shape H&H show); its
    # turns fall on samples, so its top and its bottom are each within a step of the ideal
    period = twin.rate_hz / f_hz
    starts = np.arange(0, len(steady) - period - 1, period).astype(int)
    ptp = np.array([np.ptp(steady[a : a + int(period) + 1]) for a in starts])
    one_step_v = SLOW_SR / twin.rate_hz
    assert np.all(np.abs(ptp - SLOW_SR / (2 * f_hz)) <= 2 * one_step_v)
    assert abs(np.mean(ptp) - SLOW_SR / (2 * f_hz)) <= one_step_v
    assert runner.slew_counts[0, 1] > 0 and runner.slew_counts[0, 0] == 0  # at the stage output


def test_auto_oversampling_runs_a_design_near_its_slew_limit_where_slopes_are_within_1_percent():
    # numpy's sinc as the reference: a sine's step per sample is 2 A sin(pi f/fs), its slope
    # times the period 2 pi f A / fs; their ratio is sinc(f / fs)
    needed = slew_rate_needed_hz(20000.0)
    assert math.isclose(float(np.sinc(20000.0 / needed)), 0.99, rel_tol=1e-12)
    design = make("10 V")
    auto = build_twin(design, 48000.0, oversampling="auto")
    assert auto.rate_hz >= needed and auto.oversampling == 8
    assert "near the slew limit: modelled at 384 kHz" in auto.filters[0].slew_note
    low = build_twin(design, 48000.0, oversampling=1).filters[0]
    short = 100 * (1 - np.sinc(20000.0 / 48000.0))
    assert f"falls {short:.1f} % short of its slope at 20 kHz" in low.slew_note
    fast = make("10 V", {"preset": "audio dual bipolar"})  # 10 V/us: far from its limit
    assert build_twin(fast, 48000.0, oversampling="auto").oversampling == 1
    assert build_twin(fast, 48000.0).filters[0].slew_note == ""


def test_the_design_table_warns_when_the_full_power_bandwidth_falls_inside_the_band(capsys):
    design = make("10 V")
    # full-power bandwidth SR / (2 pi Vpeak), 0.5 V/us at 10 V: 7.96 kHz (Horowitz & Hill)
    f_power_khz = SLOW_SR / (2 * math.pi * 10.0) / 1e3
    texts = [w.message for w in design.warnings if "full-power bandwidth" in w.message]
    assert len(texts) == 1 and f"= {f_power_khz:.3g} kHz" in texts[0]
    assert "a full-scale sine above 7.9" in texts[0]
    assert not any("full-power" in w.message for w in make("1 V").warnings)  # 79.6 kHz
    fast = make("10 V", {"preset": "audio dual bipolar"})  # 159 kHz
    assert not any("full-power" in w.message for w in fast.warnings)


def test_a_hot_15_khz_sine_through_a_slow_amplifier_is_reported_as_slewing(tmp_path, capsys):
    # the reported problem: a 15 kHz sine at 9 V peak, 0.5 V/us, said "clipping: none"
    design_file = tmp_path / "slow.toml"
    design_file.write_text(
        "# invented scenario\n"
        'title = "rumble filter on a slow amplifier (invented)"\n'
        '[amplifier]\npreset = "general-purpose bipolar"\n'
        '[signal]\nfull_scale = "10 V"\n'
        '[[filter]]\nname = "rumble"\nresponse = "highpass"\nalignment = "butterworth"\n'
        'order = 2\ncorner = "20 Hz"\n'
    )
    rate = 48000
    t = np.arange(rate // 2) / rate
    source = tmp_path / "sine.wav"
    sf.write(source, 0.9 * np.sin(2 * math.pi * 15000.0 * t), rate, subtype="FLOAT")
    out = tmp_path / "out"
    status = cli.main(["render", str(design_file), str(source), "--out", str(out), "--no-report"])
    printed = capsys.readouterr().out
    assert status == 1  # a slewing stage is a FAIL, as a clipping one is (README exit table)
    assert "amplifier slew rate: filter 'rumble' FAIL" in printed
    assert "slewing: filter 'rumble' stage 1:" in printed
    assert "slewing: none" not in printed
    assert "clipping: none" in printed  # 9 V is inside the 13 V swing: slewing, not clipping
    summary = json.loads((out / "summary.json").read_text())
    assert [(c["filter"], c["stage"]) for c in summary["slewing"]] == [("rumble", 1)]
    y, _ = sf.read(Path(out) / "rumble.wav")
    steady = y[rate // 8 : -rate // 8]
    level = np.abs(np.fft.rfft(steady * np.hanning(len(steady))))
    reference = np.abs(np.fft.rfft(0.9 * np.sin(2 * math.pi * 15000.0 * t[: len(steady)])
                                   * np.hanning(len(steady))))  # fmt: skip
    k = round(15000.0 * len(steady) / rate)
    drop_db = 20 * math.log10(level[k - 2 : k + 3].max() / reference[k - 2 : k + 3].max())
    # a slew-limited output carries less of the fundamental: a full triangle of slope SR at
    # 15 kHz peaks at SR / (4 f) = 8.33 V, its fundamental 8 / pi^2 of that (Fourier series
    # of a triangle wave): -2.5 dB re 9 V; the real waveform follows the sine near its peaks
    assert -2.6 < drop_db < -0.5


def test_the_live_status_line_and_summary_report_slewing_by_stage():
    from filtertwin.live import candidates as cands
    from filtertwin.live import routing
    from filtertwin.live.matching import no_match
    from filtertwin.live.ring import BlockRing
    from filtertwin.live.safety import OutputSafety
    from filtertwin.live.session import ListenSession
    from filtertwin.live.status import StatusReader, status_line, summary_lines
    from filtertwin.live.stream import StreamCore
    from test_live_listen_core import BLOCK, RATE_HZ, play

    design = make("10 V")
    candidates = cands.make_candidates([("slow", design)])
    twins = cands.build_twins(candidates, RATE_HZ)
    sos, levels = cands.chains(twins)
    # the runner as listen builds it: clip levels and slew steps of every chain
    runner = CascadeRunner(sos, 2, BLOCK, levels, dtype=np.float32,
                           slew_steps=cands.slew_steps(twins))  # fmt: skip
    core = StreamCore(
        n_chains=len(sos), channels=2, block_frames=BLOCK, rate_hz=RATE_HZ, runner=runner,
        ring=BlockRing(1, 64 * BLOCK, 2), safety=OutputSafety(RATE_HZ, -20.0, ramp_s=0.001),
        pairs=1,
    )  # fmt: skip
    core.prime()
    session = ListenSession(candidates, twins, core, core, RATE_HZ, no_match(1),
                            routing.STEREO_MIX, say=lambda _: None)  # fmt: skip
    session.start(0.0)
    reader = StatusReader(session, clock=lambda: 1.0)
    t = np.arange(16 * BLOCK) / RATE_HZ
    # 15 kHz at 9 V peak on a 0.5 V/us amplifier: its step per sample at 48 kHz, 2 x 9 V x
    # sin(pi 15/48) = 15 V, is above 0.5 V/us / 48 kHz = 10.4 V (Horowitz & Hill's slew rate)
    play(core, np.repeat(0.9 * np.sin(2 * np.pi * 15000.0 * t)[:, None], 2, axis=1))
    facts = reader.facts()
    assert len(facts.slewing) == 1 and facts.slewing[0].endswith("s1")
    assert " slew " + facts.slewing[0] in status_line(facts)
    summary = "\n".join(summary_lines(session, 1.0))
    assert "stage slewing at the amplifier slew rate: A " in summary
    assert "stage clipping at the amplifier swing: none" in summary
