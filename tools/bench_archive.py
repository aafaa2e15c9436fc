"""Benchmark of ``filtertwin alias`` over an archive: throughput and memory, with references
measured in the same run.

Not a test: it prints figures for a person to read (medians of repeats).

Measures
--------
1. Throughput in recording-hours per second over invented logger files
   (``tools/make_archive.py``: 3 channels at 51.2 kHz, 60 s each; 200 files by default,
   ``--files`` for fewer) through two candidates (``vibration-antialias`` and
   ``candidate-bessel``, 8 kHz ADC): a plain serial loop of the same per-file computation
   (the reference), Dask's local scheduler with 1 worker, and with 2 workers. The target is
   2 workers >= 1.7x 1 worker on a 2-CPU machine.
2. Peak memory of one worker (tracemalloc, after a warm-up) scanning a 1-minute and a long
   file (1 hour by default, ``--long-s``): the two should agree, since files are streamed.

The 1-minute load average is printed before and after: scaling needs both CPUs free.

Usage: ``python tools/bench_archive.py [--files N] [--seconds S] [--long-s S] [--repeats N]
[--archive DIR] [--scaling-only]`` (``--archive``: keep the invented files in DIR and reuse
them next time; ``--scaling-only``: only 1 and 2 workers)
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

HERE = Path(__file__).resolve().parent


def spec():  # type: ignore[no-untyped-def]
    from filtertwin.archive.scan import Candidate, ScanSpec
    from filtertwin.circuit.design import load

    a, b = load("vibration-antialias"), load("candidate-bessel")
    cands = (Candidate("butterworth 2.2k", a, "antialias"), Candidate("bessel 3k", b, "topcut"))
    return ScanSpec(cands, 8000.0, 2000.0)


def make(folder: Path, files: int, seconds: float, channels: int = 3) -> list[Path]:
    kept = sorted(folder.glob("*.wav"))
    if len(kept) >= files:  # the files are made from their index: the first N are the same
        return kept[:files]
    subprocess.run([sys.executable, str(HERE / "make_archive.py"), str(folder), "--files",
                    str(files), "--seconds", str(seconds), "--channels", str(channels)],
                   check=True, stdout=subprocess.DEVNULL)  # fmt: skip
    return sorted(folder.glob("*.wav"))


def timed(run, repeats: int) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        run()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def peak_bytes(path: Path, warm: Path) -> int:
    """Peak traced memory of scanning ``path`` in this process, after a warm-up on ``warm``."""
    from filtertwin.archive.scan import scan_file

    s = spec()
    scan_file(warm, s)
    tracemalloc.start()
    result = scan_file(path, s)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert result.error is None, result.error
    return peak


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--files", type=int, default=200)
    p.add_argument("--seconds", type=float, default=60.0)
    p.add_argument("--long-s", type=float, default=3600.0)
    p.add_argument("--repeats", type=int, default=1)
    p.add_argument("--memory-only", action="store_true")
    p.add_argument("--scaling-only", action="store_true",
                   help="only Dask with 1 and 2 workers (no serial loop, no memory)")  # fmt: skip
    p.add_argument("--archive", type=Path, help="folder for the invented files (kept)")
    p.add_argument("--peak", nargs=2, type=Path, help=argparse.SUPPRESS)  # child process
    args = p.parse_args()
    if args.peak:
        print(peak_bytes(*args.peak))
        return
    from filtertwin.archive.tasks import run_serial, run_tasks

    print(f"{datetime.date.today()}, {platform.system()} {platform.machine()}, "
          f"{os.cpu_count()} CPUs, Python {platform.python_version()}, "
          f"1-minute load {os.getloadavg()[0]:.2f}")  # fmt: skip
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        if not args.memory_only:
            paths = make(args.archive or folder / "archive", args.files, args.seconds)
            hours = len(paths) * args.seconds / 3600
            s = spec()
            run_serial(paths[:1], s)  # compile the kernels once
            serial = 0.0 if args.scaling_only else timed(lambda: run_serial(paths, s), args.repeats)
            one = timed(lambda: run_tasks(paths, s, workers=1), args.repeats)
            two = timed(lambda: run_tasks(paths, s, workers=2), args.repeats)
            print(
                f"{len(paths)} files x {args.seconds:g} s x 3 channels at 51.2 kHz "
                f"({hours:.3f} recording-hours), 2 candidates, median of {args.repeats}"
            )
            for name, t in (("serial loop", serial), ("Dask, 1 worker", one),
                            ("Dask, 2 workers", two)):  # fmt: skip
                if t:
                    ratio = f"  {serial / t:5.2f}x the serial loop" if serial else ""
                    print(f"  {name:16s} {t:8.1f} s  {hours / t * 3600:8.1f} recording-s/s "
                          f"({hours / t:.4f} recording-h/s){ratio}")  # fmt: skip
            print(f"  scaling 2 workers / 1 worker: {one / two:.2f}x (target >= 1.7x); "
                  f"1-minute load now {os.getloadavg()[0]:.2f}")  # fmt: skip
        if args.scaling_only:
            return
        short = make(folder / "short", 1, 60.0, 1)[0]
        long = make(folder / "long", 1, args.long_s, 1)[0]
        warm = make(folder / "warm", 1, 2.0, 1)[0]
        peaks = []
        for path in (short, long):
            out = subprocess.run([sys.executable, __file__, "--peak", str(path), str(warm)],
                                 check=True, capture_output=True, text=True)  # fmt: skip
            peaks.append(int(out.stdout.split()[-1]))
        print(f"peak memory of one worker (tracemalloc), 1 channel: 60 s file "
              f"{peaks[0] / 1e6:.1f} MB, {args.long_s:g} s file {peaks[1] / 1e6:.1f} MB "
              f"(ratio {peaks[1] / peaks[0]:.2f})")  # fmt: skip


if __name__ == "__main__":
    main()
