"""The oversampling resamplers against the previous ones (and python-soxr when installed).

    python tools/bench_resample.py [--repeats N] [--factors 2 4 8 16]

For each of 2x, 4x, 8x and 16x (the largest factor ``auto`` picks), one run measures, on the
same machine and data:

* passband flatness: the largest |gain| deviation in dB from 20 Hz to 20 kHz at 44.1 kHz of
  up- then down-sampling (a unit impulse through both, ``scipy.signal.freqz``);
* rejection: the weakest attenuation (dB) of the up-sampler's images, from 44.1 - 20 =
  24.1 kHz to the high rate's Nyquist frequency (the impulse response's FFT, re its DC gain);
* speed: seconds per second of stereo 48 kHz audio to raise the rate and lower it again, in
  16384-frame blocks (median of repeats), and the ratio to the previous resampler.

"previous": :class:`filtertwin.digital.resample.StreamResampler` with the FIR of
``scipy.signal.resample_poly`` (Kaiser beta 5, 10 zero crossings), which render used before.
"half-band cascade": :class:`~filtertwin.digital.resample.Upsampler` / ``Downsampler``, what render,
listen and the anti-alias check use now. "soxr VHQ": ``soxr.ResampleStream`` (PyPI ``soxr``),
for scale only; it is not a dependency.
"""

from __future__ import annotations

import argparse
import datetime
import statistics
import time
from collections.abc import Callable

import numpy as np
from scipy import signal

from filtertwin.digital.resample import Downsampler, StreamResampler, Upsampler, delay_frames

RATE_HZ = 44100.0
TIME_RATE_HZ = 48000.0
BLOCK = 16384
IMPULSE_FRAMES = 8192


def _previous(factor: int) -> Callable[[np.ndarray], np.ndarray]:
    up, down = StreamResampler(factor, 1, 1), StreamResampler(1, factor, 1)
    pad = int(round(up.lag_frames)) + int(round(down.lag_frames / factor)) + 1
    return lambda x: down.process(up.process(np.concatenate([x, np.zeros((pad, 1))])))


def _cascade(factor: int) -> Callable[[np.ndarray], np.ndarray]:
    n = IMPULSE_FRAMES + delay_frames(factor)
    up, down = Upsampler(factor, 1, n), Downsampler(factor, 1, 1, n * factor)

    def run(x: np.ndarray) -> np.ndarray:
        padded = np.concatenate([x, np.zeros((n - len(x), 1))])
        return down.process(up.process(padded)[np.newaxis])[0]

    return run


def _soxr_updown(factor: int) -> Callable[[np.ndarray], np.ndarray]:
    import soxr

    def run(x: np.ndarray) -> np.ndarray:
        high = soxr.resample(x, RATE_HZ, RATE_HZ * factor, quality="VHQ")
        return soxr.resample(high, RATE_HZ * factor, RATE_HZ, quality="VHQ")

    return run


def flatness_db(updown: Callable[[np.ndarray], np.ndarray]) -> float:
    x = np.zeros((IMPULSE_FRAMES, 1))
    x[IMPULSE_FRAMES // 4, 0] = 1.0
    y = updown(x)[:, 0]
    f = np.linspace(20.0, 20000.0, 2000)
    h = signal.freqz(y, worN=f, fs=RATE_HZ)[1]
    return float(np.max(np.abs(20 * np.log10(np.abs(h)))))


def rejection_db(up_impulse: np.ndarray, factor: int) -> float:
    spectrum = np.abs(np.fft.rfft(up_impulse, 1 << 20))
    f = np.fft.rfftfreq(1 << 20, 1 / (RATE_HZ * factor))
    images = spectrum[f >= RATE_HZ - 20000.0]
    return float(-20 * np.log10(images.max() / spectrum[0]))


def up_impulse(kind: str, factor: int) -> np.ndarray:
    x = np.zeros((IMPULSE_FRAMES, 1))
    x[IMPULSE_FRAMES // 4, 0] = 1.0
    if kind == "previous":
        return StreamResampler(factor, 1, 1).process(x)[:, 0]
    if kind == "cascade":
        return Upsampler(factor, 1, IMPULSE_FRAMES).process(x)[:, 0].copy()
    import soxr

    return soxr.resample(x[:, 0], RATE_HZ, RATE_HZ * factor, quality="VHQ")


def seconds_per_second(kind: str, factor: int, repeats: int) -> float:
    """Stereo 48 kHz, one way: up then down, 16384-frame blocks, per second of audio."""
    blocks = 8
    x = 0.1 * np.random.default_rng(1).standard_normal((BLOCK, 2))
    if kind == "previous":
        up, down = StreamResampler(factor, 1, 2), StreamResampler(1, factor, 2)

        def step() -> None:
            down.process(up.process(x))
    elif kind == "cascade":
        up2, down2 = Upsampler(factor, 2, BLOCK), Downsampler(factor, 1, 2, BLOCK * factor)

        def step() -> None:
            down2.process(up2.process(x)[np.newaxis])
    else:
        import soxr

        up3 = soxr.ResampleStream(TIME_RATE_HZ, TIME_RATE_HZ * factor, 2, "float64", "VHQ")
        down3 = soxr.ResampleStream(TIME_RATE_HZ * factor, TIME_RATE_HZ, 2, "float64", "VHQ")

        def step() -> None:
            down3.resample_chunk(up3.resample_chunk(x))

    step()  # compile, fill
    times = []
    for _ in range(repeats):
        started = time.perf_counter()
        for _ in range(blocks):
            step()
        times.append(time.perf_counter() - started)
    return statistics.median(times) / (blocks * BLOCK / TIME_RATE_HZ)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--factors", type=int, nargs="+", default=[2, 4, 8, 16])
    args = parser.parse_args()
    kinds = ["previous", "cascade"]
    try:
        import soxr  # noqa: F401

        kinds.append("soxr")
    except ImportError:
        print("(python-soxr not installed: its column is left out)")
    names = {"previous": "previous (resample_poly FIR)", "cascade": "half-band cascade",
             "soxr": "soxr VHQ"}  # fmt: skip
    updown = {"previous": _previous, "cascade": _cascade, "soxr": _soxr_updown}
    print(f"date: {datetime.datetime.now().astimezone().isoformat(timespec='seconds')}")
    print("flatness: largest deviation 20 Hz - 20 kHz at 44.1 kHz, up then down (dB);")
    print("rejection: weakest image attenuation from 24.1 kHz up (dB);")
    print(f"time: s per s of stereo {TIME_RATE_HZ:g} Hz audio, up then down, median of "
          f"{args.repeats}; ratio to the previous resampler in the same run")  # fmt: skip
    for factor in args.factors:
        print(f"\n{factor}x")
        reference = None
        for kind in kinds:
            flat = flatness_db(updown[kind](factor))
            rejection = rejection_db(up_impulse(kind, factor), factor)
            t = seconds_per_second(kind, factor, args.repeats)
            reference = reference or t
            print(f"  {names[kind]:<29s} flatness {flat:8.4f} dB  rejection {rejection:6.1f} dB"
                  f"  time {t * 1e3:7.2f} ms/s  ({t / reference:5.2f}x the previous)")  # fmt: skip


if __name__ == "__main__":
    main()
