"""Write an invented sensor archive: logger files of vibration with occasional spurs above
the ADC's Nyquist frequency (not committed; for the archive benchmark and for trying
``filtertwin alias`` on many files).

Invented scenario: a three-axis vibration logger records a pump at 51.2 kHz, one file a
minute. Each channel holds shaft harmonics (24.7 Hz and multiples), a bearing tone near
1.1 kHz and broadband noise; some files also catch bursts from a nearby switching supply
at 6.7 kHz or 13.1 kHz (which an 8 kHz ADC folds to 1.3 kHz and 2.9 kHz), at random
times. Everything is synthesised from fixed seeds: the same options give the same files.

Usage::

    python tools/make_archive.py OUT_DIR [--files 200] [--seconds 60] [--channels 3]
                                         [--format wav|csv] [--rate 51200]
"""

from __future__ import annotations

import argparse
import datetime
from pathlib import Path

import numpy as np
import soundfile as sf

BLOCK_S = 5.0
SPURS_HZ = (6700.0, 13100.0)


def signal(rate_hz: float, t0: float, frames: int, channels: int, rng_seed: int,
           bursts: list[tuple[int, float, float, float, float]]) -> np.ndarray:  # fmt: skip
    """``frames`` frames from time ``t0`` of one file's invented vibration."""
    t = t0 + np.arange(frames) / rate_hz
    rng = np.random.default_rng(rng_seed)
    x = np.empty((frames, channels))
    for c in range(channels):
        shaft = sum(0.05 / k * np.sin(2 * np.pi * 24.7 * k * t + c + k) for k in range(1, 6))
        bearing = 0.01 * np.sin(2 * np.pi * (1100.0 + 7 * c) * t)
        x[:, c] = shaft + bearing + 2e-4 * rng.standard_normal(frames)
    for ch, f, start, length, amp in bursts:
        on = (t >= start) & (t < start + length)
        x[on, ch] += amp * np.sin(2 * np.pi * f * t[on])
    return x


def bursts_of(index: int, seconds: float, channels: int) -> list[tuple[int, float, float, float,
                                                                         float]]:  # fmt: skip
    """Random spur bursts of file ``index``: (channel, Hz, start s, length s, amplitude)."""
    rng = np.random.default_rng(1000 + index)
    found = []
    for _ in range(int(rng.integers(0, 3))):
        found.append((int(rng.integers(channels)), float(rng.choice(SPURS_HZ)),
                      float(rng.uniform(0, max(seconds - 1, 0.1))), float(rng.uniform(0.2, 1.0)),
                      float(10 ** rng.uniform(-3.5, -1.5))))  # fmt: skip
    return found


def write_file(path: Path, index: int, args: argparse.Namespace) -> None:
    frames = int(args.seconds * args.rate)
    bursts = bursts_of(index, args.seconds, args.channels)
    block = int(BLOCK_S * args.rate)
    start = datetime.datetime(2026, 3, 2, 8, 0, tzinfo=datetime.UTC)
    start += datetime.timedelta(seconds=index * args.seconds)
    if args.format == "wav":
        with sf.SoundFile(path, "w", int(args.rate), args.channels, subtype="PCM_24") as f:
            for at in range(0, frames, block):
                n = min(block, frames - at)
                f.write(signal(args.rate, at / args.rate, n, args.channels, index * 7919 + at,
                               bursts))  # fmt: skip
        return
    names = ",".join(f"axis_{'xyz'[c] if c < 3 else c}" for c in range(args.channels))
    with open(path, "w") as fh:
        fh.write(f"# invented logger file {index}\ntimestamp,{names}\n")
        for at in range(0, frames, block):
            n = min(block, frames - at)
            x = signal(args.rate, at / args.rate, n, args.channels, index * 7919 + at, bursts)
            for i in range(n):
                ns = round((at + i) * 1e9 / args.rate)  # nanoseconds: 51.2 kHz is 19531.25 ns
                whole = start + datetime.timedelta(seconds=ns // 10**9)
                text = f"{whole:%Y-%m-%dT%H:%M:%S}.{ns % 10**9:09d}Z"
                fh.write(text + "," + ",".join(f"{v:.6f}" for v in x[i]) + "\n")


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("out", type=Path)
    p.add_argument("--files", type=int, default=200)
    p.add_argument("--seconds", type=float, default=60.0)
    p.add_argument("--channels", type=int, default=3)
    p.add_argument("--rate", type=float, default=51200.0)
    p.add_argument("--format", choices=("wav", "csv"), default="wav")
    args = p.parse_args()
    args.out.mkdir(parents=True, exist_ok=True)
    for i in range(args.files):
        write_file(args.out / f"logger-{i:04d}.{args.format}", i, args)
    print(f"wrote {args.files} invented {args.format} files of {args.seconds:g} s to {args.out}")


if __name__ == "__main__":
    main()
