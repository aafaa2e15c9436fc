"""The read-ahead ring, the streaming resampler and the chain swapper of `filtertwin listen`."""

import threading

import numpy as np
import pytest
from scipy import signal

from filtertwin.digital.engine import CascadeRunner
from filtertwin.digital.resample import StreamResampler, design_filter, ratio
from filtertwin.errors import UserInputError
from filtertwin.files.recordings import inspect
from filtertwin.live.chains import ChainSwapper
from filtertwin.live.ring import BlockRing
from filtertwin.live.stream import Feeder


def test_the_ring_hands_out_frames_in_order_across_its_wrap_point():
    ring = BlockRing(2, 10, 1)
    data = np.arange(2 * 37, dtype=np.float32).reshape(2, 37, 1)
    out = np.zeros((2, 3, 1), np.float32)
    got = []
    written = 0
    while len(got) < 37:
        written += ring.write(data, written)
        n = ring.read_into(out)
        got += [out[:, i].copy() for i in range(n)]
    np.testing.assert_array_equal(np.stack(got, axis=1), data)


def test_a_full_ring_refuses_more_and_an_empty_one_gives_silence():
    ring = BlockRing(1, 4, 2)
    assert ring.write(np.ones((1, 6, 2), np.float32)) == 4
    assert ring.room_frames == 0
    out = np.full((1, 6, 2), 7.0, np.float32)
    assert ring.read_into(out) == 4
    np.testing.assert_array_equal(out[0, 4:], 0.0)
    assert ring.available_frames == 0


@pytest.mark.parametrize(("up", "down"), [(15, 16), (6, 1), (1, 6), (160, 147)])
def test_the_resampler_in_odd_blocks_equals_upfirdn_with_resample_polys_filter(up, down):
    x = np.random.default_rng(up).standard_normal((3001, 2))
    r = StreamResampler(up, down, 2)
    pieces, start = [], 0
    for size in (17, 509, 0, 1, 1000, 1474):
        pieces.append(r.process(x[start : start + size]))
        start += size
    y = np.concatenate(pieces)
    assert len(y) == (len(x) * up - 1) // down + 1
    expected = signal.upfirdn(design_filter(up, down), x, up, down, axis=0)  # scipy upfirdn
    np.testing.assert_allclose(y, expected[: len(y)], rtol=0, atol=1e-13)


def test_the_resampling_filter_is_the_one_resample_poly_uses():
    # scipy.signal.resample_poly of an impulse, shifted back by its delay compensation
    up, down = 3, 2
    x = np.zeros(200)
    x[50] = 1.0
    y_poly = signal.resample_poly(x, up, down)
    y_ours = StreamResampler(up, down, 1).process(x[:, None])[:, 0]
    delay = (len(design_filter(up, down)) - 1) // 2 // down  # half the filter, output frames
    np.testing.assert_allclose(y_ours[delay : delay + 250], y_poly[:250], rtol=0, atol=1e-12)


def test_rates_become_a_ratio_of_small_whole_numbers():
    assert ratio(51200.0, 48000.0) == (15, 16)
    assert ratio(44100.0, 48000.0) == (160, 147)
    assert ratio(8000.0, 48000.0) == (6, 1)
    with pytest.raises(UserInputError, match=r"needs the factors 48000/1001"):
        ratio(1001.0, 48000.0)


def test_a_new_runner_is_swapped_in_when_the_section_count_changes():
    low = signal.butter(4, 0.1, output="sos")
    high = signal.butter(4, 0.1, btype="high", output="sos")

    class Host:
        def __init__(self):
            self.runner = CascadeRunner([low, high], 1, 64)
            self.blocks = 0

        def blocks_done(self):
            return self.blocks

    host = Host()
    x = np.random.default_rng(0).standard_normal((64, 1))
    host.runner.process(x)
    old = host.runner
    high_state = old.state[1].copy()
    six = signal.butter(6, 0.1, output="sos")
    swapper = ChainSwapper(host)
    swapper.swap(
        {0: (six, np.full(3, np.inf))}, [six, high], [np.full(3, np.inf), np.full(2, np.inf)]
    )
    assert host.runner is not old and host.runner.n_sections == (3, 2)
    np.testing.assert_array_equal(host.runner.state[1, :2], high_state)  # kept
    np.testing.assert_array_equal(host.runner.state[0], 0.0)  # new sections start at rest
    y = host.runner.process(x)  # scipy.signal.sosfilt with the carried state
    zi = high_state.transpose(0, 2, 1)
    expected, _ = signal.sosfilt(high, x, axis=0, zi=zi)
    np.testing.assert_allclose(y[1], expected, rtol=0, atol=0)


def test_the_read_ahead_thread_loops_a_recording_without_a_gap(tmp_path):
    import soundfile as sf

    path = tmp_path / "ramp.wav"
    ramp = (np.arange(1500) / 2000).astype(np.float32)
    sf.write(path, ramp, 48000, subtype="FLOAT")
    ring = BlockRing(1, 4000, 1)
    feeder = Feeder(inspect(path), ring, 256, 1)
    feeder.start()
    assert ring.room_frames == 0 and feeder.error is None
    out = np.zeros((1, 4000, 1), np.float32)
    ring.read_into(out)
    feeder.stop()
    np.testing.assert_array_equal(out[0, :, 0], np.tile(ramp, 3)[:4000])
    assert feeder.loops >= 2
    assert not any(t.name == "filtertwin-read-ahead" for t in threading.enumerate())
