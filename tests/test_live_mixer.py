import numpy as np
import pytest

from filtertwin.errors import UserInputError
from filtertwin.live.mixer import (
    SUM,
    Candidate,
    Layout,
    Selection,
    SelectionMixer,
    target_gains,
)

RATE_HZ = 48000.0
LAYOUT = Layout(
    candidates=(
        Candidate("A", ("low", "mid", "high"), level_gain=0.5),
        Candidate("B", ("full",), level_gain=2.0),
    ),
    bypass_gain=0.8,
)


def run(mixer: SelectionMixer, chains: np.ndarray, dry: np.ndarray, frames: int) -> np.ndarray:
    out = np.empty_like(dry)
    for start in range(0, dry.shape[0], frames):
        end = start + frames
        mixer.process(chains[:, start:end], dry[start:end], out[start:end])
    return out


def test_a_candidate_is_heard_with_all_its_ways_at_its_level_matching_gain():
    gains = target_gains(LAYOUT, Selection(candidate=0))
    np.testing.assert_array_equal(gains, [0.5, 0.5, 0.5, 0.0, 0.0])
    gains = target_gains(LAYOUT, Selection(candidate=1))
    np.testing.assert_array_equal(gains, [0.0, 0.0, 0.0, 2.0, 0.0])


def test_bypass_hears_only_the_dry_input():
    np.testing.assert_array_equal(
        target_gains(LAYOUT, Selection(candidate=None)), [0, 0, 0, 0, 0.8]
    )


def test_solo_and_mute_pick_ways_of_the_selected_candidate():
    solo = target_gains(LAYOUT, Selection(candidate=0, solo="mid"))
    np.testing.assert_array_equal(solo, [0.0, 0.5, 0.0, 0.0, 0.0])
    muted = target_gains(LAYOUT, Selection(candidate=0, muted=frozenset({"low"})))
    np.testing.assert_array_equal(muted, [0.0, 0.5, 0.5, 0.0, 0.0])
    assert SUM == "sum"


def test_a_way_the_candidate_lacks_is_refused_naming_its_ways():
    with pytest.raises(UserInputError, match="candidate B has no 'low' way; its ways are full"):
        target_gains(LAYOUT, Selection(candidate=1, solo="low"))


def test_a_candidate_number_out_of_range_is_refused_naming_the_candidates():
    with pytest.raises(UserInputError, match="no candidate number 3; the candidates are A, B"):
        target_gains(LAYOUT, Selection(candidate=2))


def sine_pair(f_hz: float, frames: int) -> tuple[np.ndarray, float, float]:
    """Two chains: A = 0.5 sin, B = 0.4 sin shifted by 1 rad (a filtered copy)."""
    t = np.arange(frames) / RATE_HZ
    a = 0.5 * np.sin(2 * np.pi * f_hz * t)
    b = 0.4 * np.sin(2 * np.pi * f_hz * t + 1.0)
    chains = np.stack([a, b])[:, :, None].astype(np.float32)
    return chains, 0.5, 0.4


F_HZ = 1000.0


def click_bound(fade_s: float, amp_a: float, amp_b: float) -> float:
    """Largest sample-to-sample step of y = (1-w) a + w b for sines a, b at F_HZ.

    Hand derivation (triangle inequality): a sinusoid of amplitude A moves at most
    2*pi*f/rate*A per sample, and the linear fade adds at most (A_a + A_b)/N per sample.
    0.1 % margin for float32 rounding.
    """
    omega = 2 * np.pi * F_HZ / RATE_HZ
    fade_frames = max(1, round(fade_s * RATE_HZ))
    return (omega * max(amp_a, amp_b) + (amp_a + amp_b) / fade_frames) * 1.001


def largest_step_after_switch(fade_s: float, polarity_b: float = 1.0) -> float:
    frames = 9600
    chains, _, _ = sine_pair(F_HZ, frames)
    chains[1] *= polarity_b
    dry = np.zeros((frames, 1), dtype=np.float32)
    mixer = SelectionMixer(2, RATE_HZ, fade_s=fade_s, initial=np.array([1.0, 0.0, 0.0]))
    out = np.empty_like(dry)
    for start in range(0, frames, 250):
        if start == 2000:  # the switch, during the sine
            mixer.request(np.array([0.0, 1.0, 0.0]))
        end = start + 250
        mixer.process(chains[:, start:end], dry[start:end], out[start:end])
    return float(np.abs(np.diff(out[:, 0].astype(np.float64))).max())


def test_an_a_b_switch_during_a_sine_makes_no_click():
    assert largest_step_after_switch(0.030) <= click_bound(0.030, 0.5, 0.4)


def test_an_instant_switch_would_click_so_the_click_test_can_fail():
    assert largest_step_after_switch(0.0, polarity_b=-1.0) > 2 * click_bound(0.030, 0.5, 0.4)


def test_the_crossfade_completes_in_the_stated_frames_with_gains_summing_to_one():
    mixer = SelectionMixer(2, RATE_HZ, fade_s=0.030, initial=np.array([1.0, 0.0, 0.0]))
    assert mixer.fade_frames == 1440  # 30 ms at 48 kHz
    chains = np.zeros((2, 1, 1), dtype=np.float32)
    out = np.empty((1, 1), dtype=np.float32)
    mixer.request(np.array([0.0, 1.0, 0.0]))
    history = []
    for _ in range(1500):
        mixer.process(chains, out, out)
        history.append(mixer.gains)
    g = np.array(history)
    # linear: gain of B is k/N after k frames; equal-gain: A + B == 1 at every frame
    np.testing.assert_allclose(g[:, 1], np.minimum(np.arange(1, 1501) / 1440, 1.0), atol=1e-12)
    np.testing.assert_allclose(g[:, 0] + g[:, 1], 1.0, atol=1e-12)
    assert g[1438, 1] < 1.0 and g[1439, 1] == 1.0 and g[1439, 0] == 0.0
    assert not mixer.fading


def test_a_new_request_during_a_fade_continues_from_where_the_gains_are():
    mixer = SelectionMixer(2, RATE_HZ, fade_s=0.010, initial=np.array([1.0, 0.0, 0.0]))
    ones = np.ones((2, 960, 1), dtype=np.float32)
    dry = np.full((960, 1), 3.0, dtype=np.float32)
    out = np.empty_like(dry)
    mixer.request(np.array([0.0, 1.0, 0.0]))
    mixer.process(ones[:, :240], dry[:240], out[:240])  # half way
    np.testing.assert_allclose(mixer.gains, [0.5, 0.5, 0.0], atol=1e-12)
    mixer.request(np.array([0.0, 0.0, 1.0]))  # to the dry input, worth 3.0
    mixer.process(ones[:, 240:], dry[240:], out[240:])
    steps = np.abs(np.diff(out[:, 0].astype(np.float64)))
    assert steps.max() <= 2.0 / 480 * 1.001  # (3 - 1) over 480 frames, no jump
    assert out[-1, 0] == 3.0


def test_output_does_not_depend_on_the_block_size():
    rng = np.random.default_rng(3)
    chains = rng.standard_normal((3, 3000, 2)).astype(np.float32)
    dry = rng.standard_normal((3000, 2)).astype(np.float32)
    outputs = []
    for frames in (3000, 509, 17):
        mixer = SelectionMixer(3, RATE_HZ, initial=np.array([1.0, 0, 0, 0]))
        mixer.request(np.array([0, 0.7, 0.3, 0.2]))
        outputs.append(run(mixer, chains, dry, frames))
    np.testing.assert_array_equal(outputs[0], outputs[1])
    np.testing.assert_array_equal(outputs[0], outputs[2])


def test_gains_of_the_wrong_length_are_refused():
    mixer = SelectionMixer(2, RATE_HZ)
    with pytest.raises(ValueError, match=r"gains must have shape \(3,\), got \(2,\)"):
        mixer.request(np.array([1.0, 0.0]))


def test_a_mono_mix_fills_both_columns_of_its_pair_and_leaves_the_others():
    rng = np.random.default_rng(5)
    chains = rng.standard_normal((2, 64, 1)).astype(np.float32)
    dry = rng.standard_normal((64, 1)).astype(np.float32)
    mixer = SelectionMixer(2, RATE_HZ, initial=np.array([0.5, 0.25, 0.125]))
    out = np.full((64, 6), 7.0, dtype=np.float32)
    mixer.process(chains, dry, out, first_column=2, columns=2)
    # numpy float64 weighted sum, additions in the kernel's order, rounded once to float32
    c = chains.astype(np.float64)
    expected = (0.125 * dry[:, 0].astype(np.float64) + 0.5 * c[0, :, 0] + 0.25 * c[1, :, 0]).astype(
        np.float32
    )
    np.testing.assert_array_equal(out[:, 2], expected)
    np.testing.assert_array_equal(out[:, 3], expected)
    np.testing.assert_array_equal(out[:, [0, 1, 4, 5]], 7.0)


def test_columns_outside_the_output_or_not_fitting_the_channels_are_refused():
    mixer = SelectionMixer(1, RATE_HZ)
    chains = np.zeros((1, 4, 2), dtype=np.float32)
    out = np.zeros((4, 6), dtype=np.float32)
    with pytest.raises(ValueError, match=r"columns 5 to 7 of an output with 6 for 2 channel"):
        mixer.process(chains, chains[0], out, first_column=5, columns=2)
    with pytest.raises(ValueError, match=r"columns 0 to 3 of an output with 6 for 2 channel"):
        mixer.process(chains, chains[0], out, columns=3)
