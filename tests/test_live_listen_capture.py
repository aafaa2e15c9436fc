"""`filtertwin listen --adc-rate`: hearing what an ideal ADC captures of a sensor recording.

The read-ahead pre-filter is driven with synthetic recordings (no stream), the callback with
its output; one run goes through a real PortAudio stream on the JACK dummy server.
"""

import re
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from filtertwin import examples
from filtertwin.checks.alias import capture as offline_capture
from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import load_design
from filtertwin.cli import main
from filtertwin.digital.engine import CascadeRunner
from filtertwin.digital.resample import ratio
from filtertwin.errors import UserInputError
from filtertwin.live import candidates as cands
from filtertwin.live import capture
from filtertwin.live.keys import Command, command_for_key, parse_command
from filtertwin.live.matching import no_match
from filtertwin.live.ring import BlockRing
from filtertwin.live.safety import OutputSafety
from filtertwin.live.session import ListenSession
from filtertwin.live.status import StatusReader, status_line
from filtertwin.live.stream import Oversampling, PreFilter, StreamCore
from test_live_listen_cli import one_line_error, run
from test_live_listen_stream import (
    player_for,
    record,
    run_cli,
    signal_start,
    until_undisturbed,
)

REPO = Path(__file__).resolve().parents[1]
STREAM_HZ = 48000.0
CHUNK = 1024
BLOCK = 256
# sources of the pre-filter's output with one chain: chain, its capture, dry capture, dry
CHAIN, CHAIN_CAPTURE, DRY_CAPTURE, DRY = 0, 1, 2, 3


def load(name):
    return build_design(load_design(examples.resolve(name)))


def prefilter_for(recording_hz, adc_hz, name="vibration-antialias", stream_hz=STREAM_HZ):
    """The read-ahead pre-filter with an ADC capture, wired as `listen` wires it (mono)."""
    candidates = cands.make_candidates([(name, load(name))])
    twins = cands.build_twins(candidates, recording_hz)
    sos, levels = cands.chains(twins)
    up, down = ratio(recording_hz, stream_hz)
    width = len(sos) + 1
    direct = capture.resampler(up, down, width)
    plan = capture.plan_capture(adc_hz, recording_hz, stream_hz, "test recording")
    adc = capture.AdcCapture(plan, width, capture.lag_s(direct, recording_hz))
    factor = twins[0].oversampling  # as listen runs them: oversampled as render would
    over = Oversampling(factor, len(sos), 1, CHUNK, "linear", np.float64) if factor > 1 else None
    prefilter = PreFilter(CascadeRunner(sos, 1, CHUNK * factor, levels), direct, adc, over)
    return prefilter, plan, candidates, twins


def pre_filtered(prefilter, x, sizes=(CHUNK,)):
    """Feed x (1-D) in blocks of the given sizes, in turn; the outputs joined."""
    pieces, start, k = [], 0, 0
    while start < len(x):
        size = sizes[k % len(sizes)]
        pieces.append(prefilter(np.ascontiguousarray(x[start : start + size, None])))
        start += size
        k += 1
    return np.concatenate(pieces, axis=1)[:, :, 0].astype(np.float64)


def tone(f_hz, rate_hz, seconds, amplitude):
    return amplitude * np.sin(2 * np.pi * f_hz * np.arange(round(seconds * rate_hz)) / rate_hz)


def spectrum(y, rate_hz):
    """Amplitude spectrum with a Hann window: a sine on a bin reads its amplitude."""
    w = np.hanning(len(y))
    return np.fft.rfftfreq(len(y), 1 / rate_hz), np.abs(np.fft.rfft(y * w)) * 2 / w.sum()


def amplitude_at(y, rate_hz, f_hz):
    f, a = spectrum(y, rate_hz)
    return float(a[np.argmin(np.abs(f - f_hz))])


def folded(f_hz, fs_hz):
    """|f - k fs| for the k that brings it into [0, fs/2] (Oppenheim & Schafer 4.2)."""
    return min(abs(f_hz - k * fs_hz) for k in range(0, int(f_hz // fs_hz) + 2))


@pytest.mark.parametrize(
    ("recording_hz", "adc_hz", "f_hz"),
    [
        (51200.0, 8000.0, 6700.0),  # the demo file's supply spur A: interpolated ADC instants
        (51200.0, 8000.0, 13100.0),  # spur B, folded from the second image
        (48000.0, 8000.0, 9000.0),  # a whole-number ratio: every sixth sample
        (51200.0, 9600.0, 7000.0),  # 3/16 of the recording's rate
    ],
)
def test_a_tone_above_the_adc_nyquist_is_heard_at_its_alias_frequency(recording_hz, adc_hz, f_hz):
    prefilter, plan, _, _ = prefilter_for(recording_hz, adc_hz)
    x = tone(f_hz, recording_hz, 2.5, 0.1)
    y = pre_filtered(prefilter, x)
    window = slice(round(0.5 * STREAM_HZ), round(1.5 * STREAM_HZ))  # 1 s: 1 Hz bins
    f, a = spectrum(y[DRY_CAPTURE, window], STREAM_HZ)
    alias_hz = folded(f_hz, plan.adc_rate_hz)  # Oppenheim & Schafer 4.2: |f - k fs|
    assert alias_hz < plan.adc_rate_hz / 2 < f_hz
    assert abs(f[np.argmax(a)] - alias_hz) <= 1.0  # the FFT peak, within one 1 Hz bin
    # an ideal sampler keeps a folded sine's amplitude (Oppenheim & Schafer 4.2); the
    # resampling filters' passband ripple is far below 0.1 dB (common practice, no source)
    assert 20 * np.log10(np.max(a) / 0.1) == pytest.approx(0.0, abs=0.1)
    f_direct, a_direct = spectrum(y[DRY, window], STREAM_HZ)
    assert abs(f_direct[np.argmax(a_direct)] - f_hz) <= 1.0  # without the ADC: where it was


@pytest.mark.parametrize("f_hz", [6700.0, 9500.0])
def test_the_candidate_lowers_the_alias_by_the_analog_models_response(f_hz):
    # recorded at 204.8 kHz, four times the demo rate: there the bilinear twin follows the
    # analog model to 0.2-0.4 dB at these frequencies (its own fidelity is tested elsewhere)
    recording_hz = 204800.0
    prefilter, plan, candidates, _ = prefilter_for(recording_hz, 8000.0)
    y = pre_filtered(prefilter, tone(f_hz, recording_hz, 2.5, 0.25))
    window = slice(round(0.5 * STREAM_HZ), round(1.5 * STREAM_HZ))
    alias_hz = folded(f_hz, plan.adc_rate_hz)  # Oppenheim & Schafer 4.2
    with_filter = amplitude_at(y[CHAIN_CAPTURE, window], STREAM_HZ, alias_hz)
    without_filter = amplitude_at(y[DRY_CAPTURE, window], STREAM_HZ, alias_hz)
    measured_db = 20 * np.log10(with_filter / without_filter)
    h = candidates[0].design.filters[0].frequency_response(np.array([f_hz]))  # analog model
    expected_db = 20 * np.log10(abs(h[0]))
    print(f"{f_hz:g} Hz -> {alias_hz:g} Hz: {measured_db:.2f} dB, analog {expected_db:.2f} dB")
    assert expected_db < -40  # the filter does stop it
    assert measured_db == pytest.approx(expected_db, abs=1.0)


def test_the_capture_path_gives_the_same_samples_for_any_block_sizes():
    rng = np.random.default_rng(5)
    recording_hz = 51200.0
    x = 0.2 * rng.standard_normal(3 * round(recording_hz) // 2) + tone(6700, recording_hz, 1.5, 0.1)
    outputs = [pre_filtered(prefilter_for(recording_hz, 8000.0)[0], x, sizes)
               for sizes in ((CHUNK,), (17,), (509,), (17, 509, 1000))]  # fmt: skip
    n = min(y.shape[1] for y in outputs)
    assert n > 1.4 * STREAM_HZ
    for y in outputs[1:]:
        # float32 output: the same float64 samples, rounded once (a last-bit flip allowed)
        np.testing.assert_allclose(y[:, :n], outputs[0][:, :n], rtol=0, atol=1e-7)


def test_the_adc_samples_are_those_of_the_offline_alias_check():
    recording_hz, adc_hz = 51200.0, 8000.0
    x = np.random.default_rng(2).standard_normal(20000)
    plan = capture.plan_capture(adc_hz, recording_hz, STREAM_HZ, "test recording")
    adc = capture.AdcCapture(plan, 1)
    taken = np.concatenate(
        [adc.sampler.process(x[i : i + 509, None]) for i in range(0, 20000, 509)]
    )
    reference, rate_hz = offline_capture(x, recording_hz, adc_hz)  # filtertwin.checks.alias
    assert rate_hz == plan.adc_rate_hz
    lag = round(adc.sampler.lag_frames * plan.sample_up / plan.sample_down)  # 5 ADC samples
    n = len(taken) - lag
    np.testing.assert_allclose(taken[lag:, 0], reference[:n], rtol=0, atol=1e-12)


def test_below_the_adc_nyquist_the_capture_is_the_signal_itself_and_in_time_with_it():
    # the sampling theorem: a band-limited signal is recovered from its samples (Oppenheim &
    # Schafer 4.3); a capture one stream frame late would differ by 0.03 here
    recording_hz = 51200.0
    prefilter, _, _, _ = prefilter_for(recording_hz, 8000.0)
    x = tone(500, recording_hz, 1.0, 0.2) + tone(1200, recording_hz, 1.0, 0.1)
    y = pre_filtered(prefilter, x, (509,))[:, round(0.1 * STREAM_HZ) :]
    error = np.max(np.abs(y[DRY_CAPTURE] - y[DRY]))
    print(f"largest difference between capture and signal: {error:.2e}")
    # the bound: the resampling FIRs' passband ripple (common practice, no source)
    assert error < 2e-3
    assert np.max(np.abs(y[CHAIN_CAPTURE] - y[CHAIN])) < 2e-3


def callback_setup(recording_hz=51200.0, adc_hz=8000.0):
    """A callback fed by the pre-filter with the capture, and its session."""
    prefilter, plan, candidates, twins = prefilter_for(recording_hz, adc_hz)
    core = StreamCore(
        n_chains=1, channels=1, block_frames=BLOCK, rate_hz=STREAM_HZ, runner=None,
        ring=BlockRing(4, 64 * BLOCK, 1), safety=OutputSafety(STREAM_HZ, ramp_s=0.001),
        captures=2,
    )  # fmt: skip
    core.prime()
    said = []
    session = ListenSession(
        candidates, twins, core, prefilter, recording_hz, no_match(1), say=said.append,
        capture_plan=plan,
    )  # fmt: skip
    session.start(0.0)
    return core, session, said


def play(core, sources):
    """Run the callback over (sources, frames) float32, block by block; the left output."""
    frames = sources.shape[1] // BLOCK * BLOCK
    out = np.zeros((frames, 2), dtype=np.float32)
    for start in range(0, frames, BLOCK):
        core.ring.write(np.ascontiguousarray(sources[:, start : start + BLOCK, None], np.float32))
        core.process(None, out[start : start + BLOCK], False)
    return out[:, 0].astype(np.float64)


def test_capture_on_and_off_crossfades_between_the_signal_and_what_the_adc_captures():
    core, session, said = callback_setup()
    recording_hz = 51200.0
    spur = tone(6700, recording_hz, 4.0, 0.1)  # the demo file's supply spur A
    prefilter = session.swapper.host
    sources = pre_filtered(prefilter, spur)
    second = round(STREAM_HZ)
    session.handle(Command("bypass"), 0.5)
    heard = [play(core, sources[:, :second])]
    session.handle(command_for_key("c"), 1.0)  # the key c: capture on
    assert "as an ideal 8000 Hz ADC captures it" in said[-1]
    heard.append(play(core, sources[:, second : 2 * second]))
    np.testing.assert_array_equal(core.mixers[0].gains, [0, 0, 1, 0])  # the dry capture
    session.handle(Command("select", ("1",)), 2.0)
    heard.append(play(core, sources[:, 2 * second : 3 * second]))
    np.testing.assert_array_equal(core.mixers[0].gains, [0, 1, 0, 0])  # A's capture
    session.handle(parse_command("capture off"), 3.0)
    assert said[-1] == "now: A itself (ADC capture off)"
    heard.append(play(core, sources[:, 3 * second :]))
    np.testing.assert_array_equal(core.mixers[0].gains, [1, 0, 0, 0])
    half = round(STREAM_HZ / 2)  # the last half second of each: 2 Hz bins, fades long over
    levels = [{f: 20 * np.log10(amplitude_at(h[-half:], STREAM_HZ, f) + 1e-12)
               for f in (1300, 6700)} for h in heard]  # fmt: skip
    # bypass: the spur where it is; its capture: at 1.3 kHz (Oppenheim & Schafer 4.2)
    assert levels[0][6700] == pytest.approx(-20.0, abs=0.1) and levels[0][1300] < -90
    assert levels[1][1300] == pytest.approx(-20.0, abs=0.1) and levels[1][6700] < -90
    # A's capture: the alias lowered by the twin's response at 6.7 kHz (scipy.signal.sosfreqz
    # at the rate the twin runs; its resampling filters are flat there)
    twin = session.twins[0]
    h = signal.sosfreqz(twin.filters[0].sos, [6700.0], fs=twin.rate_hz)[1][0]
    assert levels[2][1300] == pytest.approx(-20 + 20 * np.log10(abs(h)), abs=0.1)
    assert levels[3][1300] < -120  # the filtered signal itself has nothing at 1.3 kHz


def test_the_status_line_says_when_the_adc_capture_is_heard():
    core, session, _ = callback_setup()
    reader = StatusReader(session)
    assert "| ADC off |" in status_line(reader.facts())
    session.handle(parse_command("capture on"), 1.0)
    assert re.match(
        r"A vibration-antialias \| ADC 8 kHz \| antialias ", status_line(reader.facts())
    )
    session.handle(parse_command("capture"), 2.0)  # no word: switch
    assert not session.capture_on


def test_capture_without_an_adc_rate_is_refused_in_one_line():
    from test_live_listen_core import setup

    _, session, _, said = setup(["candidate-butterworth"])
    session.handle(Command("capture"), 1.0)
    assert said[-1] == (
        "capture: there is no ADC capture to hear; start listen with --adc-rate HZ and a "
        "recording sampled faster than the ADC (--input)"
    )
    with pytest.raises(UserInputError, match=r"capture takes on, off, not 'maybe'"):
        parse_command("capture maybe")


def test_an_adc_rate_needing_large_factors_is_refused_naming_one_that_works():
    with pytest.raises(UserInputError, match=r"--adc-rate 7999 Hz is no simple fraction .* "
                       r"e\.g\. --adc-rate 8000$"):  # fmt: skip
        capture.plan_capture(7999.0, 51200.0, 48000.0, "vibration.wav")


def test_adc_rate_with_live_input_is_refused_before_any_device_is_touched(capsys):
    assert main(["listen", "vibration-antialias", "--adc-rate", "8k"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert "--adc-rate needs a recording sampled faster than the ADC (--input REC)" in err


@pytest.mark.parametrize("rate", ["51200", "96k"])
def test_an_adc_rate_not_below_the_recordings_rate_is_one_line(rate):
    done = run("listen", "vibration-antialias", "--input", "audio_samples/vibration_51k2.wav",
               "--adc-rate", rate)  # fmt: skip
    text = one_line_error(done)
    assert re.search(
        rf"--adc-rate {float(rate.replace('k', 'e3')):g} Hz is not below the rate of "
        r"audio_samples/vibration_51k2.wav \(51200 Hz\), so nothing would fold; give an ADC",
        text,
    ), text


@pytest.mark.live
@pytest.mark.parametrize(
    "recording",
    [
        "audio_samples/vibration_51k2.wav",  # the demo: another rate, resampled
        "audio_samples/program_48k.wav",  # stereo at the stream's rate: read ahead all the same
    ],
)
def test_a_scripted_run_with_the_adc_capture_exits_normally(tmp_path, jack_server, recording):
    script = tmp_path / "capture.txt"
    script.write_text("0.3 capture on\n2.6 capture off\n3.0 capture\n3.4 quit\n")
    done = run_cli(
        "listen", "vibration-antialias", "--input", recording, "--adc-rate", "8000",
        "--device", "system", "--script", str(script), "--duration", "20",
        jack_server=jack_server,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    print(done.stdout)
    assert "ADC capture (ADC 8 kHz, key c or 'capture on|off')" in done.stdout
    # the stopband note judges the twin at the factor it runs at (the fidelity line's)
    running = re.search(r"'antialias': twin at [0-9.]+ kHz \(oversampled (\d+)x", done.stdout)
    judged = re.search(r"'antialias' twin at (\d+)x the recording's rate", done.stdout)
    assert running and judged, done.stdout
    assert judged.group(1) == running.group(1)
    assert "now: A as an ideal 8000 Hz ADC captures it" in done.stdout
    assert "now: A itself (ADC capture off)" in done.stdout
    assert "| ADC 8 kHz |" in done.stdout  # a status line while the capture was heard
    assert "stopped (quit)" in done.stdout
    assert re.search(r"played \d+\.\d s: \d+ blocks of 256 frames", done.stdout)


@pytest.mark.live
def test_the_stream_plays_the_supply_spur_at_its_alias_while_the_capture_is_on(jack_server):
    wav = REPO / "audio_samples" / "vibration_51k2.wav"
    spur_hz, spur_amplitude = 6700.0, 0.015  # audio_samples/vibration_51k2.json (invented)
    actions = [(0.05, Command("bypass")), (1.0, Command("capture", ("on",)))]

    def run_once():
        player = player_for(["vibration-antialias"], wav, [], adc_rate_hz=8000.0)
        return (player, *record(player, 1.8, actions))

    def check(result):
        player, y, _, _ = result
        assert player.core.counters[2] == 0  # the read-ahead kept up
        y = y[signal_start(y) :, 0].astype(np.float64)
        before = y[round(0.3 * STREAM_HZ) : round(0.8 * STREAM_HZ)]  # 0.5 s: 2 Hz bins
        during = y[round(1.2 * STREAM_HZ) : round(1.7 * STREAM_HZ)]
        assert len(during) == round(0.5 * STREAM_HZ)
        db = [{f: 20 * np.log10(amplitude_at(part, STREAM_HZ, f)) for f in (1300.0, spur_hz)}
              for part in (before, during)]  # fmt: skip
        print(db)
        expected_db = 20 * np.log10(spur_amplitude)
        # bypass: the spur at 6.7 kHz; its capture at 8 kHz: at 1.3 kHz (Oppenheim & Schafer
        # 4.2), the same amplitude; 1 dB for the recording's noise in the bin
        assert db[0][spur_hz] == pytest.approx(expected_db, abs=1.0)
        assert db[1][1300.0] == pytest.approx(expected_db, abs=1.0)
        assert db[0][1300.0] < expected_db - 30 and db[1][spur_hz] < expected_db - 30

    until_undisturbed(run_once, check)
