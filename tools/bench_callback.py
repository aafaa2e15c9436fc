"""Cost of the live audio callback per block, without a stream.

    python tools/bench_callback.py [--blocks N] [--frames 64 256] [--factors 1 8 16] [--noise]

Builds the callback of `filtertwin listen` as a run on a recording builds it: two
candidates of 8 second-order sections each, stereo, float32, the read-ahead ring, one
selection mixer with a crossfade always under way, the output safety and the peak meters.
Calls the real callback function (``StreamCore.output_callback``) with synthetic blocks many
times and reports the median and the 99th percentile of its time, in microseconds and as a
share of the block period at 48 kHz (targets at 64 frames: median below 5 % at 1x, below
10 % with the twins oversampled 8x or 16x, the resampling in the callback as ``listen`` runs
it; ``auto`` picks 16x for the shipped crossovers).

With ``--window`` it also times the callback as ``listen --window`` runs it: the preview
window's tap attached (the callback copies each block into it) and, on another thread, what
the server does 25 times a second for a connected page (the latest 4096 frames copied out of
the tap, two spectra, the JSON message). Runs with and without alternate; the medians'
ratio is printed (target: within 10 %).

For scale, the same run measures ``scipy.signal.sosfilt`` with ``zi`` on one chain's block
(8 sections, stereo) and prints the ratio; machines are shared and noisy, so compare the
ratio between runs rather than the microseconds. With ``--noise`` the same callback is also
timed with the circuit noise on (every chain's noise added from its own ring before the
mixer, :mod:`filtertwin.live.hiss`), in runs alternating with the plain callback, and the
ratio is printed; so is the CPU share of the thread that makes the noise (outside the
callback, on the other core when there is one).
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import threading
import time

import numba
import numpy as np
import scipy
from scipy import signal

from filtertwin.digital.engine import CascadeRunner
from filtertwin.live.hiss import NoiseAdder, noise_ring
from filtertwin.live.player import warm_up
from filtertwin.live.ring import BlockRing
from filtertwin.live.safety import OutputSafety
from filtertwin.live.stream import Oversampling, StreamCore
from filtertwin.live.tap import SignalTap
from filtertwin.live.tap import warm_up as warm_up_tap
from filtertwin.live.window import views
from filtertwin.live.window.server import LIVE_RATE_HZ

RATE_HZ = 48000.0
SECTIONS = 8
SWITCH_EVERY = 16  # blocks; the 30 ms crossfade is longer, so a fade is always running


def machine() -> str:
    model = f"{platform.machine()} machine"  # generic: no processor maker or model
    return (
        f"{model}, {os.cpu_count()} logical cores; Python {platform.python_version()}, "
        f"numpy {np.__version__}, numba {numba.__version__}, scipy {scipy.__version__}"
    )


def make_core(frames: int, factor: int = 1, noise: bool = False) -> StreamCore:
    rate = RATE_HZ * factor
    a = signal.butter(2 * SECTIONS, 3000, fs=rate, output="sos")
    b = signal.bessel(2 * SECTIONS, 3000, fs=rate, output="sos", norm="mag")
    runner = CascadeRunner([a, b], 2, frames * factor, dtype=np.float32)
    ring = BlockRing(1, 64 * frames, 2)
    over = Oversampling(factor, 2, 2, frames) if factor > 1 else None
    adder = NoiseAdder(noise_ring(2, 2), 2, frames, RATE_HZ, 0.03) if noise else None
    core = StreamCore(
        n_chains=2, channels=2, block_frames=frames, rate_hz=RATE_HZ, runner=runner,
        ring=ring, safety=OutputSafety(RATE_HZ, ramp_s=0.01), oversampling=over, noise=adder,
    )  # fmt: skip
    core.prime()
    if adder is not None:
        adder.switch(True)
    return core


def serve_page(tap: SignalTap, stop: threading.Event) -> None:
    """What the window's server does for a connected page, LIVE_RATE_HZ times a second."""
    while not stop.wait(1.0 / LIVE_RATE_HZ):
        dry, out, _ = tap.latest(views.SPECTRUM_FRAMES)
        json.dumps(
            {"in_db": views.spectrum_db(dry, RATE_HZ), "out_db": views.spectrum_db(out, RATE_HZ)}
        )


def time_callback(
    frames: int, blocks: int, window: bool = False, factor: int = 1, noise: bool = False
) -> np.ndarray:
    core = make_core(frames, factor, noise)
    stop = threading.Event()
    if window:
        core.tap = SignalTap()
        threading.Thread(target=serve_page, args=(core.tap, stop), daemon=True).start()
    rng = np.random.default_rng(1)
    source = (0.1 * rng.standard_normal((1, 32 * frames, 2))).astype(np.float32)
    hiss = (1e-4 * rng.standard_normal((2, 32 * frames, 2))).astype(np.float32)
    out = np.zeros((frames, 2), dtype=np.float32)
    gains = [np.array([1.0, 0.0, 0.0]), np.array([0.0, 0.9, 0.0])]
    times = np.empty(blocks)
    clock = time.perf_counter_ns
    ring = core.ring
    assert ring is not None
    for n in range(blocks):
        if ring.room_frames >= source.shape[1]:
            ring.write(source)
        if core.noise is not None and core.noise.ring.room_frames >= hiss.shape[1]:
            core.noise.ring.write(hiss)
        if n % SWITCH_EVERY == 0:
            core.request([gains[(n // SWITCH_EVERY) % 2]])
        started = clock()
        core.output_callback(out, frames, None, 0)
        times[n] = clock() - started
    stop.set()
    return times / 1e3


def compare_window(frames: int, blocks: int, rounds: int = 4) -> None:
    """Median callback time without and with a connected page, runs alternating."""
    plain, served = [], []
    for _ in range(rounds):
        plain.append(time_callback(frames, blocks)[100:])
        served.append(time_callback(frames, blocks, window=True)[100:])
    without, with_page = np.median(np.concatenate(plain)), np.median(np.concatenate(served))
    ratio = with_page / without
    verdict = "met" if ratio <= 1.10 else "MISSED"
    print(
        f"  {frames:4d} frames: median {without:6.1f} us without the window, {with_page:6.1f} us "
        f"with a connected page; ratio {ratio:.3f} (target <= 1.10: {verdict})"
    )


def compare_noise(frames: int, factor: int, blocks: int, rounds: int = 4) -> float:
    """Median callback time without and with the circuit noise on, runs alternating; prints
    both and returns the one with the noise."""
    plain, noisy = [], []
    for _ in range(rounds):
        plain.append(time_callback(frames, blocks, factor=factor)[100:])
        noisy.append(time_callback(frames, blocks, factor=factor, noise=True)[100:])
    without, with_noise = np.median(np.concatenate(plain)), np.median(np.concatenate(noisy))
    period_us = 1e6 * frames / RATE_HZ
    print(
        f"         circuit noise off / on, runs alternating: median {without:6.1f} / "
        f"{with_noise:6.1f} us ({100 * with_noise / period_us:4.2f} % with it); "
        f"on / off = {with_noise / without:.2f}"
    )
    return float(with_noise)


def noise_thread_share(chunks: int = 30) -> float:
    """CPU time the noise thread takes (fraction of one core) to make the noise of two
    one-filter designs, stereo, at 48 kHz: its shaping FIRs on 8192-frame chunks."""
    from filtertwin import examples
    from filtertwin.circuit.design import build_design
    from filtertwin.circuit.noise import CircuitNoiseSource
    from filtertwin.circuit.spec import load_design
    from filtertwin.live.hiss import CHUNK_FRAMES

    sources = []
    for name in ("candidate-butterworth", "candidate-bessel"):
        design = build_design(load_design(examples.resolve(name)))
        sources.append(CircuitNoiseSource(design, [f.name for f in design.filters], RATE_HZ, 2))
    times = np.empty(chunks)
    for n in range(chunks):
        started = time.thread_time()
        for source in sources:
            source.next(CHUNK_FRAMES)
        times[n] = time.thread_time() - started
    return float(np.median(times) / (CHUNK_FRAMES / RATE_HZ))


def time_sosfilt(frames: int, blocks: int) -> np.ndarray:
    sos = signal.butter(2 * SECTIONS, 3000, fs=RATE_HZ, output="sos")
    zi = np.zeros((SECTIONS, 2, 2))
    x = (0.1 * np.random.default_rng(2).standard_normal((frames, 2))).astype(np.float32)
    times = np.empty(blocks)
    clock = time.perf_counter_ns
    for n in range(blocks):
        started = clock()
        _, zi = signal.sosfilt(sos, x, axis=0, zi=zi)
        times[n] = clock() - started
    return times / 1e3


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--blocks", type=int, default=20000, help="callbacks timed per size")
    parser.add_argument("--frames", type=int, nargs="+", default=[64, 256])
    parser.add_argument("--factors", type=int, nargs="+", default=[1, 8, 16])
    parser.add_argument("--window", action="store_true", help="also compare with a page served")
    parser.add_argument("--noise", action="store_true", help="also time it with noise on")
    args = parser.parse_args()
    print(f"date: {datetime.datetime.now().astimezone().isoformat(timespec='seconds')}")
    print(f"machine: {machine()}")
    warm_up()
    print(f"callback: 2 candidates x {SECTIONS} sections, stereo float32, read-ahead ring, "
          "crossfade always running, safety, meters; 48 kHz")  # fmt: skip
    medians, noisy_medians = {}, {}
    for factor in args.factors:
        print(f" twins at {factor}x" + (" (resampling in the callback)" if factor > 1 else ""))
        for frames in args.frames:
            period_us = 1e6 * frames / RATE_HZ
            # the first calls fill caches
            cb = time_callback(frames, args.blocks, factor=factor)[100:]
            ref = time_sosfilt(frames, args.blocks)[100:]
            med, p99 = np.median(cb), np.percentile(cb, 99)
            medians[factor, frames] = med
            ref_med = np.median(ref)
            print(
                f"  {frames:4d} frames (period {period_us:7.1f} us): median {med:6.1f} us "
                f"({100 * med / period_us:4.2f} %), 99th percentile {p99:6.1f} us "
                f"({100 * p99 / period_us:4.2f} %); scipy sosfilt with zi, one chain: "
                f"{ref_med:6.1f} us; callback / sosfilt = {med / ref_med:.2f}"
            )
            if args.noise:
                noisy_medians[factor, frames] = compare_noise(frames, factor, args.blocks // 4)
    period_64 = 1e6 * 64 / RATE_HZ
    for factor, share in ((1, 0.05), (8, 0.10), (16, 0.10)):
        if (factor, 64) in medians:
            verdict = "met" if medians[factor, 64] < share * period_64 else "MISSED"
            print(f"target at {factor}x (median < {share:.0%} of the 64-frame period): {verdict}")
        if (factor, 64) in noisy_medians:
            verdict = "met" if noisy_medians[factor, 64] < share * period_64 else "MISSED"
            print(f"  the same with the circuit noise on: {verdict}")
    for factor in (8, 16):
        if (1, 64) in medians and (factor, 64) in medians:
            ratio = medians[factor, 64] / medians[1, 64]
            print(f"{factor}x / 1x callback time at 64 frames: {ratio:.2f}")
    if args.noise:
        share = noise_thread_share()
        print(
            f"noise thread (outside the callback), candidate-butterworth and candidate-bessel, "
            f"stereo: {100 * share:.1f} % of one core"
        )
    if args.window:
        warm_up_tap()
        print("preview window (listen --window): tap attached, page served 25 times a second")
        for frames in args.frames:
            compare_window(frames, args.blocks // 4)


if __name__ == "__main__":
    main()
