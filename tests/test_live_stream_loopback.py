"""A real PortAudio stream on the JACK dummy server, looped back into itself.

Proves the live-audio plumbing of CI: a callback stream runs, a compiled filter runs block
by block inside the callback, and what comes back through JACK is bit-exact and delayed by
a fixed number of frames.
"""

import threading

import numba
import numpy as np
import pytest
from scipy import signal

RATE_HZ = 48000
BLOCK = 256
JACK_PERIOD = 256  # -p 256 in tools/jack_server.sh
SECONDS = 0.5
ATTEMPTS = 3  # a run with xruns is repeated: dropped blocks break the bit-exact comparison
# JACK makes a new connection part of its graph a few periods after connect() returns
# (measured here: 2 to 3 periods), so the signal starts after this much silence
PREROLL = 32 * BLOCK


@numba.njit(cache=True)
def biquad_block(x, y, coefficients, state):
    """Direct form II transposed biquad, float64 state carried from block to block."""
    b0, b1, b2, a1, a2 = coefficients
    for c in range(x.shape[1]):
        s1 = state[0, c]
        s2 = state[1, c]
        for n in range(x.shape[0]):
            xn = np.float64(x[n, c])
            yn = b0 * xn + s1
            s1 = b1 * xn - a1 * yn + s2
            s2 = b2 * xn - a2 * yn
            y[n, c] = yn
        state[0, c] = s1
        state[1, c] = s2


def low_pass() -> np.ndarray:
    sos = signal.butter(2, 2000, fs=RATE_HZ, output="sos")[0]
    return np.array([sos[0], sos[1], sos[2], sos[4], sos[5]])


def connect_loopback(client_name: str) -> None:
    """Connect PortAudio's output ports to its own input ports, in order.

    PortAudio numbers its ports with a counter that runs on over the streams of a process
    (after output-only streams the outputs can be out_12, out_13 with inputs in_0, in_1),
    so the ports are paired by position, not by number.
    """
    import jack

    def number(port: jack.Port) -> int:
        return int(port.name.rsplit("_", 1)[1])

    with jack.Client(client_name, no_start_server=True) as client:
        outputs = sorted(client.get_ports(r"PortAudio[^:]*:out_", is_audio=True), key=number)
        inputs = sorted(client.get_ports(r"PortAudio[^:]*:in_", is_audio=True), key=number)
        assert outputs, "PortAudio's JACK ports do not exist: is the stream open?"
        assert len(inputs) == len(outputs), (outputs, inputs)
        for source, target in zip(outputs, inputs, strict=True):
            client.connect(source, target)


def loop_once(sd, device: int, source: np.ndarray, coefficients: np.ndarray):
    frames_total = PREROLL + len(source) + 4 * BLOCK + JACK_PERIOD
    received = np.zeros((frames_total + BLOCK, 2), dtype=np.float32)
    state = np.zeros((2, 2))
    position = np.zeros(1, dtype=np.int64)
    flags = np.zeros(1, dtype=np.int64)
    done = threading.Event()

    def callback(indata, outdata, frames, time_info, status):
        if status:
            flags[0] += 1
        start = int(position[0])
        received[start : start + frames] = indata
        outdata[:] = 0.0
        first = max(start, PREROLL)  # first frame of this block that carries signal
        last = min(start + frames, PREROLL + len(source))
        if first < last:
            biquad_block(
                source[first - PREROLL : last - PREROLL],
                outdata[first - start : last - start],
                coefficients,
                state,
            )
        position[0] = start + frames
        if position[0] >= frames_total:
            raise sd.CallbackStop

    stream = sd.Stream(
        device=(device, device),
        samplerate=RATE_HZ,
        blocksize=BLOCK,
        channels=2,
        dtype="float32",
        callback=callback,
        finished_callback=done.set,
    )
    with stream:
        connect_loopback("ft_loopback_test")
        stream.start()
        assert done.wait(timeout=10 + 3 * SECONDS), "the stream did not finish in time"
    return received, int(flags[0])


@pytest.mark.live
def test_a_filter_run_in_the_callback_comes_back_bit_exact_and_delayed(jack_server):
    import sounddevice as sd

    from filtertwin.live.devices import find_device

    device = find_device("system", "duplex")
    rng = np.random.default_rng(2024)
    source = (0.25 * rng.standard_normal((int(SECONDS * RATE_HZ), 2))).astype(np.float32)
    coefficients = low_pass()
    expected = np.empty_like(source)
    biquad_block(source, expected, coefficients, np.zeros((2, 2)))  # compiles before streaming

    # the same filter offline, by scipy.signal.sosfilt: equal to float32 rounding
    reference = signal.sosfilt(signal.butter(2, 2000, fs=RATE_HZ, output="sos"), source, axis=0)
    np.testing.assert_allclose(expected, reference, rtol=0, atol=1e-6)

    flag_counts = []
    for _ in range(ATTEMPTS):
        received, flags = loop_once(sd, device.index, source, coefficients)
        flag_counts.append(flags)
        if flags == 0:
            break
    assert flag_counts[-1] == 0, f"status flags (xruns) in every run: {flag_counts}"

    delay = int(np.argmax(np.any(received != 0, axis=1))) - PREROLL
    # JACK period + block size (LIVE-AUDIO-TESTING.md, measured: 512 at block size 256)
    assert delay == JACK_PERIOD + BLOCK
    received = received[PREROLL:]
    np.testing.assert_array_equal(received[delay : delay + len(source)], expected)
    assert not np.any(received[delay + len(source) :])  # silence after the signal
