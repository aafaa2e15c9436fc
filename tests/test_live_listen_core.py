"""The audio callback of `filtertwin listen`, driven directly with synthetic blocks (no stream)."""

import math

import numpy as np
import pytest
from scipy import signal

from filtertwin import examples
from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import load_design
from filtertwin.digital.engine import CascadeRunner
from filtertwin.digital.render import render_array
from filtertwin.digital.resample import StreamResampler, design_filter
from filtertwin.digital.twin import build_twin
from filtertwin.live import candidates as cands
from filtertwin.live import routing
from filtertwin.live.matching import no_match
from filtertwin.live.mixer import Selection
from filtertwin.live.ring import BlockRing
from filtertwin.live.safety import OutputSafety, db_to_gain, float32_at_or_below
from filtertwin.live.session import ListenSession
from filtertwin.live.stream import (
    BLOCKS,
    METER_FALL_DB_PER_S,
    STARVED_FRAMES,
    Oversampling,
    PreFilter,
    StreamCore,
)

RATE_HZ = 48000.0
BLOCK = 256


def load(name):
    return build_design(load_design(examples.resolve(name)))


def setup(names, channels=2, ways_out=False, ramp_s=0.001, level_db=0.0, oversampled=False):
    """A core fed from a ring, and its session, as prepare() makes them (no device); the
    twins at 1x (the mixing is what most tests here check) unless ``oversampled``, when
    they run at the factor render picks, resampled in the callback as listen runs them."""
    candidates = cands.make_candidates([(n, load(n)) for n in names])
    if oversampled:
        twins = cands.build_twins(candidates, RATE_HZ)
    else:
        twins = tuple(build_twin(c.design, RATE_HZ, oversampling=1) for c in candidates)
    sos, levels = cands.chains(twins)
    pair_ways = cands.output_ways(candidates) if ways_out else routing.STEREO_MIX
    factor = twins[0].oversampling  # as prepare() runs them: oversampled as render would
    runner = CascadeRunner(sos, channels, BLOCK * factor, levels, dtype=np.float32)
    over = Oversampling(factor, len(sos), channels, BLOCK) if factor > 1 else None
    ring = BlockRing(1, 64 * BLOCK, channels)
    core = StreamCore(
        n_chains=len(sos), channels=channels, block_frames=BLOCK, rate_hz=RATE_HZ,
        runner=runner, ring=ring, safety=OutputSafety(RATE_HZ, level_db, ramp_s=ramp_s),
        pairs=max(1, len(pair_ways)), oversampling=over,
    )  # fmt: skip
    core.prime()
    messages = []
    session = ListenSession(
        candidates, twins, core, core, RATE_HZ, no_match(len(candidates)), pair_ways,
        say=messages.append,
    )  # fmt: skip
    session.start(0.0)
    return core, session, twins, messages


def play(core, x):
    """Feed x (frames, channels) through the ring and the callback, block by block."""
    out = np.zeros((len(x), core.out_channels), dtype=np.float32)
    for start in range(0, len(x), BLOCK):
        core.ring.write(np.ascontiguousarray(x[None, start : start + BLOCK], dtype=np.float32))
        core.process(None, out[start : start + BLOCK], False)
    return out


def noise(frames, channels=2, amplitude=0.25, seed=7):
    rng = np.random.default_rng(seed)
    return (amplitude * rng.standard_normal((frames, channels))).astype(np.float32)


def test_the_callback_plays_the_selected_candidate_exactly_as_sosfilt_filters_it():
    core, _, twins, _ = setup(["candidate-butterworth", "candidate-bessel"])
    preroll = 8 * BLOCK  # silence while the ramp and the first crossfade complete
    x = np.concatenate([np.zeros((preroll, 2), np.float32), noise(20 * BLOCK)])
    out = play(core, x)
    # scipy.signal.sosfilt in float64, rounded once to float32: bit-identical
    expected = signal.sosfilt(twins[0].filters[0].sos, x.astype(np.float64), axis=0)
    np.testing.assert_array_equal(out, expected.astype(np.float32))
    assert core.counters[BLOCKS] == len(x) // BLOCK
    assert core.counters[STARVED_FRAMES] == 0


def test_a_mono_input_is_heard_on_both_output_channels():
    core, _, twins, _ = setup(["candidate-butterworth"], channels=1)
    x = np.concatenate([np.zeros((8 * BLOCK, 1), np.float32), noise(8 * BLOCK, channels=1)])
    out = play(core, x)
    expected = signal.sosfilt(twins[0].filters[0].sos, x[:, 0].astype(np.float64))
    np.testing.assert_array_equal(out[:, 0], expected.astype(np.float32))  # scipy sosfilt
    np.testing.assert_array_equal(out[:, 1], out[:, 0])


def test_frames_the_read_ahead_did_not_deliver_are_silence_and_counted():
    core, _, _, _ = setup(["candidate-butterworth"], ramp_s=60.0)
    x = noise(100)
    core.ring.write(x[None])
    out = np.ones((BLOCK, 2), dtype=np.float32)
    core.process(None, out, False)
    assert core.counters[STARVED_FRAMES] == BLOCK - 100
    assert not np.any(core.dry[100:])  # the missing frames enter the filters as silence
    assert not np.any(out[0])  # and the output starts muted


def test_a_switch_from_a_to_b_crossfades_without_a_step_larger_than_the_sines_allow():
    core, session, twins, _ = setup(["candidate-butterworth", "candidate-bessel"])
    # at 3 kHz the candidates differ by 60 degrees: an instant switch would step by ~0.2
    f_hz, amplitude = 3000.0, 0.3
    t = np.arange(80 * BLOCK) / RATE_HZ
    x = np.repeat(amplitude * np.sin(2 * np.pi * f_hz * t)[:, None], 2, axis=1)
    pieces = [play(core, x[: 20 * BLOCK])]
    for i, start in enumerate(range(20 * BLOCK, 80 * BLOCK, 10 * BLOCK)):
        session.handle(session_command("select", "2" if i % 2 == 0 else "1"), 1.0 + i)
        pieces.append(play(core, x[start : start + 10 * BLOCK]))
    y = np.concatenate(pieces)[10 * BLOCK :, 0].astype(np.float64)
    # steady-state amplitudes of A and B from the twins (scipy.signal.sosfreqz)
    gains = [abs(signal.sosfreqz(tw.filters[0].sos, [f_hz], fs=RATE_HZ)[1][0]) for tw in twins]
    a_amp, b_amp = (amplitude * g for g in gains)
    fade = round(0.030 * RATE_HZ)  # the default crossfade, 30 ms
    # hand derivation: |y[n+1]-y[n]| <= 2 pi f / fs * max(A) + (A_a + A_b) / N, 1 % margin
    bound = (2 * math.pi * f_hz / RATE_HZ * max(a_amp, b_amp) + (a_amp + b_amp) / fade) * 1.01
    assert np.max(np.abs(np.diff(y))) < bound
    # and the switches happened: B after the fifth, A alone after the last (scipy sosfilt)
    alone = [signal.sosfilt(tw.filters[0].sos, x[:, 0].astype(np.float64)) for tw in twins]
    y_all = np.concatenate(pieces)[:, 0]
    np.testing.assert_allclose(
        y_all[70 * BLOCK - 256 : 70 * BLOCK], alone[1][70 * BLOCK - 256 : 70 * BLOCK], atol=1e-6
    )
    np.testing.assert_allclose(y_all[-BLOCK:], alone[0][-BLOCK:], rtol=0, atol=1e-6)


def session_command(name, *args):
    from filtertwin.live.keys import Command

    return Command(name, tuple(args))


def test_an_overdriven_output_never_exceeds_the_ceiling():
    core, _, _, _ = setup(["synth-resonant-lowpass"], level_db=12.0)
    t = np.arange(60 * BLOCK) / RATE_HZ
    x = np.repeat(np.sin(2 * np.pi * 1200.0 * t)[:, None], 2, axis=1)  # 0 dBFS at the peak
    out = play(core, x)
    ceiling = float32_at_or_below(db_to_gain(-1.0))  # -1 dBFS, float32 rounding down
    assert np.max(np.abs(out)) <= ceiling
    assert np.max(np.abs(out)) > db_to_gain(-1.5)  # it was driven into the ceiling
    assert core.safety.limited_frames > 0


def test_meters_hold_each_chains_peak_and_let_it_fall():
    core, _, twins, _ = setup(["candidate-butterworth", "candidate-bessel"])
    x = noise(BLOCK)
    out = play(core, x)
    for k, twin in enumerate(twins):  # peak of each chain's block (scipy.signal.sosfilt)
        chain = signal.sosfilt(twin.filters[0].sos, x.astype(np.float64), axis=0)
        assert core.meters[k] == pytest.approx(np.max(np.abs(chain)), rel=1e-6)
    assert core.meters[2] == pytest.approx(np.max(np.abs(x)), rel=1e-7)  # the dry input
    assert core.meters[3] == np.max(np.abs(out))  # the output, after the safety
    held = core.meters.copy()
    core.ring.write(np.zeros((1, 64 * BLOCK, 2), np.float32))
    for _ in range(64):  # 64 blocks of silence later: fallen by 20 dB/s (our rule) per block
        core.process(None, np.zeros((BLOCK, 2), np.float32), False)
    fall_db = METER_FALL_DB_PER_S * 64 * BLOCK / RATE_HZ
    assert core.meters[2] == pytest.approx(held[2] * 10 ** (-fall_db / 20), rel=1e-9)


def test_ways_out_puts_each_way_on_its_own_pair_and_bypass_waits_for_a_confirmation():
    core, session, twins, messages = setup(["bookshelf-2way"], ways_out=True)
    assert core.out_channels == 4
    x = np.concatenate([np.zeros((8 * BLOCK, 2), np.float32), noise(8 * BLOCK, amplitude=0.1)])
    out = play(core, x)
    assert core.safety.limited_frames == 0  # below the ceiling: the output is the chains
    low = signal.sosfilt(twins[0].filters[0].sos, x.astype(np.float64), axis=0)
    high = signal.sosfilt(twins[0].filters[1].sos, x.astype(np.float64), axis=0)
    np.testing.assert_array_equal(out[:, 0:2], low.astype(np.float32))  # scipy sosfilt
    np.testing.assert_array_equal(out[:, 2:4], high.astype(np.float32))
    session.handle(session_command("bypass"), 10.0)
    assert session.selection.candidate == 0  # not yet: the warning comes first
    assert "full-range" in messages[-1] and "high (channels 3-4)" in messages[-1]
    session.handle(session_command("bypass"), 14.0)  # too late: warned again
    assert session.selection.candidate == 0
    session.handle(session_command("bypass"), 15.0)  # twice within 3 s
    assert session.selection.candidate is None
    dry = noise(24 * BLOCK, amplitude=0.1, seed=3)
    out = play(core, dry)
    np.testing.assert_array_equal(out[-BLOCK:, 2:4], dry[-BLOCK:])  # full range on the tweeter


def test_bypass_in_the_stereo_mix_needs_no_confirmation():
    core, session, _, _ = setup(["bookshelf-2way"])
    session.handle(session_command("bypass"), 1.0)
    assert session.selection == Selection(candidate=None)


def test_the_prefilter_equals_sosfilt_then_upfirdn_at_the_stream_rate():
    rec_rate, up, down = 51200.0, 15, 16
    twin = cands.build_twins(cands.make_candidates([("v", load("vibration-antialias"))]), rec_rate)[
        0
    ]
    runner = CascadeRunner(twin.chains(), 1, 1024, twin.clip_levels())
    prefilter = PreFilter(runner, StreamResampler(up, down, 2))
    x = noise(5000, channels=1).astype(np.float64)
    pieces = [prefilter(np.ascontiguousarray(x[i : i + 1024])) for i in range(0, 5000, 1024)]
    got = np.concatenate(pieces, axis=1)  # (sources, frames, channels)
    h = design_filter(up, down)  # scipy.signal.resample_poly's default filter
    filtered = signal.sosfilt(twin.filters[0].sos, x[:, 0])  # scipy sosfilt at 51.2 kHz
    expected_chain = signal.upfirdn(h, filtered, up, down)[: got.shape[1]]  # scipy upfirdn
    expected_dry = signal.upfirdn(h, x[:, 0], up, down)[: got.shape[1]]
    np.testing.assert_allclose(got[0, :, 0], expected_chain, rtol=0, atol=2e-7)  # float32
    np.testing.assert_allclose(got[1, :, 0], expected_dry, rtol=0, atol=2e-7)
    assert got.shape[1] == (5000 * up - 1) // down + 1


@pytest.mark.parametrize("frames", [BLOCK - 1, BLOCK + 1])
def test_a_block_of_an_unexpected_size_is_silence_and_counted(frames):
    core, _, _, _ = setup(["candidate-butterworth"])
    out = np.ones((frames, 2), dtype=np.float32)
    core.process(None, out, False)
    assert not np.any(out)
    assert core.counters[3] == 1


def test_oversampled_twins_play_what_the_offline_render_gives_with_the_dry_input_in_step():
    core, _, twins, _ = setup(["candidate-butterworth", "candidate-bessel"], oversampled=True)
    assert twins[0].oversampling == 16 and core.oversampling is not None
    delay = core.oversampling.delay_frames
    x = noise(40 * BLOCK)
    played = []
    for start in range(0, len(x), BLOCK):
        core.ring.write(np.ascontiguousarray(x[None, start : start + BLOCK]))
        core.ring.read_into(core.sources)
        played.append(core.oversampling.process(core.runner, core.dry)[0].copy())
        np.testing.assert_array_equal(  # the dry input, delayed as much as the chains
            core.dry, np.concatenate([np.zeros((delay, 2), np.float32), x])[start : start + BLOCK]
        )
    live = np.concatenate(played)[delay:].astype(np.float64)
    # the offline render in float64 (render's resamplers, scipy-checked in test_render.py),
    # delay taken out: equal to float32 rounding
    offline = render_array(twins[0], x.astype(np.float64), 4096)[0]
    np.testing.assert_allclose(live, offline[: len(live)], rtol=0, atol=2e-6)
