import math

import numpy as np
import pytest
from scipy import signal

from filtertwin.errors import UserInputError
from filtertwin.live.loudness import (
    LoudnessMeter,
    integrated_loudness,
    kweighting_sos,
    matching_gain,
)


def tone(rate_hz: float, seconds: float, f_hz: float = 997.0, peak: float = 1.0) -> np.ndarray:
    t = np.arange(round(seconds * rate_hz)) / rate_hz
    return peak * np.sin(2 * np.pi * f_hz * t)


def left_only(mono: np.ndarray) -> np.ndarray:
    return np.stack([mono, np.zeros_like(mono)], axis=1)


def response_db(sos: np.ndarray, f_hz: np.ndarray, rate_hz: float) -> np.ndarray:
    _, h = signal.sosfreqz(sos, f_hz, fs=rate_hz)  # scipy.signal.sosfreqz
    return 20 * np.log10(np.abs(h))


def test_at_48_khz_the_filters_are_the_standards_coefficients():
    # ITU-R BS.1770-4 Annex 1 Table 1 (pre-filter) and Table 2 (RLB), from memory
    expected = [
        [1.53512485958697, -2.69169618940638, 1.19839281085285, 1.0, -1.69065929318241,
         0.73248077421585],
        [1.0, -2.0, 1.0, 1.0, -1.99004745483398, 0.99007225036621],
    ]  # fmt: skip
    np.testing.assert_allclose(kweighting_sos(48000.0), expected, rtol=0, atol=1e-12)


def test_a_997_hz_full_scale_sine_on_the_left_channel_reads_minus_3_01_lkfs():
    # ITU-R BS.1770-4 Annex 1: "a 0 dB FS 1 kHz sine wave ... applied to the left, centre,
    # or right channel ... will equal -3.01 LKFS" (997 Hz as the test tone), from memory
    for rate_hz in (48000.0, 44100.0, 96000.0):
        assert integrated_loudness(left_only(tone(rate_hz, 3.0)), rate_hz) == pytest.approx(
            -3.01, abs=0.01
        )


def test_the_same_sine_on_both_channels_reads_3_01_db_louder():
    # channel powers add (BS.1770-4 eq. 2, G = 1.0 for left and right): 10 log10(2) = 3.01 dB
    both = np.stack([tone(48000.0, 3.0)] * 2, axis=1)
    assert integrated_loudness(both, 48000.0) == pytest.approx(-3.01 + 3.0103, abs=0.01)


def test_k_weighting_is_a_4_db_high_shelf_over_a_low_cut():
    sos = kweighting_sos(48000.0)
    db = response_db(sos, np.array([20.0, 997.0, 10000.0, 20000.0]), 48000.0)
    # ITU-R BS.1770-4 Fig. 1 (pre-filter: about +4 dB above 2 kHz), from memory
    assert db[2] == pytest.approx(4.0, abs=0.1)
    assert db[3] == pytest.approx(4.0, abs=0.1)
    # the -0.691 dB constant of eq. 2 offsets the K-weighting gain at 997 Hz (from memory)
    assert db[1] == pytest.approx(0.691, abs=0.002)
    # RLB high-pass: strong cut at 20 Hz (BS.1770-4 Fig. 2, about -13 dB; from memory)
    assert -15.0 < db[0] < -11.0


@pytest.mark.parametrize("rate_hz", [44100.0, 96000.0, 32000.0])
def test_derived_filters_at_other_rates_match_the_48_khz_response(rate_hz):
    f_hz = np.array([20.0, 38.0, 100.0, 500.0, 997.0, 1682.0, 3000.0, 8000.0, 14000.0])
    reference = response_db(kweighting_sos(48000.0), f_hz, 48000.0)
    derived = response_db(kweighting_sos(rate_hz), f_hz, rate_hz)
    np.testing.assert_allclose(derived, reference, atol=0.02)  # common practice (no source)


def test_gating_ignores_silence():
    rate_hz = 48000.0
    music = left_only(tone(rate_hz, 5.0, peak=0.3))
    with_pause = np.concatenate([music, np.zeros((10 * 48000, 2))])
    alone = integrated_loudness(music, rate_hz)
    # absolute gate at -70 LKFS (BS.1770-4 Annex 1, eq. 5): the 97 silent blocks do not
    # count. Hand computation: 5 s of tone make 47 blocks; the 3 blocks that straddle the
    # end hold 3/4, 1/2 and 1/4 of a block of tone and pass both gates.
    expected = alone + 10 * math.log10((47 + 0.75 + 0.5 + 0.25) / 50)
    assert integrated_loudness(with_pause, rate_hz) == pytest.approx(expected, abs=0.005)


def test_the_relative_gate_drops_passages_20_lu_below_the_rest():
    rate_hz = 48000.0
    loud = tone(rate_hz, 10.0, peak=0.1)  # -20 dBFS: -23.01 LKFS on one channel
    quiet = tone(rate_hz, 10.0, peak=0.01)  # 20 dB lower: below the -10 LU relative gate
    both = left_only(np.concatenate([loud, quiet]))
    # hand computation: only the loud half counts, -3.01 - 20 = -23.01 LKFS (blocks that
    # straddle the change add a little); without the gate it would read 2.97 dB lower
    assert integrated_loudness(both, rate_hz) == pytest.approx(-23.01, abs=0.1)


def test_blocks_are_400_ms_with_a_new_one_every_100_ms():
    meter = LoudnessMeter(48000.0, 1)
    meter.feed(np.ones((48000, 1)))
    # BS.1770-4 Annex 1: 1.0 s gives floor((1.0 - 0.4) / 0.1) + 1 = 7 blocks
    assert len(meter.block_powers()) == 7


def test_feeding_in_odd_chunks_gives_the_one_shot_result():
    rng = np.random.default_rng(11)
    noise = 0.1 * rng.standard_normal((3 * 44100, 2))
    one_shot = integrated_loudness(noise, 44100.0)
    for chunk in (17, 509):
        meter = LoudnessMeter(44100.0, 2)
        meter.feed(noise[:0])  # length 0 is allowed
        for start in range(0, len(noise), chunk):
            meter.feed(noise[start : start + chunk])
        assert meter.integrated_lkfs() == pytest.approx(one_shot, abs=1e-9)


def test_silence_reads_minus_infinity():
    assert integrated_loudness(np.zeros((48000, 2)), 48000.0) == -math.inf


def test_less_than_one_gating_block_is_refused():
    with pytest.raises(UserInputError, match=r"at least 0\.4 s of audio"):
        integrated_loudness(np.zeros(19000), 48000.0)


def test_matching_gain_brings_one_loudness_to_another():
    assert matching_gain(-20.0, -26.0) == pytest.approx(10 ** (-6 / 20))  # 20 log10 rule
    assert matching_gain(-math.inf, -26.0) == 1.0
