"""How far other prewarp frequencies get a twin from its analog model, against a higher rate.

    python tools/prewarp_study.py [--rate 48000]

Not a test: it prints the table of DEVELOPERS.md ("Why `auto` goes to 16x"). For each filter
below, the twin's sections as :func:`filtertwin.digital.twin.bilinear_section` makes them,
each network section prewarped at a chosen frequency (amplifier sections at the top of the
band, as :func:`filtertwin.digital.twin.prewarp_hz` does), are compared with the analog
sections by ``scipy.signal.freqs``:

* every network section at its own f0, at 8x and at 16x (what the twin does);
* the prewarp frequencies that minimise the largest dB error over the fidelity window at 8x
  (Nelder-Mead on their logarithms from six starts), with the response at the filter's
  corner(s) held within 0.001 dB and 0.01 degree of the analog one;
* the same with the corner free.

The fidelity window is the twin's: 20 Hz to 20 kHz where the analog response is within 60 dB
of its peak. The resamplers are left out (flat within 0.0001 dB there).
"""

from __future__ import annotations

import argparse
import math

import numpy as np
from scipy import optimize, signal

from filtertwin import examples
from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import load_design
from filtertwin.digital.twin import FIDELITY_WINDOW_DB, bilinear_section, characteristic_hz

CASES = (("bookshelf-2way", "woofer"), ("studio-3way", "mid"), ("candidate-butterworth", "topcut"))
BAND_TOP_HZ = 20000.0
CORNER_DB, CORNER_DEG = 0.001, 0.01


def _analog(sections, f_hz):
    h = np.ones(len(f_hz), complex)
    for b, a in sections:
        h *= signal.freqs(b, a, worN=2 * math.pi * np.asarray(f_hz))[1]
    return h


class Study:
    """One filter's analog sections, its fidelity window and its corners."""

    def __init__(self, name: str, filter_name: str, rate_hz: float) -> None:
        design = build_design(load_design(examples.resolve(name)))
        filt = design.filter(filter_name)
        self.sections = filt.analog_sections()
        self.network = [len(a) == 3 for _, a in self.sections]
        self.grid = np.geomspace(20.0, BAND_TOP_HZ, 3000)
        ha = _analog(self.sections, self.grid)
        self.inside = np.abs(ha) >= np.max(np.abs(ha)) * 10 ** (-FIDELITY_WINDOW_DB / 20)
        self.ha = ha[self.inside]
        self.corners = np.atleast_1d(np.asarray(filt.spec.corner_hz, float))
        self.ha_corners = _analog(self.sections, self.corners)
        pairs = zip(self.sections, self.network, strict=True)
        self.f0s = np.array([characteristic_hz(b, a) for (b, a), net in pairs if net])
        self.rate_hz = rate_hz

    def errors(self, warps_hz, factor: int) -> tuple[float, float, float, float]:
        """Largest (dB, deg) error over the window, and at the corners."""
        fs = self.rate_hz * factor
        it = iter(warps_hz)
        rows = [bilinear_section(b, a, fs, next(it) if net else BAND_TOP_HZ)
                for (b, a), net in zip(self.sections, self.network, strict=True)]  # fmt: skip
        sos = np.array(rows)
        r = signal.sosfreqz(sos, worN=self.grid[self.inside], fs=fs)[1] / self.ha
        rc = signal.sosfreqz(sos, worN=self.corners, fs=fs)[1] / self.ha_corners
        return (
            float(np.max(np.abs(20 * np.log10(np.abs(r))))),
            float(np.max(np.abs(np.degrees(np.angle(r))))),
            float(np.max(np.abs(20 * np.log10(np.abs(rc))))),
            float(np.max(np.abs(np.degrees(np.angle(rc))))),
        )

    def optimised(self, keep_corner: bool) -> tuple[float, float, float, float]:
        def cost(log_warps: np.ndarray) -> float:
            e = self.errors(np.exp(log_warps), 8)
            if not keep_corner:
                return e[0]
            return e[0] + 100 * max(0.0, e[2] - CORNER_DB) + 10 * max(0.0, e[3] - CORNER_DEG)

        best = None
        for seed in range(6):
            start = np.log(self.f0s) + np.random.default_rng(seed).normal(0, 0.4, len(self.f0s))
            options = {"xatol": 1e-7, "fatol": 1e-8, "maxiter": 6000}
            found = optimize.minimize(cost, start, method="Nelder-Mead", options=options)
            if best is None or found.fun < best.fun:
                best = found
        assert best is not None
        return self.errors(np.exp(best.x), 8)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rate", type=float, default=48000.0, help="input rate, Hz")
    args = parser.parse_args()
    print(f"input rate {args.rate:g} Hz; largest error over the window (dB, deg) and at the "
          "corner(s) (dB, deg)")  # fmt: skip
    for name, filter_name in CASES:
        study = Study(name, filter_name, args.rate)
        corners = ", ".join(f"{c:g}" for c in study.corners)
        print(f"\n{name} '{filter_name}', corner(s) {corners} Hz")
        rows = (
            ("prewarp at each f0, 8x", study.errors(study.f0s, 8)),
            ("optimised, corner kept, 8x", study.optimised(keep_corner=True)),
            ("optimised, corner free, 8x", study.optimised(keep_corner=False)),
            ("prewarp at each f0, 16x", study.errors(study.f0s, 16)),
        )
        for label, (db, deg, c_db, c_deg) in rows:
            print(f"  {label:<28s} window {db:.4f} dB {deg:.3f} deg; corner {c_db:.4f} dB "
                  f"{c_deg:.3f} deg")  # fmt: skip


if __name__ == "__main__":
    main()
