"""What would pass: every suggested design passes `alias`, and no lower order would."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from filtertwin.checks import tolerance
from filtertwin.checks.alias import check_alias
from filtertwin.checks.suggest import design_toml, suggest_designs, write_design
from filtertwin.circuit.design import design_filter, load
from filtertwin.errors import UserInputError

ADC, BAND, REQUIRED, DROOP = 8000.0, 1000.0, 60.0, 1.0
PARTS = {"capacitor_range": ["100p", "10u"], "resistor_range": ["1k", "1M"]}


@pytest.fixture(scope="module")
def base():
    return design_filter("aa", response="lowpass", alignment="butterworth", order=2,
                         corner="1 kHz", parts=PARTS)  # fmt: skip


@pytest.fixture(scope="module")
def found(base):
    return suggest_designs(ADC, BAND, REQUIRED, max_droop_db=DROOP, base=base)


def invented_recording() -> tuple[np.ndarray, float]:
    """An invented 48 kHz sensor recording: a 300 Hz tone and two spurs above 4 kHz."""
    rate = 48000.0
    t = np.arange(24000) / rate
    x = np.sin(2 * np.pi * 300 * t) + 0.1 * np.sin(2 * np.pi * 7300 * t)
    return x + 0.05 * np.sin(2 * np.pi * 15600 * t), rate


def test_every_suggested_design_passes_when_checked_with_alias(found, tmp_path, base):
    assert found
    x, rate = invented_recording()
    for s in found:
        check, _ = check_alias(s.design, x, rate, ADC, band_hz=BAND, reject_db=REQUIRED,
                               max_droop_db=DROOP)  # fmt: skip
        assert check.passed, (s.label, s.order, check.reasons())
        assert check.margin_db == pytest.approx(s.margin_db, abs=1e-6)
        assert s.yield_fraction >= 0.99
    # ranked: fewest amplifiers first, then the larger margin
    keys = [(s.amplifiers, -s.margin_db) for s in found]
    assert keys == sorted(keys)
    # the written file is a design file that builds the same filter
    path = write_design(tmp_path / "suggested.toml", design_toml(found[0], base))
    again = load(path)
    assert again.filters[0].spec.order == found[0].order
    check, _ = check_alias(again, x, rate, ADC, band_hz=BAND, reject_db=REQUIRED,
                           max_droop_db=DROOP)  # fmt: skip
    assert check.passed
    with pytest.raises(UserInputError, match="exists"):
        write_design(path, "title = 'x'\n")


def prototype(alignment: str, order: int, ripple: float | None, corner_hz: float):
    """scipy.signal's analog prototypes (the outside reference for the brute force)."""
    w = 2 * np.pi * corner_hz
    if alignment == "butterworth":
        return scipy.signal.butter(order, w, analog=True)
    if alignment == "bessel":
        return scipy.signal.bessel(order, w, analog=True, norm="mag")
    if alignment == "chebyshev":
        return scipy.signal.cheby1(order, ripple, w, analog=True)
    b, a = scipy.signal.butter(order // 2, w, analog=True)  # Linkwitz-Riley: Butterworth^2
    return np.polymul(b, b), np.polymul(a, a)


def test_no_design_of_lower_order_passes_by_brute_force(found, base):
    lowest = min(s.order for s in found)
    grid = np.geomspace(BAND, ADC - BAND, 60)
    f = np.concatenate([np.linspace(BAND / 64, BAND, 64), [ADC - BAND]])
    variants = [("butterworth", None), ("bessel", None), ("linkwitz-riley", None)]
    variants += [("chebyshev", r) for r in (0.1, 0.5, 1.0)]
    for alignment, ripple in variants:
        for order in range(1, lowest):
            if alignment == "linkwitz-riley" and order not in (2, 4, 8):
                continue
            if alignment == "chebyshev" and order < 2:
                continue
            for corner in grid:
                b, a = prototype(alignment, order, ripple, corner)
                _, h = scipy.signal.freqs(b, a, worN=2 * np.pi * f)
                db = 20 * np.log10(np.abs(h) / abs(b[-1] / a[-1]))
                if -db[-1] < REQUIRED or np.max(np.abs(db[:-1])) > DROOP:
                    continue  # fails as an ideal prototype
                # passes ideally: built with the same parts it must miss the yield target
                design = design_filter("aa", response="lowpass", alignment=alignment,
                                       order=order, corner=corner, parts=PARTS,
                                       **({"ripple_db": ripple} if ripple else {}))  # fmt: skip
                filt = design.filters[0]
                draws = tolerance.draw_parts(design, 500, seed=1)[0]
                power = np.ones((500, len(f)))
                for stage, parts in zip(filt.stages, draws, strict=True):
                    bb, aa = tolerance.stage_polynomials("lowpass", stage.circuit.order, parts)
                    for i in range(500):  # scipy.signal.freqs build by build
                        power[i] *= np.abs(scipy.signal.freqs(bb[i], aa[i], 2 * np.pi * f)[1]) ** 2
                build_db = 10 * np.log10(power)
                ok = (-build_db[:, -1] >= REQUIRED) & (
                    np.max(np.abs(build_db[:, :-1]), axis=1) <= DROOP
                )
                assert ok.mean() < 0.99, (alignment, order, corner)


def test_a_band_no_design_reaches_gives_an_empty_list():
    # 98 dB within a factor 1.05 of the band: no alignment up to order 10 gets there
    assert suggest_designs(8000.0, 3900.0, 98.0) == ()
    with pytest.raises(UserInputError, match="Nyquist"):
        suggest_designs(8000.0, 5000.0, 98.0)


def test_required_dynamic_range_is_computed_from_the_quantizer():
    from filtertwin.checks.alias import ideal_dynamic_range_db

    # Bennett 1948; Kester 2005: full-scale sine power (A^2/2) over quantisation noise
    # power q^2/12 with q = 2A / 2^N, i.e. 1.5 x 4^N
    for bits in (8, 12, 16, 24):
        assert ideal_dynamic_range_db(bits) == pytest.approx(10 * math.log10(1.5 * 4**bits))
