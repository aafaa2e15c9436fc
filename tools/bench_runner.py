"""Benchmark of the compiled runner (`filtertwin.digital.engine`) against scipy.signal.sosfilt.

Not a test: it prints figures for a person to read. Every timing is the median of repeats,
taken in turns with the reference so that a busy machine slows both, and every figure is also
given as a ratio to ``scipy.signal.sosfilt`` run on the same data in the same run.

Measures
--------
1. Throughput, one stereo cascade of 8 sections over 60 s at 48 kHz (10 s with ``--quick``):
   ns per section-sample-channel; target >= 1.25x the speed of sosfilt.
2. Several chains side by side (ways x designs, each on both channels): ns per
   chain-channel-section-sample; target <= 1.0 ns. sosfilt runs each chain in turn.
3. One block from Python, stereo, 8 sections: 64 frames (target <= 2.5 us and >= 15x sosfilt
   with ``zi``) and 256 frames (target <= 7.5 us).
4. Silence after a signal, 256-frame blocks: median cost of the silent blocks over the 10 s
   (3 s) after 1 s of noise, as a ratio to a noise block; target <= 1.5. The same ratio for
   sosfilt shows what subnormal numbers cost when the state is not flushed.
5. First call in a fresh process with numba's cache warm: import of the engine, warm-up,
   building a runner and its first block, measured in a subprocess after numpy is imported,
   and again after scipy.signal is imported too (as the design stages of filtertwin do before
   any stream starts); target <= 0.5 s.

All test signals are invented (seeded noise and silence).

Usage: ``python tools/bench_runner.py [--quick] [--repeats N]`` with the package installed
(``pip install -e .``) or ``PYTHONPATH=src``.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import statistics
import subprocess
import sys
import time
import timeit
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numba
import numpy as np
import scipy
import scipy.signal

from filtertwin.digital.engine import CascadeRunner, warm_up

RATE_HZ = 48000
CHANNELS = 2
SECTIONS = 8
SRC = Path(__file__).resolve().parents[1] / "src"


@dataclass(frozen=True)
class Row:
    """One line of the table: the runner's figure, the reference's and the target."""

    measure: str
    runner: str
    reference: str
    ratio: str
    target: str
    met: bool


def lowpass(corner_hz: float, kind: str = "butter") -> np.ndarray:
    """An 8-section low-pass, invented for the benchmark."""
    if kind == "butter":
        return scipy.signal.butter(2 * SECTIONS, corner_hz, fs=RATE_HZ, output="sos")
    return scipy.signal.cheby1(2 * SECTIONS, 0.5, corner_hz, fs=RATE_HZ, output="sos")


def crossover_chains(ways: int) -> list[np.ndarray]:
    """Two candidate designs (Butterworth, Chebyshev) of a crossover with ``ways`` ways."""
    corners = np.geomspace(300.0, 3000.0, ways - 1)
    chains = []
    for kind in ("butter", "cheby1"):
        design = scipy.signal.butter if kind == "butter" else scipy.signal.cheby1
        extra = () if kind == "butter" else (0.5,)
        for way in range(ways):
            if way == 0:
                band: tuple = (corners[0], "lowpass")
            elif way == ways - 1:
                band = (corners[-1], "highpass")
            else:
                band = ([corners[way - 1], corners[way]], "bandpass")
            order = 2 * SECTIONS if way in (0, ways - 1) else SECTIONS
            wn, btype = band
            sos = design(order, *extra, wn, btype=btype, fs=RATE_HZ, output="sos")
            chains.append(sos)
    return chains


def noise(frames: int, seed: int = 1) -> np.ndarray:
    return np.random.default_rng(seed).standard_normal((frames, CHANNELS)) * 0.25


def in_turns(actions: dict[str, Callable[[], object]], repeats: int) -> dict[str, float]:
    """Median wall time (s) of each action, the actions run in turns ``repeats`` times."""
    times: dict[str, list[float]] = {name: [] for name in actions}
    for _ in range(repeats):
        for name, action in actions.items():
            start = time.perf_counter()
            action()
            times[name].append(time.perf_counter() - start)
    return {name: statistics.median(values) for name, values in times.items()}


def per_call(action: Callable[[], object], calls: int, repeats: int) -> float:
    """Median over repeats of the mean time (s) of one call."""
    return statistics.median(timeit.repeat(action, number=calls, repeat=repeats)) / calls


def bench_stereo(seconds: float, repeats: int) -> list[Row]:
    sos = lowpass(1000.0)
    x = noise(int(seconds * RATE_HZ))
    runner = CascadeRunner([sos], CHANNELS, max_frames=4096)
    out = np.empty((1, len(x), CHANNELS))
    t = in_turns(
        {
            "sosfilt": lambda: scipy.signal.sosfilt(sos, x, axis=0),
            "runner": lambda: runner.process(x, out=out),
        },
        repeats,
    )
    units = x.size * SECTIONS
    ratio = t["sosfilt"] / t["runner"]
    return [
        Row(
            f"stereo, {seconds:g} s, 8 sections: ns/section-sample-channel",
            f"{t['runner'] / units * 1e9:.3f}",
            f"{t['sosfilt'] / units * 1e9:.3f}",
            f"{ratio:.2f}x",
            ">= 1.25x",
            ratio >= 1.25,
        )
    ]


class StreamingSosfilt:
    """scipy.signal.sosfilt fed block by block, its state carried in ``zi`` (the reference)."""

    def __init__(self, sos: np.ndarray) -> None:
        self.sos = sos
        self.zi = np.zeros((len(sos), 2, CHANNELS))

    def process(self, block: np.ndarray) -> None:
        _, self.zi = scipy.signal.sosfilt(self.sos, block, axis=0, zi=self.zi)


def chains_row(ways: int, x: np.ndarray, repeats: int) -> Row:
    chains = crossover_chains(ways)
    runner = CascadeRunner(chains, CHANNELS, max_frames=4096)
    out = np.empty((len(chains), len(x), CHANNELS))

    def reference() -> None:
        for sos in chains:
            scipy.signal.sosfilt(sos, x, axis=0)

    t = in_turns({"sosfilt": reference, "runner": lambda: runner.process(x, out=out)}, repeats)
    units = x.size * sum(len(sos) for sos in chains)
    runner_ns = t["runner"] / units * 1e9
    return Row(
        f"{ways} ways x 2 designs x {CHANNELS} ch ({len(chains) * CHANNELS} chains): "
        "ns/chain-section-sample",
        f"{runner_ns:.3f}",
        f"{t['sosfilt'] / units * 1e9:.3f}",
        f"{t['sosfilt'] / t['runner']:.2f}x",
        "<= 1.0 ns",
        runner_ns <= 1.0,
    )


def bench_chains(seconds: float, repeats: int) -> list[Row]:
    x = noise(int(seconds * RATE_HZ), seed=2)
    return [chains_row(ways, x, repeats) for ways in (2, 3)]


def block_row(frames: int, limit_us: float, min_ratio: float, repeats: int, calls: int) -> Row:
    sos = lowpass(1000.0)
    block = noise(frames, seed=3)
    runner = CascadeRunner([sos], CHANNELS, max_frames=frames)
    reference = StreamingSosfilt(sos)
    runner_s = per_call(lambda: runner.process(block), calls, repeats)
    reference_s = per_call(lambda: reference.process(block), max(calls // 10, 1), repeats)
    ratio = reference_s / runner_s
    return Row(
        f"one {frames}-frame stereo block from Python: us/call",
        f"{runner_s * 1e6:.2f}",
        f"{reference_s * 1e6:.2f}",
        f"{ratio:.1f}x",
        f"<= {limit_us:g} us, >= {min_ratio:g}x",
        runner_s * 1e6 <= limit_us and ratio >= min_ratio,
    )


def bench_blocks(repeats: int, calls: int) -> list[Row]:
    # the 256-frame block has no ratio target of its own: 1x stands for "no worse"
    return [block_row(64, 2.5, 15.0, repeats, calls), block_row(256, 7.5, 1.0, repeats, calls)]


def block_times(process: Callable[[np.ndarray], object], blocks: list[np.ndarray]) -> np.ndarray:
    times = np.empty(len(blocks))
    for i, block in enumerate(blocks):
        start = time.perf_counter()
        process(block)
        times[i] = time.perf_counter() - start
    return times


def bench_silence(seconds: float, repeats: int) -> list[Row]:
    sos = lowpass(200.0)
    frames = 256
    signal_blocks = [noise(frames, seed=4 + i) for i in range(RATE_HZ // frames)]
    silent_blocks = [np.zeros((frames, CHANNELS))] * int(seconds * RATE_HZ / frames)
    ratios: dict[str, list[float]] = {"runner": [], "sosfilt": []}
    for _ in range(repeats):
        runner = CascadeRunner([sos], CHANNELS, max_frames=frames)
        reference = StreamingSosfilt(sos)
        for name, process in (("runner", runner.process), ("sosfilt", reference.process)):
            loud = block_times(process, signal_blocks)
            quiet = block_times(process, silent_blocks)
            ratios[name].append(float(np.median(quiet) / np.median(loud)))
    runner_ratio = statistics.median(ratios["runner"])
    return [
        Row(
            f"silent 256-frame blocks over {seconds:g} s after noise: cost / noise block",
            f"{runner_ratio:.2f}",
            f"{statistics.median(ratios['sosfilt']):.2f}",
            "each vs own",
            "<= 1.5",
            runner_ratio <= 1.5,
        )
    ]


FIRST_CALL = """
import json, sys, time
import numpy as np
if sys.argv[3] == "scipy":
    import scipy.signal
sos = np.array(json.loads(sys.argv[1]))
block = np.zeros((64, 2))
ready = time.perf_counter()
if sys.argv[2] == "runner":
    from filtertwin.digital import engine
    engine.warm_up()
    engine.CascadeRunner([sos], 2, 64).process(block)
else:
    from scipy import signal
    signal.sosfilt(sos, block, axis=0, zi=np.zeros((len(sos), 2, 2)))
print(time.perf_counter() - ready)
"""


def first_call_s(which: str, sos: np.ndarray, preload: str) -> float:
    """Seconds from a fresh interpreter's ready state to the end of the first block."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(SRC), env.get("PYTHONPATH")]))
    done = subprocess.run(
        [sys.executable, "-c", FIRST_CALL, json.dumps(sos.tolist()), which, preload],
        env=env,
        capture_output=True,
        text=True,
        check=True,
    )
    return float(done.stdout.strip().splitlines()[-1])


def bench_first_call(repeats: int) -> list[Row]:
    sos = lowpass(1000.0)
    first_call_s("runner", sos, "numpy")  # fills numba's cache if it is cold
    rows = []
    for preload, already in (("numpy", "numpy"), ("scipy", "numpy and scipy.signal")):
        t = {
            which: statistics.median(first_call_s(which, sos, preload) for _ in range(repeats))
            for which in ("runner", "sosfilt")
        }
        rows.append(
            Row(
                f"first block in a fresh process, warm cache, {already} imported: s",
                f"{t['runner']:.3f}",
                f"{t['sosfilt']:.4f}",
                f"{t['sosfilt'] / t['runner']:.3f}x",
                "<= 0.5 s",
                t["runner"] <= 0.5,
            )
        )
    return rows


def cpu_name() -> str:
    """The kind of machine, generically (no processor maker or model)."""
    return f"{platform.machine()} processor"


def print_table(rows: list[Row], reference: str = "sosfilt") -> None:
    cells = [["measure", "runner", reference, "ratio", "target", "met"]]
    for r in rows:
        cells.append(
            [r.measure, r.runner, r.reference, r.ratio, r.target, "yes" if r.met else "NO"]
        )
    widths = [max(len(row[i]) for row in cells) for i in range(len(cells[0]))]
    for i, row in enumerate(cells):
        line = [
            cell.ljust(w) if j == 0 else cell.rjust(w)
            for j, (cell, w) in enumerate(zip(row, widths, strict=True))
        ]
        print("  ".join(line))
        if i == 0:
            print("  ".join("-" * w for w in widths))


def bench_options(argv: list[str] | None, description: str) -> tuple[argparse.Namespace, int]:
    """The options of the runner benchmarks (``--quick``, ``--repeats N``) and the repeats
    per figure they ask for (default 7, 3 with ``--quick``)."""
    parser = argparse.ArgumentParser(description=description)
    parser.add_argument("--quick", action="store_true", help="short signals, fewer repeats")
    parser.add_argument("--repeats", type=int, default=None, help="repeats per figure")
    args = parser.parse_args(argv)
    return args, args.repeats or (3 if args.quick else 7)


def main(argv: list[str] | None = None) -> int:
    args, repeats = bench_options(argv, __doc__.splitlines()[0])
    seconds = 10.0 if args.quick else 60.0

    print(f"date     {datetime.datetime.now().isoformat(timespec='seconds')}")
    print(f"machine  {platform.platform()}; {cpu_name()}; {os.cpu_count()} CPUs")
    print(
        f"versions python {platform.python_version()}, numpy {np.__version__}, "
        f"scipy {scipy.__version__}, numba {numba.__version__}"
    )
    print(f"timing   median of {repeats} repeats, runner and sosfilt in turns\n")
    warm_up()
    rows = bench_stereo(seconds, repeats)
    rows += bench_chains(seconds / 6, repeats)
    rows += bench_blocks(repeats, calls=500 if args.quick else 2000)
    rows += bench_silence(3.0 if args.quick else 10.0, max(repeats // 2, 1))
    rows += bench_first_call(max(repeats // 2, 2))
    print_table(rows)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
