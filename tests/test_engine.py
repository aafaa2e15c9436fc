"""Tests of the compiled cascade runner against scipy.signal.sosfilt and independent loops."""

import tracemalloc

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal

from filtertwin.digital.engine import (
    FLUSH_BELOW,
    CascadeRunner,
    sosfilt_blocks,
    validate_sos,
    warm_up,
)


def random_chains(seed: int, count: int) -> list[np.ndarray]:
    """Stable SOS arrays of random order, corner and type, designed by scipy.signal."""
    rng = np.random.default_rng(seed)
    chains = []
    for _ in range(count):
        order = int(rng.integers(1, 9))
        corner = float(rng.uniform(0.02, 0.8))
        btype = "low" if rng.random() < 0.5 else "high"
        if rng.random() < 0.5:
            chains.append(signal.butter(order, corner, btype, output="sos"))
        else:
            ripple_db = float(rng.uniform(0.1, 3.0))
            chains.append(signal.cheby1(order, ripple_db, corner, btype, output="sos"))
    return chains


def noise(frames: int, channels: int, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).standard_normal((frames, channels)) * 0.5


def scipy_state(zf: np.ndarray) -> np.ndarray:
    """scipy's axis-0 state (n, 2, channels) in the runner's layout (n, channels, 2)."""
    return zf.transpose(0, 2, 1)


def run_in_blocks(runner: CascadeRunner, x: np.ndarray, sizes: list[int]) -> np.ndarray:
    pieces, start, i = [], 0, 0
    while start < len(x):
        size = min(sizes[i % len(sizes)], len(x) - start)
        pieces.append(runner.process(x[start : start + size]).copy())
        start += size
        i += 1
    return np.concatenate(pieces, axis=1)


CHAINS = random_chains(seed=7, count=5)


def test_chains_used_here_differ_in_section_count() -> None:
    assert len({len(sos) for sos in CHAINS}) > 2


def test_whole_buffer_float64_is_bit_identical_to_scipy_sosfilt_for_every_chain() -> None:
    x = noise(3000, channels=3)
    runner = CascadeRunner(CHAINS, channels=3, max_frames=len(x))
    y = runner.process(x)
    for chain, sos in enumerate(CHAINS):
        # scipy.signal.sosfilt, transposed direct form II in float64
        np.testing.assert_array_equal(y[chain], signal.sosfilt(sos, x, axis=0))


@pytest.mark.parametrize(
    "sizes",
    [[1], [17], [509], [0, 31, 0, 0, 97]],
    ids=["blocks of 1", "blocks of 17", "blocks of 509", "blocks of 0 between others"],
)
def test_blockwise_output_and_state_are_bit_identical_to_scipy_sosfilt(sizes: list[int]) -> None:
    x = noise(2000, channels=2, seed=1)
    runner = CascadeRunner(CHAINS, channels=2, max_frames=max(sizes))
    y = run_in_blocks(runner, x, sizes)
    for chain, sos in enumerate(CHAINS):
        zi = np.zeros((len(sos), 2, 2))
        expected, zf = signal.sosfilt(sos, x, axis=0, zi=zi)  # scipy.signal.sosfilt
        np.testing.assert_array_equal(y[chain], expected)
        np.testing.assert_array_equal(runner.state[chain, : len(sos)], scipy_state(zf))


@settings(max_examples=30, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    n_chains=st.integers(1, 6),
    channels=st.integers(1, 3),
    sizes=st.lists(st.integers(0, 300), min_size=1, max_size=5).filter(any),
)
def test_any_chains_channels_and_block_split_are_bit_identical_to_scipy_sosfilt(
    seed: int, n_chains: int, channels: int, sizes: list[int]
) -> None:
    chains = random_chains(seed, n_chains)
    x = noise(600, channels, seed)
    runner = CascadeRunner(chains, channels, max_frames=max(sizes))
    y = run_in_blocks(runner, x, sizes)
    for chain, sos in enumerate(chains):
        np.testing.assert_array_equal(y[chain], signal.sosfilt(sos, x, axis=0))  # scipy


def test_float32_blocks_are_within_1e_6_relative_of_scipy_float64() -> None:
    x = noise(1500, channels=2, seed=2).astype(np.float32)
    runner = CascadeRunner(CHAINS, channels=2, max_frames=256, dtype=np.float32)
    y = run_in_blocks(runner, x, [256])
    assert y.dtype == np.float32
    for chain, sos in enumerate(CHAINS):
        expected = signal.sosfilt(sos, x.astype(np.float64), axis=0)  # scipy.signal.sosfilt
        np.testing.assert_allclose(y[chain], expected, rtol=1e-6, atol=0)
        # IEEE 754 round-to-nearest of the float64 result: exactly what float32 can hold
        np.testing.assert_array_equal(y[chain], expected.astype(np.float32))


def test_hot_swap_keeps_state_like_scipy_with_zi_carried_across_the_change() -> None:
    before, after = random_chains(seed=11, count=2)
    assert len(before) == len(after)
    x = noise(1200, channels=2, seed=3)
    runner = CascadeRunner([before], channels=2, max_frames=600)
    first = runner.process(x[:600]).copy()
    runner.set_chain(0, after)
    second = runner.process(x[600:]).copy()

    zi = np.zeros((len(before), 2, 2))
    expected_first, zf = signal.sosfilt(before, x[:600], axis=0, zi=zi)  # scipy.signal.sosfilt
    expected_second, _ = signal.sosfilt(after, x[600:], axis=0, zi=zf)
    np.testing.assert_array_equal(first[0], expected_first)
    np.testing.assert_array_equal(second[0], expected_second)


def test_hot_swap_of_one_chain_leaves_the_other_chains_alone() -> None:
    low, high = signal.butter(4, 0.1, output="sos"), signal.butter(4, 0.3, "high", output="sos")
    x = noise(800, channels=1, seed=4)
    runner = CascadeRunner([low, high], channels=1, max_frames=400)
    runner.process(x[:400])
    runner.set_chain(1, signal.butter(4, 0.2, "high", output="sos"))
    y = runner.process(x[400:])
    np.testing.assert_array_equal(y[0], signal.sosfilt(low, x, axis=0)[400:])  # scipy.sosfilt


def clamped_cascade_reference(
    sos: np.ndarray, levels: np.ndarray, x: np.ndarray
) -> tuple[list[np.ndarray], list[int]]:
    """Each section as its direct form I difference equation (Oppenheim & Schafer 6.3), the
    output clamped to +/- level and fed back clamped. Independent of the runner's structure."""
    stage_outputs, counts = [], []
    values = x
    for (b0, b1, b2, _, a1, a2), level in zip(sos, levels, strict=True):
        y = np.zeros_like(values)
        x1 = x2 = y1 = y2 = 0.0
        count = 0
        for n, xn in enumerate(values):
            v = b0 * xn + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2
            if v > level:
                v, count = level, count + 1
            elif v < -level:
                v, count = -level, count + 1
            y[n] = v
            x1, x2, y1, y2 = xn, x1, v, y1
        stage_outputs.append(y)
        counts.append(count)
        values = y
    return stage_outputs, counts


def unity_dc_sections(sos: np.ndarray) -> np.ndarray:
    """Each section scaled to gain 1 at DC, as in a chain of unity-gain active stages."""
    scaled = sos.copy()
    scaled[:, :3] *= (sos[:, 3:].sum(axis=1) / sos[:, :3].sum(axis=1))[:, None]
    return scaled


def test_swing_limiting_keeps_every_clipped_stage_within_its_level_and_counts_clamps() -> None:
    sos = unity_dc_sections(signal.cheby1(8, 1.0, 0.15, output="sos"))
    levels = np.array([0.6, np.inf, 0.5, 0.7])
    x = noise(1500, channels=2, seed=5) * 2.0
    references = [clamped_cascade_reference(sos, levels, x[:, ch]) for ch in range(2)]
    for k in range(1, len(sos) + 1):
        runner = CascadeRunner([sos[:k]], channels=2, max_frames=333, clip_levels=[levels[:k]])
        y = run_in_blocks(runner, x, [333])[0]
        if np.isfinite(levels[k - 1]):
            assert np.max(np.abs(y)) <= levels[k - 1]
        for ch in range(2):
            stage_outputs, _ = references[ch]
            # independent direct form I loop with clamping between sections
            np.testing.assert_allclose(y[:, ch], stage_outputs[k - 1], rtol=0, atol=1e-9)
    expected_counts = np.sum([counts for _, counts in references], axis=0)
    np.testing.assert_array_equal(runner.clip_counts[0], expected_counts)
    assert np.all(runner.clip_counts[0][np.isfinite(levels)] > 0)
    assert runner.clip_counts[0][1] == 0


def test_infinite_clip_levels_leave_output_identical_to_scipy_sosfilt() -> None:
    sos = CHAINS[0]
    x = noise(700, channels=2, seed=6)
    runner = CascadeRunner([sos], 2, 700, clip_levels=[np.full(len(sos), np.inf)])
    expected = signal.sosfilt(sos, x, axis=0)  # scipy.signal.sosfilt
    np.testing.assert_array_equal(runner.process(x)[0], expected)
    assert not runner.clip_counts.any()


def test_set_chain_without_levels_keeps_the_chain_clip_levels() -> None:
    sos = signal.butter(4, 0.2, output="sos")
    levels = np.array([0.3, 0.3])
    x = noise(400, channels=1, seed=8) * 3.0
    runner = CascadeRunner([sos], 1, 400, clip_levels=[levels])
    runner.set_chain(0, signal.butter(4, 0.25, output="sos"))
    y = runner.process(x)[0]
    expected, _ = clamped_cascade_reference(signal.butter(4, 0.25, output="sos"), levels, x[:, 0])
    np.testing.assert_allclose(y[:, 0], expected[-1], rtol=0, atol=1e-9)  # direct form I loop
    runner.set_chain(0, sos, clip_levels=np.full(2, np.inf))
    runner.reset()
    expected = signal.sosfilt(sos, x, axis=0)  # scipy.signal.sosfilt
    np.testing.assert_array_equal(runner.process(x)[0], expected)


@pytest.mark.parametrize("where", [150, 300], ids=["inside the block", "its last frame"])
def test_nan_block_is_reset_zeroed_counted_and_the_next_block_matches_a_fresh_runner(
    where: int,
) -> None:
    x = noise(601, channels=2, seed=9)
    runner = CascadeRunner(CHAINS, channels=2, max_frames=301)
    runner.process(x[:300])
    bad = x[300:].copy()
    bad[where, 1] = np.nan
    y = runner.process(bad)
    assert runner.nonfinite_resets == 1
    assert not y.any()
    assert not runner.state.any()
    after = noise(300, channels=2, seed=10)
    fresh = CascadeRunner(CHAINS, channels=2, max_frames=301)
    np.testing.assert_array_equal(runner.process(after), fresh.process(after))


def test_inf_input_is_caught_even_where_clamping_would_hide_it() -> None:
    sos = signal.butter(4, 0.2, output="sos")
    x = noise(256, channels=1, seed=12)
    x[10, 0] = np.inf
    runner = CascadeRunner([sos], 1, 256, clip_levels=[np.full(2, 0.9)])
    y = runner.process(x)
    assert runner.nonfinite_resets == 1
    assert not y.any()
    assert not runner.state.any()


def test_overflowing_chain_is_reset_alone_and_the_other_chain_stays_exact() -> None:
    stable = signal.butter(4, 0.1, output="sos")
    unstable = np.array([[1.0, 0.0, 0.0, 1.0, -4.0, 4.0]])  # double pole at z = 2: grows as 2^n
    x = noise(2048, channels=2, seed=13)
    runner = CascadeRunner([stable, unstable], channels=2, max_frames=2048)
    y = runner.process(x)
    assert runner.nonfinite_resets == 1
    np.testing.assert_array_equal(y[0], signal.sosfilt(stable, x, axis=0))  # scipy.sosfilt
    assert not y[1].any()
    assert not runner.state[1].any()


def test_silence_after_noise_returns_to_exact_zeros_within_the_decay_time_of_the_poles() -> None:
    sos = signal.butter(6, 0.02, output="sos")
    block = 256
    runner = CascadeRunner([sos], channels=2, max_frames=block)
    runner.process(noise(block, channels=2, seed=14))
    pole_radius = np.max(np.abs(signal.sos2zpk(sos)[1]))  # decay per sample: max |pole|
    # frames for r^n to fall from 1e3 to FLUSH_BELOW, doubled for repeated-pole terms
    # (Oppenheim & Schafer 3.4: modes of the impulse response decay as r^n)
    frames_needed = 2 * np.log(FLUSH_BELOW / 1e3) / np.log(pole_radius)
    silence = np.zeros((block, 2))
    blocks_needed = int(np.ceil(frames_needed / block))
    outputs = [runner.process(silence).copy() for _ in range(blocks_needed)]
    assert np.any(outputs[0])
    assert not runner.state.any()
    assert not runner.process(silence).any()  # zero state and zero input: exactly 0.0


def test_reset_makes_the_runner_behave_like_a_fresh_one() -> None:
    x = noise(500, channels=2, seed=15)
    runner = CascadeRunner(CHAINS, channels=2, max_frames=500)
    runner.process(x)
    runner.reset()
    np.testing.assert_array_equal(runner.process(x), CascadeRunner(CHAINS, 2, 500).process(x))


def test_state_assignment_starts_from_given_initial_conditions_like_scipy_zi() -> None:
    sos = CHAINS[1]
    x = noise(300, channels=2, seed=16)
    zi = np.random.default_rng(17).standard_normal((len(sos), 2, 2))
    runner = CascadeRunner([sos], channels=2, max_frames=300)
    runner.state[0] = scipy_state(zi)
    expected, zf = signal.sosfilt(sos, x, axis=0, zi=zi)  # scipy.signal.sosfilt
    np.testing.assert_array_equal(runner.process(x)[0], expected)
    np.testing.assert_array_equal(runner.state[0], scipy_state(zf))


def test_state_copied_between_runners_continues_the_stream_exactly() -> None:
    sos = CHAINS[0]
    x = noise(600, channels=2, seed=24)
    first = CascadeRunner([sos], channels=2, max_frames=300)
    first.process(x[:300])
    second = CascadeRunner([CHAINS[1], sos], channels=2, max_frames=300)
    second.state[1, : len(sos)] = first.state[0, : len(sos)]
    expected = signal.sosfilt(sos, x, axis=0)[300:]  # scipy.signal.sosfilt
    np.testing.assert_array_equal(second.process(x[300:])[1], expected)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_process_inplace_matches_process(dtype: type[np.floating]) -> None:
    sos = CHAINS[2]
    x: np.ndarray = noise(777, channels=2, seed=18).astype(dtype)
    expected = CascadeRunner([sos], 2, 777, dtype=dtype).process(x)[0].copy()
    block = x.copy()
    CascadeRunner([sos], 2, 777, dtype=dtype).process_inplace(block)
    np.testing.assert_array_equal(block, expected)


def test_process_into_given_out_accepts_blocks_longer_than_max_frames() -> None:
    x = noise(1000, channels=2, seed=19)
    out = np.empty((len(CHAINS), 1000, 2))
    runner = CascadeRunner(CHAINS, channels=2, max_frames=16)
    assert runner.process(x, out=out) is out
    for chain, sos in enumerate(CHAINS):
        np.testing.assert_array_equal(out[chain], signal.sosfilt(sos, x, axis=0))  # scipy


def test_non_contiguous_blocks_give_the_same_output() -> None:
    wide = noise(400, channels=4, seed=20)
    runner = CascadeRunner(CHAINS[:2], channels=2, max_frames=400)
    y = runner.process(wide[:, ::2])
    for chain, sos in enumerate(CHAINS[:2]):
        expected = signal.sosfilt(sos, wide[:, ::2], axis=0)  # scipy.signal.sosfilt
        np.testing.assert_array_equal(y[chain], expected)


def peak_bytes_allocated(action, repeats: int) -> int:
    """Peak of memory allocated (and traced) while ``action`` runs ``repeats`` times."""
    tracemalloc.start()
    try:
        baseline, _ = tracemalloc.get_traced_memory()
        tracemalloc.reset_peak()
        for _ in range(repeats):
            action()
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return peak - baseline


def test_process_with_buffer_output_allocates_nothing_after_the_first_call() -> None:
    x = noise(64, channels=2, seed=21)
    runner = CascadeRunner(CHAINS, channels=2, max_frames=64)
    runner.process(x)
    # project rule: no buffer allocated on the real-time path (ARCHITECTURE.md, engine).
    # The probe is seen to work on an action that allocates one output's worth; a call does
    # make a few hundred bytes of short-lived Python objects (numba's argument handling).
    assert peak_bytes_allocated(lambda: runner.process(x).copy(), 10) >= x.nbytes * len(CHAINS)
    assert peak_bytes_allocated(lambda: runner.process(x), 200) < x.nbytes


@pytest.mark.parametrize("shape", [(300,), (300, 3)])
def test_sosfilt_blocks_is_bit_identical_to_scipy_sosfilt_with_zi(shape: tuple) -> None:
    sos = CHAINS[3]
    rng = np.random.default_rng(22)
    x = rng.standard_normal(shape)
    zi = rng.standard_normal((len(sos), 2, *shape[1:]))
    y, zf = sosfilt_blocks(sos, x, zi)
    expected, expected_zf = signal.sosfilt(sos, x, axis=0, zi=zi)  # scipy.signal.sosfilt
    np.testing.assert_array_equal(y, expected)
    np.testing.assert_array_equal(zf, expected_zf)


def test_sosfilt_blocks_defaults_agree_with_a_fresh_runner() -> None:
    x = noise(200, channels=2, seed=23)
    y, _ = sosfilt_blocks(CHAINS[0], x)
    np.testing.assert_array_equal(y, CascadeRunner(CHAINS[:1], 2, 200).process(x)[0])


def test_validate_sos_returns_float64_rows_of_six() -> None:
    sos = validate_sos(signal.butter(5, 0.3, output="sos").tolist())
    assert sos.dtype == np.float64
    assert sos.shape == (3, 6)


@pytest.mark.parametrize(
    ("sos", "error", "match"),
    [
        (np.ones((2, 5)), ValueError, r"shape \(n_sections >= 1, 6\)"),
        (np.ones(6), ValueError, r"shape \(n_sections >= 1, 6\)"),
        (np.ones((0, 6)), ValueError, r"shape \(n_sections >= 1, 6\)"),
        ([[1, 0, 0, 2, 0, 0]], ValueError, r"a0 \(column 3\) must be 1.*row 0 has a0=2.0"),
        ([[1, 0, np.nan, 1, 0, 0]], ValueError, "must be finite"),
        (np.ones((1, 6), dtype=complex), TypeError, "real numbers"),
    ],
)
def test_validate_sos_names_the_broken_rule(sos: object, error: type, match: str) -> None:
    with pytest.raises(error, match=match):
        validate_sos(sos)


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"chains": []}, ValueError, "at least one SOS"),
        ({"channels": 0}, ValueError, "channels must be >= 1"),
        ({"channels": 2.0}, TypeError, "channels must be an int"),
        ({"max_frames": 0}, ValueError, "max_frames must be >= 1"),
        ({"dtype": np.int16}, ValueError, "dtype must be float32 or float64"),
        ({"clip_levels": [np.ones(4)]}, ValueError, r"one array per chain \(2\)"),
        ({"clip_levels": [np.ones(3), np.ones(2)]}, ValueError, r"chain 0 must have shape \(4,\)"),
        ({"clip_levels": [np.ones(4), -np.ones(2)]}, ValueError, "chain 1 must be > 0"),
    ],
)
def test_runner_rejects_bad_arguments_naming_the_rule(
    kwargs: dict, error: type, match: str
) -> None:
    args = {
        "chains": [signal.butter(8, 0.1, output="sos"), signal.butter(4, 0.1, output="sos")],
        "channels": 2,
        "max_frames": 64,
    }
    with pytest.raises(error, match=match):
        CascadeRunner(**(args | kwargs))


def test_process_rejects_blocks_that_do_not_fit() -> None:
    runner = CascadeRunner(CHAINS[:2], channels=2, max_frames=64)
    with pytest.raises(ValueError, match="more than max_frames=64"):
        runner.process(np.zeros((65, 2)))
    with pytest.raises(ValueError, match=r"block must have shape \(frames, 2\)"):
        runner.process(np.zeros((64, 3)))
    with pytest.raises(TypeError, match="dtype float32, this runner was built for float64"):
        runner.process(np.zeros((64, 2), dtype=np.float32))
    with pytest.raises(TypeError, match="block must be a 2-D numpy array"):
        runner.process(np.zeros((64, 2, 1)))
    with pytest.raises(ValueError, match=r"out must have shape \(2, 64, 2\)"):
        runner.process(np.zeros((64, 2)), out=np.zeros((2, 63, 2)))
    with pytest.raises(ValueError, match=r"out must have shape \(2, 64, 2\)"):
        runner.process(np.zeros((64, 2)), out=np.zeros((1, 64, 2)))
    with pytest.raises(ValueError, match="one chain, this one has 2"):
        runner.process_inplace(np.zeros((64, 2)))


def test_set_chain_rejects_mismatches() -> None:
    runner = CascadeRunner(CHAINS[:2], channels=2, max_frames=64)
    with pytest.raises(ValueError, match="index must be 0 <= index < 2"):
        runner.set_chain(2, CHAINS[0])
    wrong = signal.butter(2 * len(CHAINS[0]) + 2, 0.1, output="sos")
    with pytest.raises(ValueError, match=f"needs {len(CHAINS[0])} sections for chain 0"):
        runner.set_chain(0, wrong)


def test_warm_up_leaves_only_float32_and_float64_kernels() -> None:
    warm_up()
    runner = CascadeRunner(CHAINS[:1], channels=1, max_frames=8, dtype=np.float32)
    with pytest.raises(TypeError, match="dtype float64, this runner was built for float32"):
        runner.process(np.zeros((8, 1)))


# --- slew-rate limiting ---------------------------------------------------------------------


def slewed_cascade_reference(
    sos: np.ndarray, levels: np.ndarray, steps: np.ndarray, x: np.ndarray
) -> tuple[np.ndarray, list[int], list[int]]:
    """Each section as its direct form I difference equation (Oppenheim & Schafer 6.3), its
    output clamped to +/- level, then moved at most one step from the previous output, and
    fed back limited: the discrete slew model written out independently of the runner.
    Returns the last output and, per section, the clipped and the slewed sample counts."""
    clipped, slewed = [], []
    values = x
    for (b0, b1, b2, _, a1, a2), level, step in zip(sos, levels, steps, strict=True):
        y = np.zeros_like(values)
        x1 = x2 = y1 = y2 = 0.0
        n_clip = n_slew = 0
        for n, xn in enumerate(values):
            target = b0 * xn + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2
            held = min(max(target, -level), level)
            if abs(held - y1) > step:
                v = y1 + step if held > y1 else y1 - step
                n_slew += 1
            else:
                v = held
                n_clip += abs(target) > level
            y[n] = v
            x1, x2, y1, y2 = xn, x1, v, y1
        clipped.append(n_clip)
        slewed.append(n_slew)
        values = y
    return values, clipped, slewed


SLEW_SOS = unity_dc_sections(signal.butter(6, 0.2, output="sos"))
SLEW_LEVELS = np.array([np.inf, 0.8, 0.9])
SLEW_STEPS = np.array([0.05, np.inf, 0.04])


def test_slew_limiting_matches_the_written_out_model_and_counts_by_section() -> None:
    x = noise(2000, channels=2, seed=31) * 2.0
    runner = CascadeRunner([SLEW_SOS], 2, 2000, clip_levels=[SLEW_LEVELS], slew_steps=[SLEW_STEPS])
    y = runner.process(x)[0]
    clipped, slewed = np.zeros(3, int), np.zeros(3, int)
    for ch in range(2):
        expected, n_clip, n_slew = slewed_cascade_reference(
            SLEW_SOS, SLEW_LEVELS, SLEW_STEPS, x[:, ch]
        )
        # independent direct form I loop of the documented model (Oppenheim & Schafer 6.3)
        np.testing.assert_allclose(y[:, ch], expected, rtol=0, atol=1e-9)
        clipped += n_clip
        slewed += n_slew
    np.testing.assert_array_equal(runner.slew_counts[0], slewed)
    np.testing.assert_array_equal(runner.clip_counts[0], clipped)
    assert slewed[0] > 0 and slewed[2] > 0 and slewed[1] == 0
    assert np.max(np.abs(np.diff(y, axis=0))) <= 0.04 + 1e-12  # the last section's step


def test_slewing_from_rail_to_rail_matches_the_model_in_every_lane_of_a_group() -> None:
    # one lane group of four channels: a square wave that slews from rail to rail and
    # clips there (its output leaves and reaches the rails, where the loop that leaves the
    # swing clamp out must hand over to the full one), a sine that never slews, noise that
    # slews now and then, and silence
    levels, steps = np.array([np.inf, 2.0, 0.9]), np.array([0.05, np.inf, 0.01])
    n = 3000
    t = np.arange(n)
    x = np.stack(
        [
            np.where((t // 250) % 2 == 0, 3.0, -3.0),
            0.3 * np.sin(2 * np.pi * t / 400),
            noise(n, channels=1, seed=34)[:, 0] * 2.0,
            np.zeros(n),
        ],
        axis=1,
    )
    runner = CascadeRunner([SLEW_SOS], 4, n, clip_levels=[levels], slew_steps=[steps])
    y = runner.process(x)[0]
    clipped, slewed = np.zeros(3, int), np.zeros(3, int)
    for ch in range(4):
        expected, n_clip, n_slew = slewed_cascade_reference(SLEW_SOS, levels, steps, x[:, ch])
        # independent direct form I loop of the documented model (Oppenheim & Schafer 6.3)
        np.testing.assert_allclose(y[:, ch], expected, rtol=0, atol=1e-9)
        clipped += n_clip
        slewed += n_slew
    np.testing.assert_array_equal(runner.slew_counts[0], slewed)
    np.testing.assert_array_equal(runner.clip_counts[0], clipped)
    # the square wave's last stage slews 1.8 in 180 samples, then holds at the rail for 70
    assert clipped[2] > 0 and slewed[2] > 0
    assert np.max(y[:, 0]) == levels[2] and np.min(y[:, 0]) == -levels[2]


def test_limits_that_are_never_reached_leave_output_bit_identical_to_scipy_sosfilt() -> None:
    x = noise(1531, channels=2, seed=32)
    levels = [np.full(len(sos), 1e3) for sos in CHAINS]
    steps = [np.full(len(sos), 1e2) for sos in CHAINS]  # < 2 x level: the slewing kernel runs
    runner = CascadeRunner(CHAINS, 2, 1531, clip_levels=levels, slew_steps=steps)
    y = runner.process(x)
    for k, sos in enumerate(CHAINS):
        # scipy.signal.sosfilt, bit for bit
        np.testing.assert_array_equal(y[k], signal.sosfilt(sos, x, axis=0))
    assert not runner.slew_counts.any() and not runner.clip_counts.any()


@pytest.mark.parametrize("sizes", [[17], [509], [17, 0, 509, 0, 4]], ids=["17", "509", "mixed"])
def test_slew_limited_output_in_chunks_equals_one_shot_output(sizes: list[int]) -> None:
    x = noise(3001, channels=3, seed=33) * 2.0
    chains = [SLEW_SOS, CHAINS[1]]
    levels = [SLEW_LEVELS, np.full(len(CHAINS[1]), 1.5)]
    steps = [SLEW_STEPS, np.full(len(CHAINS[1]), 0.1)]
    whole = CascadeRunner(chains, 3, 3001, clip_levels=levels, slew_steps=steps)
    expected = whole.process(x).copy()
    chunked = CascadeRunner(chains, 3, 509, clip_levels=levels, slew_steps=steps)
    got, start, i = [], 0, 0
    while start < len(x):
        size = min(sizes[i % len(sizes)], len(x) - start)
        got.append(chunked.process(x[start : start + size]).copy())  # includes length 0
        start += size
        i += 1
    # chunked equals one-shot (the habit of scipy's and python-soxr's tests)
    np.testing.assert_array_equal(np.concatenate(got, axis=1), expected)
    np.testing.assert_array_equal(chunked.slew_counts, whole.slew_counts)
    np.testing.assert_array_equal(chunked.clip_counts, whole.clip_counts)
    assert whole.slew_counts.sum() > 0


@pytest.mark.parametrize("quiet_frames", [300, 301, 2], ids=["whole steps", "odd", "short"])
def test_slew_limit_added_by_hot_swap_starts_from_the_true_previous_output(
    quiet_frames: int,
) -> None:
    quiet = noise(quiet_frames, channels=2, seed=34) * 0.01
    loud = noise(700, channels=2, seed=35) * 3.0
    steps = np.full(3, 0.03)
    # limited all along: the quiet part never reaches the step, so both runners agree there
    limited = CascadeRunner([SLEW_SOS], 2, 700, slew_steps=[steps])
    swapped = CascadeRunner([SLEW_SOS], 2, 700)
    np.testing.assert_array_equal(limited.process(quiet), swapped.process(quiet))
    assert not limited.slew_counts.any()
    swapped.set_chain(0, SLEW_SOS, slew_steps=steps)
    # the same model from the same previous outputs: identical afterwards
    np.testing.assert_array_equal(swapped.process(loud), limited.process(loud))
    assert swapped.slew_counts.sum() == limited.slew_counts.sum() > 0


def test_reset_and_nonfinite_recovery_forget_the_previous_output() -> None:
    x = noise(600, channels=1, seed=36) * 3.0
    steps = [np.full(3, 0.03)]
    runner = CascadeRunner([SLEW_SOS], 1, 600, slew_steps=steps)
    runner.process(x)
    runner.reset()
    fresh = CascadeRunner([SLEW_SOS], 1, 600, slew_steps=steps)
    np.testing.assert_array_equal(runner.process(x), fresh.process(x))
    bad = x.copy()
    bad[100, 0] = np.nan
    runner.process(bad)
    assert runner.nonfinite_resets == 1
    fresh = CascadeRunner([SLEW_SOS], 1, 600, slew_steps=steps)
    np.testing.assert_array_equal(runner.process(x), fresh.process(x))


def test_set_chain_without_steps_keeps_them_and_bad_steps_are_refused() -> None:
    x = noise(400, channels=1, seed=37) * 3.0
    steps = [np.full(3, 0.03)]
    runner = CascadeRunner([SLEW_SOS], 1, 400, slew_steps=steps)
    runner.set_chain(0, SLEW_SOS, clip_levels=np.full(3, np.inf))
    fresh = CascadeRunner([SLEW_SOS], 1, 400, slew_steps=steps)
    np.testing.assert_array_equal(runner.process(x), fresh.process(x))
    with pytest.raises(ValueError, match="slew steps of chain 0 must be > 0"):
        runner.set_chain(0, SLEW_SOS, slew_steps=np.array([0.1, 0.0, 0.1]))
    with pytest.raises(ValueError, match="slew_steps must have one array per chain"):
        CascadeRunner([SLEW_SOS], 1, 400, slew_steps=[])


def test_slew_limited_process_allocates_nothing_after_the_first_call() -> None:
    x = noise(64, channels=2, seed=38)
    steps = [np.full(len(sos), 0.01) for sos in CHAINS]
    runner = CascadeRunner(CHAINS, channels=2, max_frames=64, slew_steps=steps)
    runner.process(x)
    # project rule: no buffer allocated on the real-time path (ARCHITECTURE.md, engine)
    assert peak_bytes_allocated(lambda: runner.process(x), 200) < x.nbytes
    assert runner.slew_counts.any()


@pytest.mark.parametrize("frames", [300, 301], ids=["whole steps", "odd"])
def test_a_new_runner_given_state_and_last_outputs_continues_a_slewing_stream_exactly(
    frames: int,
) -> None:
    x = noise(frames + 400, channels=2, seed=39) * 3.0
    steps = [np.full(3, 0.03)]
    for first_steps in (steps, None):  # the first runner slewing, or not limited at all yet
        old = CascadeRunner([SLEW_SOS], 2, 700, slew_steps=first_steps)
        reference = CascadeRunner([SLEW_SOS], 2, 700, slew_steps=first_steps)
        old.process(x[:frames])
        reference.process(x[:frames])
        reference.set_chain(0, SLEW_SOS, slew_steps=steps[0])
        new = CascadeRunner([SLEW_SOS], 2, 700, slew_steps=steps)
        new.state[...] = old.state
        new.set_last_outputs(old.last_outputs)
        # the same model from the same state and previous outputs: identical afterwards
        np.testing.assert_array_equal(new.process(x[frames:]), reference.process(x[frames:]))
        assert new.slew_counts.sum() > 0
