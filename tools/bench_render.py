"""Benchmark of `filtertwin render`: speed and memory against references from the same run.

Not a test: it prints figures for a person to read. Every timing is the median of repeats,
and every speed is also given as a ratio to a reference measured in the same run on the same
data, so a busy or slower machine moves both.

Measures
--------
1. Real-time factor of rendering a stereo 48 kHz file (10 minutes; 1 minute with ``--quick``)
   through the 3-way example ``studio-3way`` (twin at 1x; also with spectra, and at the
   oversampling ``auto`` picks), against
   a) plain soundfile: read the file in blocks and write it once as float WAV, and
   b) ``scipy.signal.sosfilt`` of the same sections over the same data held in memory.
   The target is >= 300x real time for the render at 1x without the report.
   At 8x and at 16x (what ``auto`` picks for this design), the share of the render's time
   spent resampling (the same up- and down-samplers run alone over as many blocks of the
   same size, in turns with the render at that factor; the median of the pairs' ratios):
   target at most a third.
2. Peak memory (ru_maxrss, each in a fresh subprocess) of rendering a 1-minute and a
   10-minute file (10 s and 60 s with ``--quick``); they should be within 10 %.

Usage: ``python tools/bench_render.py [--quick] [--repeats N]``
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import scipy.signal
import soundfile as sf

RATE_HZ = 48000
CHANNELS = 2
DESIGN = "studio-3way"
GENERATE_BLOCK = RATE_HZ * 10


def make_file(path: Path, seconds: float, seed: int = 7) -> Path:
    """An invented programme-like stereo test file: shaped noise plus a few tones, PCM_16."""
    rng = np.random.default_rng(seed)
    frames = int(seconds * RATE_HZ)
    b, a = scipy.signal.butter(1, 2000, fs=RATE_HZ)  # tilt the noise towards low frequencies
    zi: np.ndarray = np.zeros((1, CHANNELS))
    with sf.SoundFile(path, "w", RATE_HZ, CHANNELS, "PCM_16") as f:
        for start in range(0, frames, GENERATE_BLOCK):
            n = min(GENERATE_BLOCK, frames - start)
            white = rng.standard_normal((n, CHANNELS))
            noise, zi = scipy.signal.lfilter(b, a, white, axis=0, zi=zi)
            t = (start + np.arange(n)) / RATE_HZ
            tones = 0.05 * np.sin(2 * np.pi * np.outer(t, (55.0, 440.0, 5000.0))).sum(axis=1)
            f.write(0.15 * noise + tones[:, None])
    return path


def median_time(run: Callable[[], object], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        run()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def soundfile_copy(source: Path, target: Path, block: int) -> None:
    with sf.SoundFile(source) as f:
        with sf.SoundFile(target, "w", f.samplerate, f.channels, "FLOAT") as g:
            while len(data := f.read(block, dtype="float64", always_2d=True)):
                g.write(data)


def render_once(source: Path, out: Path, oversampling: int | str, spectra: bool, block: int):
    from filtertwin import examples
    from filtertwin.circuit.design import build_design
    from filtertwin.circuit.spec import load_design
    from filtertwin.digital import render
    from filtertwin.digital.twin import build_twin
    from filtertwin.files import recordings

    info = recordings.inspect(source)
    design = build_design(load_design(examples.resolve(DESIGN)))
    twin = build_twin(design, info.rate_hz, oversampling=oversampling)
    out.mkdir(exist_ok=True)
    plan = render.plan_outputs([f.name for f in twin.filters], out, ".wav")
    settings = render.RenderSettings(block_frames=block, spectra=spectra)
    return render.render(twin, info, plan, "FLOAT", settings), twin


def resampling_run(seconds: float, factor: int, ways: int, block: int) -> Callable[[], None]:
    """The render's resampling alone: ``Upsampler`` on every input block and ``Downsampler``
    on every filter's high-rate output, as many blocks as the render (one call runs it)."""
    from filtertwin.digital.resample import Downsampler, Upsampler

    blocks = -(-int(seconds * RATE_HZ) // block)
    x = np.zeros((block, CHANNELS))
    high = np.zeros((ways, block * factor, CHANNELS))
    up = Upsampler(factor, CHANNELS, block)
    down = Downsampler(factor, ways, CHANNELS, block * factor)

    def run() -> None:
        for _ in range(blocks):
            up.process(x)
            down.process(high)

    return run


def resampling_share(render: Callable[[], object], resampling: Callable[[], None], repeats: int):
    """Median of ``repeats`` (render time, resampling time, their ratio), the two run in
    turns so that a machine busy with other work slows both alike."""
    renders, alone, shares = [], [], []
    for _ in range(repeats):
        renders.append(median_time(render, 1))
        alone.append(median_time(resampling, 1))
        shares.append(alone[-1] / renders[-1])
    return statistics.median(renders), statistics.median(alone), statistics.median(shares)


def sosfilt_in_memory(source: Path, repeats: int) -> float:
    from filtertwin import examples
    from filtertwin.circuit.design import build_design
    from filtertwin.circuit.spec import load_design
    from filtertwin.digital.twin import build_twin

    data, rate = sf.read(source, dtype="float64", always_2d=True)
    twin = build_twin(build_design(load_design(examples.resolve(DESIGN))), rate, oversampling=1)
    chains = twin.chains()
    return median_time(lambda: [scipy.signal.sosfilt(s, data, axis=0) for s in chains], repeats)


def peak_memory_mb(source: Path, out: Path) -> float:
    """Peak resident memory of a full CLI render in a fresh process (ru_maxrss of the child)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    done = subprocess.run(
        [sys.executable, "-m", "filtertwin", "render", DESIGN, str(source), "--out", str(out),
         "--oversample", "1"],
        check=False, stdout=subprocess.DEVNULL,
    )  # fmt: skip
    if done.returncode not in (0, 1):  # 1: a check failed (the 1x twin's fidelity), still done
        raise RuntimeError(f"render exited with status {done.returncode}")
    after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    if after <= before:
        raise RuntimeError("ru_maxrss of children did not grow; measure in a fresh process")
    return after / 1024  # kilobytes on Linux


def peak_memory_isolated(source: Path, out: Path) -> float:
    """Run :func:`peak_memory_mb` in its own interpreter so every measurement starts clean."""
    code = (
        "import sys; from pathlib import Path; sys.path.insert(0, sys.argv[3]);"
        "import bench_render as b; print(b.peak_memory_mb(Path(sys.argv[1]), Path(sys.argv[2])))"
    )
    done = subprocess.run(
        [sys.executable, "-c", code, str(source), str(out), str(Path(__file__).parent)],
        check=True, capture_output=True, text=True,
    )  # fmt: skip
    return float(done.stdout.strip().splitlines()[-1])


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="1-minute file, fewer repeats")
    parser.add_argument("--repeats", type=int, default=None, help="repeats per timing (median)")
    parser.add_argument("--block", type=int, default=16384, help="render block size, frames")
    parser.add_argument(
        "--scratch", metavar="DIR", help="folder for the temporary files (default: system temp)"
    )
    args = parser.parse_args()
    repeats = args.repeats or (2 if args.quick else 3)
    seconds = 60.0 if args.quick else 600.0
    mem_seconds = (10.0, 60.0) if args.quick else (60.0, 600.0)

    import numba

    print(f"date: {datetime.datetime.now().isoformat(timespec='seconds')}")
    print(f"machine: {platform.machine()}, {os.cpu_count()} CPUs, "
          f"{platform.platform()}")  # fmt: skip
    versions = (
        f"python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}"
        f", numba {numba.__version__}, soundfile {sf.__version__}"
    )
    print(f"software: {versions}")
    print(f"scratch folder: {args.scratch or tempfile.gettempdir()}")
    print(f"design: {DESIGN}; file: {seconds:g} s stereo {RATE_HZ} Hz PCM_16 (invented); "
          f"block {args.block} frames; median of {repeats}")  # fmt: skip

    with tempfile.TemporaryDirectory(prefix="bench_render_", dir=args.scratch) as scratch:
        folder = Path(scratch)
        source = make_file(folder / "input.wav", seconds)
        render_once(source, folder / "warm", 1, False, args.block)  # compile / load the kernels

        copy = folder / "copy.wav"
        t_copy = median_time(lambda: soundfile_copy(source, copy, args.block), repeats)
        t_sos = sosfilt_in_memory(source, repeats)
        print("\nreferences (same data, same run):")
        for label, t in (("soundfile read + 1 float WAV write", t_copy),
                         ("scipy.signal.sosfilt in memory", t_sos)):  # fmt: skip
            print(f"  {label:<35s}: {t:7.3f} s  ({seconds / t:7.0f}x real time)")

        cases: list[tuple[str, int | str, bool]] = [
            ("1x, no report (target >= 300x)", 1, False),
            ("1x, with spectra", 1, True),
            ("8x, no report", 8, False),
            ("16x, no report", 16, False),
            ("oversampling auto, no report", "auto", False),
        ]
        timed: dict[int | str, float] = {}
        print("\nrender (before + 3 ways + sum, float WAV):")
        for label, over, spectra in cases:
            reps = 1 if over == "auto" and not args.quick else repeats
            factors: list[int] = []

            def run(over=over, spectra=spectra, factors=factors) -> None:
                _, twin = render_once(source, folder / "out", over, spectra, args.block)
                factors.append(twin.oversampling)

            t = median_time(run, reps)
            timed.setdefault(over, t)
            print(f"  {label:<31s}: {t:7.3f} s  ({seconds / t:7.0f}x real time; "
                  f"{t / t_copy:5.2f}x the soundfile copy, {t / t_sos:5.2f}x sosfilt; "
                  f"twin {factors[-1]}x)")  # fmt: skip

        print()
        for factor in (8, 16):
            t_render, t_res, share = resampling_share(
                lambda factor=factor: render_once(source, folder / "out", factor, False,
                                                  args.block),
                resampling_run(seconds, factor, 3, args.block),
                repeats,
            )  # fmt: skip
            print(f"resampling alone at {factor}x (up once, down 3 ways), in turns with the "
                  f"{factor}x render ({t_render:.3f} s): {t_res:7.3f} s, {100 * share:.0f} % of "
                  f"the render (median of {repeats} pairs; target at most 33 %: "
                  f"{'met' if share <= 1 / 3 else 'MISSED'}); {factor}x / 1x render time "
                  f"{timed[factor] / timed[1]:.2f}")  # fmt: skip

        print("\npeak memory of a CLI render (fresh process each, ru_maxrss, 1x, report on):")
        peaks = []
        for s in mem_seconds:
            path = make_file(folder / f"mem_{int(s)}.wav", s)
            peaks.append(peak_memory_isolated(path, folder / f"mem_out_{int(s)}"))
            print(f"  {s:6g} s file: {peaks[-1]:8.1f} MB")
        spread = abs(peaks[1] - peaks[0]) / peaks[0]
        print(f"  difference: {100 * spread:.1f} % (target within 10 %)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
