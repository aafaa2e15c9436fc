"""Benchmark: tolerance builds of an 8th-order low-pass, vectorised against a per-build loop.

The vectorised run is ``filtertwin.checks.tolerance.run_tolerance`` (parts drawn, every
stage's polynomials for all builds at once, magnitude at every frequency, envelope, f0/Q
spread, mask yield, worst build). The reference does the same work one build at a time with
``filtertwin.circuit.sallenkey.analyze`` (polynomials, f0 and Q) and ``scipy.signal.freqs``; it is
timed on a few hundred builds and scaled to the full count.

Usage::

    python tools/bench_tolerance.py                  # 10,000 builds, 512 frequencies
    python tools/bench_tolerance.py --repeats 9 --reference-builds 500

Target: under 1 s for 10,000 builds at 512 frequencies.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import scipy.signal

from filtertwin.checks.tolerance import draw_parts, run_tolerance
from filtertwin.circuit import sallenkey
from filtertwin.circuit.design import Design, design_filter

TARGET_S = 1.0


def bench_design() -> Design:
    """8th-order Butterworth low-pass at 1 kHz, four unity-gain stages, 10 MHz amplifier."""
    return design_filter(response="lowpass", alignment="butterworth", order=8,
                         corner="1 kHz", amplifier="low-noise bipolar")  # fmt: skip


def vectorised(design: Design, builds: int, f_hz: np.ndarray, seed: int) -> float:
    start = time.perf_counter()
    run_tolerance(design, builds, seed=seed, f_hz=f_hz)
    return time.perf_counter() - start


def per_build_loop(design: Design, builds: int, f_hz: np.ndarray, seed: int) -> float:
    """The same work, one build and one stage at a time (scipy.signal.freqs)."""
    draws = draw_parts(design, builds, seed=seed)
    (filt,) = design.filters
    w = 2 * np.pi * f_hz
    start = time.perf_counter()
    db = np.empty((builds, len(f_hz)))
    f0 = np.empty((builds, len(filt.stages)))
    q = np.empty_like(f0)
    for b in range(builds):
        h = np.ones(len(f_hz), complex)
        for i, (stage, parts) in enumerate(zip(filt.stages, draws[0], strict=True)):
            circuit = stage.circuit.with_parts(**{k: float(v[b]) for k, v in parts.items()})
            model = sallenkey.analyze(circuit, design.amplifier)
            h *= scipy.signal.freqs(model.b, model.a, worN=w)[1]
            f0[b, i], q[b, i] = model.f0_hz, model.q
        db[b] = 20 * np.log10(np.abs(h))
    envelope = np.min(db, axis=0), np.median(db, axis=0), np.max(db, axis=0)
    spread = np.percentile(f0, [1, 50, 99], axis=0), np.percentile(q, [1, 50, 99], axis=0)
    assert len(envelope) == 3 and len(spread) == 2
    return time.perf_counter() - start


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--builds", type=int, default=10_000)
    parser.add_argument("--points", type=int, default=512, help="frequencies")
    parser.add_argument("--repeats", type=int, default=5, help="timed runs (median reported)")
    parser.add_argument("--reference-builds", type=int, default=300,
                        help="builds timed in the per-build loop, then scaled")  # fmt: skip
    args = parser.parse_args()

    design = bench_design()
    f_hz = np.geomspace(100.0, 10_000.0, args.points)
    vectorised(design, min(args.builds, 1000), f_hz, seed=0)  # warm caches and imports
    fast = [vectorised(design, args.builds, f_hz, seed=r) for r in range(args.repeats)]
    slow = [
        per_build_loop(design, args.reference_builds, f_hz, seed=r) * args.builds
        / args.reference_builds
        for r in range(3)
    ]  # fmt: skip
    fast_s, slow_s = statistics.median(fast), statistics.median(slow)
    stages = len(design.filters[0].stages)
    print(f"design: 8th-order Butterworth low-pass, {stages} stages, amplifier model "
          f"({design.amplifier.description if design.amplifier else 'ideal'})")  # fmt: skip
    print(f"work: {args.builds} builds x {args.points} frequencies (envelope, f0/Q spread, "
          "mask yield, worst build)")  # fmt: skip
    print(f"vectorised:     median {fast_s:.3f} s of {args.repeats} runs "
          f"(min {min(fast):.3f} s, max {max(fast):.3f} s)")  # fmt: skip
    print(f"per-build loop: median {slow_s:.2f} s (scipy.signal.freqs; timed on "
          f"{args.reference_builds} builds, scaled to {args.builds})")  # fmt: skip
    print(f"speed-up: {slow_s / fast_s:.0f}x; target < {TARGET_S:g} s: "
          f"{'met' if fast_s < TARGET_S else 'NOT met'}")  # fmt: skip
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
