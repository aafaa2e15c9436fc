"""The read-ahead thread's last block of a loop is short: no new compilation while streaming.

A short block leaves the runner's output a non-contiguous view. numba compiles one machine
code version per array layout (contiguous 'C' or any 'A'; numba documentation, "Types and
signatures", array layouts), so such a view reaching the downsampler would compile a second
version in the read-ahead thread while the stream runs, holding the interpreter lock for
about a second (measured: 63,104 frames not read ahead in time on a cold cache).
"""

import numpy as np

from filtertwin.digital import resample
from filtertwin.digital.engine import CascadeRunner
from filtertwin.live.stream import Oversampling

FACTOR, CHANNELS, CHUNK = 4, 2, 256
SOS = [np.array([[0.2, 0.4, 0.2, 1.0, -0.3, 0.1]]), np.array([[0.6, -1.2, 0.6, 1.0, -0.3, 0.1]])]
"""Two invented sections, a low-pass and a high-pass: two chains (one chain's view stays
contiguous)."""


def _run(blocks, seen=None):
    runner = CascadeRunner(SOS, CHANNELS, CHUNK * FACTOR, [np.array([1.0])] * 2, dtype=np.float64)
    over = Oversampling(FACTOR, len(SOS), CHANNELS, CHUNK, "linear", np.float64)
    kernel = resample._down_cascade

    def recording_kernel(block, *rest):
        if seen is not None:
            seen.append(block.flags.c_contiguous)
        return kernel(block, *rest)

    resample._down_cascade = recording_kernel
    try:
        return np.concatenate([over.process(runner, b.copy()).copy() for b in blocks], axis=1)
    finally:
        resample._down_cascade = kernel


def test_short_block_reaches_the_downsampler_contiguous_and_filters_the_same():
    rng = np.random.default_rng(3)
    x = rng.standard_normal((CHUNK + 96, CHANNELS))
    seen = []
    split = _run([x[:CHUNK], x[CHUNK:]], seen)  # a full block, then a short one (loop's end)
    # reference: the same frames in blocks of 96 (a different split of one causal stream
    # must give the same output, up to rounding)
    pieces = [x[i : i + 96] for i in range(0, len(x), 96)]
    np.testing.assert_allclose(split, _run(pieces), rtol=0, atol=1e-12)
    # only contiguous blocks reach the compiled kernel (numba documentation: a
    # non-contiguous 'A' layout is a separately compiled version)
    assert seen == [True, True]
