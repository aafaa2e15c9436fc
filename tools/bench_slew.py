"""Benchmark of the slew-limited cascade runner against the plain one (`filtertwin.digital.engine`).

Not a test: it prints figures for a person to read. Every figure is a ratio to the plain
runner (no limits) on the same data in the same run, measured in pairs: each repeat times the
plain runner and then the runner measured, back to back, and the ratio printed is the median
of those pairs' ratios (a busy machine slows both halves of a pair alike). Times are the
thread's CPU time (``time.thread_time``), so time the scheduler gives to other processes on a
shared machine is not counted; the absolute figures are medians too.

Measures, at the rate an 8x oversampled 48 kHz twin runs (384 kHz), on invented signals
(seeded noise):

1. One stereo cascade of 8 sections (4 stages of 2 sections, the limits on each stage's last
   section, as a twin places them): plain; swing clamping only (what a render with an
   amplifier ran before slew limiting); swing clamping and slew limiting with the slew step
   never reached; slewing now and then (a step near the largest the signal makes, so under
   1 % of the samples slew); and slewing hard (a tenth to a third of the samples, a grossly
   distorted signal: the limited loop runs nearly all the time). Target: every slew-limited
   runner <= 1.5x the plain runner's time; swing clamping alone is shown.
2. A 3-way crossover, two candidate designs (6 chains, 12 lanes; the invented chains of
   tools/bench_runner.py), the same five runners.
3. One 512-frame stereo block from Python (an 8x oversampled 64-frame live block), plain and
   slew-limited.

Usage: ``python tools/bench_slew.py [--quick] [--repeats N]`` with the package installed or
``PYTHONPATH=src``.
"""

from __future__ import annotations

import datetime
import os
import platform
import statistics
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import scipy.signal

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_runner import (  # noqa: E402
    Row,
    bench_options,
    crossover_chains,
    print_table,
)
from filtertwin.digital.engine import CascadeRunner, warm_up  # noqa: E402

RATE_HZ = 384000.0
CHANNELS = 2
TARGET = 1.5


def stage_limits(n_sections: int, value: float) -> np.ndarray:
    """``value`` on every second section (each stage's last), inf elsewhere."""
    limits = np.full(n_sections, np.inf)
    limits[1::2] = value
    return limits


def runners(
    chains: list[np.ndarray], frames: int, rare_step: float, hard_step: float
) -> dict[str, CascadeRunner]:
    """Plain, clamping only, and clamping with slewing: never, now and then, hard."""
    levels = [stage_limits(len(sos), 4.0) for sos in chains]

    def build(steps: float | None, clip: bool = True) -> CascadeRunner:
        return CascadeRunner(
            chains, CHANNELS, frames,
            clip_levels=levels if clip else None,
            slew_steps=None if steps is None else [stage_limits(len(s), steps) for s in chains],
        )  # fmt: skip

    return {
        "plain": build(None, clip=False),
        "clamp": build(None),
        "slew, never reached": build(7.9),  # < 2 x level: the slewing kernel runs
        "slewing now and then": build(rare_step),
        "slewing hard": build(hard_step),
    }


def rare_step(chains: list[np.ndarray], x: np.ndarray) -> float:
    """A step that the filtered signal exceeds on about 0.2 % of its samples."""
    steps = [np.abs(np.diff(scipy.signal.sosfilt(sos, x, axis=0), axis=0)) for sos in chains]
    return float(np.quantile(np.concatenate([s.ravel() for s in steps]), 0.998))


def in_pairs(
    actions: dict[str, Callable[[], object]], reference: str, repeats: int
) -> tuple[dict[str, float], dict[str, float]]:
    """Median thread CPU time (s) of each action, and the median over repeats of each
    action's time over the ``reference`` action's time just before it."""
    times: dict[str, list[float]] = {name: [] for name in actions}
    ratios: dict[str, list[float]] = {name: [] for name in actions}

    def timed(name: str) -> float:
        start = time.thread_time()
        actions[name]()
        elapsed = time.thread_time() - start
        times[name].append(elapsed)
        return elapsed

    for _ in range(repeats):
        for name in actions:
            if name != reference:
                before = timed(reference)
                ratios[name].append(timed(name) / before)
    ratios[reference] = [1.0]
    return (
        {name: statistics.median(values) for name, values in times.items()},
        {name: statistics.median(values) for name, values in ratios.items()},
    )


def ratio_rows(
    label: str,
    t: dict[str, float],
    ratios: dict[str, float],
    slewed_pct: dict[str, float],
    units: int,
) -> list[Row]:
    rows = []
    for name in ("clamp", "slew, never reached", "slewing now and then", "slewing hard"):
        ratio = ratios[name]
        extra = f" ({slewed_pct[name]:.2g} % slewed)" if name in slewed_pct else ""
        judged = name != "clamp"
        target = f"<= {TARGET:g}x" if judged else "(shown)"
        rows.append(
            Row(
                f"{label}, {name}{extra}: ns/section-sample-channel",
                f"{t[name] / units * 1e9:.3f}",
                f"{t['plain'] / units * 1e9:.3f}",
                f"{ratio:.2f}x",
                target,
                ratio <= TARGET or not judged,
            )
        )
    return rows


def slewed_percent(runner: CascadeRunner, frames: int) -> float:
    lanes = runner.n_chains * runner.channels
    stage_outputs = sum(n // 2 for n in runner.n_sections) / runner.n_chains
    return 100 * float(runner.slew_counts.sum()) / (frames * lanes * stage_outputs)


def bench_cascades(label: str, chains: list[np.ndarray], seconds: float, repeats: int) -> list[Row]:
    frames = int(seconds * RATE_HZ)
    x = np.random.default_rng(1).standard_normal((frames, CHANNELS)) * 0.5
    built = runners(chains, 16384, rare_step(chains, x[: frames // 4]), hard_step=0.02)
    out = np.empty((len(chains), frames, CHANNELS))
    actions: dict[str, Callable[[], object]] = {
        name: (lambda r=runner: r.process(x, out=out)) for name, runner in built.items()
    }
    t, ratios = in_pairs(actions, "plain", repeats)
    slewed = {
        name: slewed_percent(built[name], frames * repeats)
        for name in ("slewing now and then", "slewing hard")
    }
    units = x.size * sum(len(sos) for sos in chains)
    assert not built["slew, never reached"].slew_counts.any()
    return ratio_rows(label, t, ratios, slewed, units // len(chains) * len(chains))


def bench_block(repeats: int, calls: int) -> list[Row]:
    chains = [scipy.signal.butter(16, 20000.0, fs=RATE_HZ, output="sos")]
    block = np.random.default_rng(3).standard_normal((512, CHANNELS)) * 0.5
    built = runners(chains, 512, rare_step(chains, block), hard_step=0.02)

    def calling(runner: CascadeRunner) -> Callable[[], None]:
        def action() -> None:
            for _ in range(calls):
                runner.process(block)

        return action

    t, ratios = in_pairs(
        {name: calling(built[name]) for name in ("plain", "slewing now and then")}, "plain", repeats
    )
    plain, slewing = t["plain"] / calls, t["slewing now and then"] / calls
    ratio = ratios["slewing now and then"]
    return [
        Row(
            "one 512-frame stereo block from Python, 8 sections, slewing now and then: us/call",
            f"{slewing * 1e6:.2f}",
            f"{plain * 1e6:.2f}",
            f"{ratio:.2f}x",
            f"<= {TARGET:g}x",
            ratio <= TARGET,
        )
    ]


def main(argv: list[str] | None = None) -> int:
    args, repeats = bench_options(argv, __doc__.splitlines()[0])
    if args.repeats is None and not args.quick:
        repeats = 15  # pairs are cheap here, and more of them steady the median
    seconds = 2.0 if args.quick else 10.0
    print(f"date     {datetime.datetime.now().isoformat(timespec='seconds')}")
    print(f"machine  {platform.system()} {platform.machine()}, {os.cpu_count()} CPUs (shared)")
    print(
        f"timing   thread CPU time; each runner in {repeats} pairs with the plain runner, "
        "the median of the pairs' ratios\n"
    )
    warm_up()
    stereo = [scipy.signal.butter(16, 20000.0, fs=RATE_HZ, output="sos")]
    crossover = crossover_chains(3)
    rows = bench_cascades("stereo cascade, 8 sections", stereo, seconds, repeats)
    rows += bench_cascades("3-way crossover x 2 designs", crossover, seconds / 4, repeats)
    rows += bench_block(repeats, calls=500 if args.quick else 2000)
    print_table(rows, reference="plain")
    return 0 if all(r.met for r in rows) else 1


if __name__ == "__main__":
    raise SystemExit(main())
