"""The read-ahead's source: the recording looped whole or over a region, with jumps."""

import numpy as np
import pytest
import soundfile as sf

from filtertwin.files.recordings import inspect
from filtertwin.live.looping import LoopReader

RATE_HZ = 8000


@pytest.fixture
def ramp_file(tmp_path):
    x = np.arange(1000, dtype=np.float64)[:, None] * np.array([[1.0, -1.0]]) / 1000
    path = tmp_path / "ramp.wav"
    sf.write(path, x, RATE_HZ, subtype="DOUBLE")
    return inspect(path), x


def take(blocks, frames):
    out, n = [], 0
    while n < frames:
        block = next(blocks)
        out.append(block)
        n += len(block)
    return np.concatenate(out)[:frames]


def test_the_whole_file_loops_in_order(ramp_file):
    info, x = ramp_file
    reader = LoopReader(info, 300, 2)
    y = take(reader.blocks(), 2500)
    np.testing.assert_array_equal(y, np.concatenate([x, x, x])[:2500])
    assert reader.loops == 2


def test_a_region_loops_from_the_jump_on_and_the_jump_is_crossfaded(ramp_file):
    info, x = ramp_file
    reader = LoopReader(info, 100, 2, fade_frames=50)
    blocks = reader.blocks()
    first = take(blocks, 200)  # two blocks: 0..199
    reader.request(650, 600, 800)
    y = take(blocks, 500)
    np.testing.assert_array_equal(first, x[:200])
    # the next block of the old stream (200..299) fades out while the new one (650..749)
    # fades in, equal gain over 50 frames: (k + 0.5) / 50 of the new one
    rise = (np.arange(50) + 0.5)[:, None] / 50
    np.testing.assert_allclose(y[:50], rise * x[650:700] + (1 - rise) * x[200:250], atol=1e-15)
    np.testing.assert_array_equal(y[50:150], x[700:800])  # then to the region's end
    # round the region: what follows its end (800..849) fades into its start (600..649)
    np.testing.assert_allclose(y[150:200], rise * x[600:650] + (1 - rise) * x[800:850], atol=1e-15)
    np.testing.assert_array_equal(y[200:350], x[650:800])
    assert reader.region == (600, 800)
    assert reader.position == 800  # the last block read (700..799) ends at the region end


def test_a_jump_outside_the_region_or_an_empty_region_is_refused(ramp_file):
    info, _ = ramp_file
    reader = LoopReader(info, 100, 2)
    with pytest.raises(ValueError, match="outside the loop"):
        reader.request(100, 200, 300)
    with pytest.raises(ValueError, match="within 0 to 1000 frames"):
        reader.request(0, 500, 500)
