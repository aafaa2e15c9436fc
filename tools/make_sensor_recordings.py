"""Invented sensor recordings for trying `filtertwin alias`, with the figures it should print.

Nothing here is real data: two recordings are synthesised from fixed seeds, with tones and
white noise whose powers are known, so the power that folds into an ADC's band can be
worked out independently of filtertwin (Parseval; fold frequencies |f - k fs|, Oppenheim &
Schafer 4.2; the filter from scipy.signal's analog prototype):

- ``seismo_100hz.csv``: 120 s of an invented seismometer-like channel at 100 Hz (a 0.7 Hz
  and a 2.3 Hz oscillation, pump and machinery tones at 17.3, 28 and 36.1 Hz, white noise),
  with ``seismic-antialias.toml``: a 6th-order Butterworth low-pass at 5 Hz, for a 20 Hz ADC
  with a 4 Hz band.
- ``accel_40k.wav``: 2 s of an invented accelerometer at 40 kHz (1 kHz, 7.3 kHz and
  13.62 kHz tones, white noise), for the packaged ``vibration-antialias`` at an 8 kHz ADC with
  a 1.5 kHz band.

Usage: ``python tools/make_sensor_recordings.py OUTDIR`` (prints the independent figures).
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import scipy.integrate
import scipy.signal
import soundfile as sf

SEISMIC_DESIGN = """\
# Invented example: anti-alias low-pass in front of a 20 Hz ADC on a seismometer-like channel
title = "Seismic channel anti-alias, 6th-order Butterworth at 5 Hz (invented example)"

[parts]
capacitor_range = ["1n", "10u"]
resistor_range = ["1k", "1M"]

[amplifier]
preset = "low-noise bipolar"

[[filter]]
name = "antialias"
response = "lowpass"
alignment = "butterworth"
order = 6
corner = "5 Hz"
"""

RECORDINGS = {
    # name: rate, seconds, [(f, amplitude)], noise rms, ADC rate, band, (order, corner)
    "seismo_100hz.csv": (
        100.0,
        120.0,
        [(0.7, 1.0), (2.3, 0.3), (17.3, 0.05), (28.0, 0.03), (36.1, 0.02)],
        1e-3,
        20.0,
        4.0,
        (6, 5.0),
    ),  # fmt: skip
    "accel_40k.wav": (
        40000.0,
        2.0,
        [(1000.0, 0.5), (7300.0, 0.02), (13620.0, 0.05)],
        1e-4,
        8000.0,
        1500.0,
        (6, 2200.0),
    ),  # fmt: skip
}


def synthesise(rate: float, seconds: float, tones: list[tuple[float, float]], noise: float,
               seed: int) -> np.ndarray:  # fmt: skip
    rng = np.random.default_rng(seed)
    t = np.arange(round(rate * seconds)) / rate
    x = noise * rng.standard_normal(len(t))
    for i, (f, a) in enumerate(tones):
        x += a * np.sin(2 * np.pi * f * t + 0.7 * i)
    return x


def fold_intervals(rate: float, adc: float, band: float) -> list[tuple[float, float]]:
    """Frequencies in (adc/2, rate/2] landing in [0, band]: |f - k adc| <= band."""
    out = []
    for k in range(1, int(rate / adc) + 2):
        lo, hi = max(k * adc - band, adc / 2), min(k * adc + band, rate / 2)
        if hi > lo:
            out.append((lo, hi))
    return out


def expected(name: str) -> dict[str, float]:
    """The independent figures: aliased power without and with the filter (dB re in-band
    power), attenuation at (ADC rate - band) and droop at the band edge (dB)."""
    rate, _, tones, noise, adc, band, (order, corner) = RECORDINGS[name]
    b, a = scipy.signal.butter(order, 2 * np.pi * corner, analog=True)

    def h2(f: np.ndarray | float) -> np.ndarray:
        w = 2 * np.pi * np.atleast_1d(np.asarray(f, float))
        return np.abs(scipy.signal.freqs(b, a, w)[1]) ** 2

    density = noise**2 / (rate / 2)
    folds = fold_intervals(rate, adc, band)

    def integral(intervals: list[tuple[float, float]]) -> float:
        grids = (np.linspace(lo, hi, 20001) for lo, hi in intervals)
        return sum(float(scipy.integrate.trapezoid(h2(f), f)) for f in grids)

    def lands(f: float) -> bool:
        return f > adc / 2 and min(abs(f - k * adc) for k in range(0, int(rate / adc) + 2)) <= band

    in_band = [(f, a) for f, a in tones if f <= band]
    folded = [(f, a) for f, a in tones if lands(f)]
    ref0 = sum(a * a / 2 for _, a in in_band) + density * band
    ref1 = sum(a * a / 2 * float(h2(f)[0]) for f, a in in_band) + density * integral([(1e-9, band)])
    width = sum(hi - lo for lo, hi in folds)
    without = sum(a * a / 2 for _, a in folded) + density * width
    with_filter = sum(a * a / 2 * float(h2(f)[0]) for f, a in folded) + density * integral(folds)
    return {
        "aliased_without_db": 10 * math.log10(without / ref0),
        "aliased_with_db": 10 * math.log10(with_filter / ref1),
        "attenuation_db": -10 * math.log10(float(h2(adc - band)[0])),
        "edge_gain_db": 10 * math.log10(float(h2(band)[0])),
    }


def main(out: Path) -> None:
    out.mkdir(parents=True, exist_ok=True)
    for seed, (name, (rate, seconds, tones, noise, *_)) in enumerate(RECORDINGS.items()):
        x = synthesise(rate, seconds, tones, noise, seed + 11)
        path = out / name
        if name.endswith(".csv"):
            t = np.arange(len(x)) / rate
            rows = "".join(f"{ti:.2f},{xi:.9e}\n" for ti, xi in zip(t, x, strict=True))
            path.write_text("time_s,velocity\n" + rows)
        else:
            sf.write(path, x, int(rate), subtype="FLOAT")
        figures = ", ".join(f"{k} {v:.1f}" for k, v in expected(name).items())
        print(f"wrote {path} (invented); independent figures: {figures}")
    (out / "seismic-antialias.toml").write_text(SEISMIC_DESIGN)
    print(f"wrote {out / 'seismic-antialias.toml'}")


if __name__ == "__main__":
    main(Path(sys.argv[1] if len(sys.argv) > 1 else "sensor-recordings"))
