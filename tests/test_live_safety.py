import numpy as np
import pytest

from filtertwin.errors import UserInputError
from filtertwin.live.safety import MAX_CEILING_DBFS, OutputSafety, db_to_gain

RATE_HZ = 48000.0
BLOCK = 256


def run_in_blocks(safety: OutputSafety, signal: np.ndarray, frames: int = BLOCK) -> np.ndarray:
    out = signal.astype(np.float32, copy=True)
    for start in range(0, len(out), frames):
        safety.process(out[start : start + frames])
    return out


def sine(f_hz: float, amplitude: float, seconds: float, channels: int = 2) -> np.ndarray:
    t = np.arange(int(seconds * RATE_HZ)) / RATE_HZ
    wave = amplitude * np.sin(2 * np.pi * f_hz * t)
    return np.repeat(wave[:, None], channels, axis=1)


def test_output_starts_at_exact_silence_and_ramps_linearly_to_the_level():
    safety = OutputSafety(RATE_HZ, ramp_s=0.01)  # 480 frames from silence to 0 dB
    dc = np.full((1000, 1), 0.5, dtype=np.float32)
    out = run_in_blocks(safety, dc, frames=37)
    assert out[0, 0] == 0.0  # the stream starts muted (our rule: no sound before the ramp)
    # a straight line: gain n/480 at frame n (hand computation from the ramp rate)
    expected = 0.5 * np.minimum(np.arange(1000) / 480.0, 1.0)
    np.testing.assert_allclose(out[:, 0], expected, atol=1e-6)
    assert safety.gain == 1.0


def test_a_20_db_overdrive_never_exceeds_the_ceiling_on_any_sample():
    ceiling = db_to_gain(MAX_CEILING_DBFS)
    safety = OutputSafety(RATE_HZ, ramp_s=0.001)
    rng = np.random.default_rng(7)
    loud = np.concatenate(
        [
            sine(997.0, 10.0, 0.5),  # +20 dB over full scale
            10.0 * rng.standard_normal((24000, 2)),
            np.zeros((4800, 2)),
            np.eye(2)[np.arange(4800) % 2] * 10.0,  # alternating full-scale impulses
        ]
    )
    out = run_in_blocks(safety, loud)
    assert np.abs(out).max() <= ceiling  # -1 dBFS ceiling, every sample
    assert safety.limited_frames > 0


def test_the_ceiling_can_be_lowered_and_then_holds():
    safety = OutputSafety(RATE_HZ, ceiling_dbfs=-12.0, ramp_s=0.001)
    out = run_in_blocks(safety, sine(100.0, 3.0, 0.3))
    assert np.abs(out).max() <= db_to_gain(-12.0)
    assert np.abs(out).max() > db_to_gain(-12.1)  # the limiter does not pump far below it


def test_the_ceiling_cannot_be_raised_above_minus_1_dbfs():
    with pytest.raises(UserInputError, match=r"ceiling must be .* -1 dBFS .*got 0"):
        OutputSafety(RATE_HZ, ceiling_dbfs=0.0)
    safety = OutputSafety(RATE_HZ)
    with pytest.raises(UserInputError, match="cannot be raised or switched off"):
        safety.set_ceiling(6.0)


def test_signals_below_the_ceiling_pass_unchanged_after_the_ramp():
    safety = OutputSafety(RATE_HZ, ramp_s=0.001)
    quiet = sine(440.0, 0.5, 0.2)
    out = run_in_blocks(safety, quiet)
    settled = slice(int(0.001 * RATE_HZ) + 1, None)
    np.testing.assert_array_equal(out[settled], quiet.astype(np.float32)[settled])
    assert safety.limited_frames == 0


def test_the_limiter_releases_smoothly_after_a_peak():
    safety = OutputSafety(RATE_HZ, ramp_s=0.001, release_s=0.05)
    burst = np.concatenate([np.full((100, 1), 4.0), np.full((48000, 1), 0.5)])
    out = run_in_blocks(safety, burst)[100:, 0]
    steps = np.diff(out.astype(np.float64))
    assert np.all(steps >= 0)  # recovers without steps back down
    # exponential recovery, time constant 50 ms: after 5 time constants within 1 % of 0.5
    assert out[int(0.25 * RATE_HZ)] == pytest.approx(0.5, rel=0.01)


def test_nan_and_infinity_become_silence_and_are_counted():
    safety = OutputSafety(RATE_HZ, ramp_s=0.001)
    run_in_blocks(safety, np.full((200, 2), 0.1))
    bad = np.array([[np.nan, 0.1], [np.inf, -np.inf]], dtype=np.float32)
    safety.process(bad)
    assert np.all(np.isfinite(bad))
    assert bad[0, 0] == 0.0 and bad[1, 0] == 0.0 and bad[1, 1] == 0.0
    assert safety.nonfinite_samples == 3


def test_fade_out_reaches_silence_in_the_ramp_time():
    safety = OutputSafety(RATE_HZ, ramp_s=0.01)
    run_in_blocks(safety, np.full((1000, 1), 0.5))
    safety.fade_out()
    out = run_in_blocks(safety, np.full((500, 1), 0.5))
    assert out[479, 0] > 0  # gain 1 - 479/480 at frame 479: still fading
    assert out[480:, 0].max() == 0.0
    assert safety.is_silent()


def test_a_level_outside_the_range_is_refused():
    with pytest.raises(UserInputError, match=r"output level must be -60 to \+12 dB, got 20"):
        OutputSafety(RATE_HZ, level_db=20.0)
