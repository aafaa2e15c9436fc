"""Crossover check: summation of the ways, crossover points and polarity advice."""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys

import numpy as np
import pytest
import scipy.signal

from filtertwin.checks.crossover import (
    analyse_ways,
    check_crossover,
    crossover_frequency,
    order_ways,
)
from filtertwin.circuit.design import build_design, load
from filtertwin.circuit.spec import parse_design
from filtertwin.errors import UserInputError

FC = 2200.0
MINUS_6_DB = 20 * math.log10(0.5)  # -6.0206 dB: each Linkwitz-Riley way at the crossover
PLUS_3_DB = 20 * math.log10(math.sqrt(2))  # +3.0103 dB


def prototype(order: int, btype: str, squared: bool = False):
    """Exact analog Butterworth response (scipy.signal.butter), optionally squared (LR)."""
    b, a = scipy.signal.butter(order, 2 * math.pi * FC, btype=btype, analog=True)

    def response(f_hz: np.ndarray) -> np.ndarray:
        _, h = scipy.signal.freqs(b, a, worN=2 * math.pi * np.asarray(f_hz, float))
        return h * h if squared else h

    return response


def two_way(alignment: str, order: int, *, tweeter_polarity: str = "normal", **parts):
    data = {
        "parts": parts or {"resistors": "E96", "capacitors": "E48",
                           "capacitor_range": ["1n", "1u"]},
        "filter": [
            {"name": "tweeter", "response": "highpass", "alignment": alignment, "order": order,
             "corner": "2.2 kHz", "polarity": tweeter_polarity},
            {"name": "woofer", "response": "lowpass", "alignment": alignment, "order": order,
             "corner": "2.2 kHz"},
        ],
    }  # fmt: skip
    return build_design(parse_design(data, "<test>"))


def test_linkwitz_riley_4_ways_meet_at_minus_6_db_in_phase_and_sum_flat():
    # Linkwitz 1976: LR4 = Butterworth 2 squared; each way -6.02 dB and in phase at fc, the
    # sum is an all-pass (flat magnitude). Exact prototypes (scipy.signal.butter).
    check = analyse_ways(["low", "high"], [prototype(2, "low", True), prototype(2, "high", True)])
    (point,) = check.crossovers
    assert point.f_hz == pytest.approx(FC, rel=1e-9)
    assert point.level_db == pytest.approx(MINUS_6_DB, abs=1e-6)
    assert point.phase_diff_deg == pytest.approx(0.0, abs=1e-6)
    assert check.max_dev_db < 0.01
    assert check.passed and check.polarity.invert == ()


def test_butterworth_2_nulls_in_phase_and_gives_plus_3_db_with_one_way_inverted():
    # Linkwitz 1976: second-order Butterworth ways are 180 degrees apart at fc: a deep null
    # in phase, +3 dB with one way inverted (exact prototypes, scipy.signal.butter)
    low, high = prototype(2, "low"), prototype(2, "high")
    check = analyse_ways(["low", "high"], [low, high])
    (point,) = check.crossovers
    assert point.f_hz == pytest.approx(FC, rel=1e-9)
    assert point.level_db == pytest.approx(-PLUS_3_DB, abs=1e-6)  # each way -3.01 dB
    assert abs(point.phase_diff_deg) == pytest.approx(180.0, abs=1e-6)
    assert point.sum_db < -100  # the null
    assert not check.passed
    advice = check.polarity
    assert advice.invert == ("high",) and advice.best == (1, -1)
    assert advice.best_dev_db == pytest.approx(PLUS_3_DB, abs=1e-3)
    assert advice.improvement_db > 90
    assert "invert the polarity of 'high'" in advice.advice()

    inverted = analyse_ways(["low", "high"], [low, lambda f: -high(f)], polarities=[1, -1])
    assert inverted.crossovers[0].sum_db == pytest.approx(PLUS_3_DB, abs=1e-6)
    assert inverted.max_dev_db == pytest.approx(PLUS_3_DB, abs=1e-3)
    assert inverted.polarity.invert == ()


def test_crossover_frequency_is_where_the_magnitudes_are_equal():
    # first-order low-pass at 1 kHz against a first-order high-pass at 4 kHz: equal where
    # 1/(1 + (f/1k)^2) = (f/4k)^2/(1 + (f/4k)^2), i.e. f^2 = 1k * 4k -> f = 2 kHz
    def lp(f):
        return 1 / (1 + 1j * np.asarray(f) / 1000.0)

    def hp(f):
        s = 1j * np.asarray(f) / 4000.0
        return s / (1 + s)

    assert crossover_frequency(lp, hp, 20.0, 20000.0) == pytest.approx(2000.0, rel=1e-10)


def test_as_built_linkwitz_riley_design_sums_flat_within_0_01_db():
    # As-built with E96 resistors, E48 capacitors and an ideal amplifier: part rounding leaves
    # about 0.005 dB (Linkwitz 1976 for the ideal case; not exact because parts are real values)
    check = check_crossover(two_way("linkwitz-riley", 4))
    assert check.ways == ("woofer", "tweeter")  # ordered by frequency, not by file order
    assert check.max_dev_db < 0.01
    (point,) = check.crossovers
    # Linkwitz 1976: LR4 ways cross at fc, each at -6.02 dB, in phase; the E96 resistors'
    # 1.2 % half step (IEC 60063) is mostly cancelled by the synthesis' rounding to target
    assert point.f_hz == pytest.approx(FC, rel=0.002)  # Linkwitz 1976: crossing at fc
    assert point.level_db == pytest.approx(MINUS_6_DB, abs=0.01)  # Linkwitz 1976: -6.02 dB
    assert point.phase_diff_deg == pytest.approx(0.0, abs=0.2)  # Linkwitz 1976: in phase
    assert check.verdict == "PASS"


def test_as_built_butterworth_design_is_told_to_invert_the_tweeter():
    check = check_crossover(two_way("butterworth", 2))
    assert check.verdict == "FAIL"  # the in-phase null (Linkwitz 1976)
    assert check.polarity.invert == ("tweeter",)
    assert check.polarity.best_dev_db == pytest.approx(PLUS_3_DB, abs=0.05)
    fixed = check_crossover(two_way("butterworth", 2, tweeter_polarity="inverted"))
    assert fixed.crossovers[0].sum_db == pytest.approx(PLUS_3_DB, abs=0.05)
    assert fixed.polarity.invert == ()
    assert fixed.polarity.current == (1, -1)
    assert fixed.verdict == "FAIL"  # +3 dB is outside the default 1 dB
    assert check_crossover(two_way("butterworth", 2, tweeter_polarity="inverted"),
                           tolerance_db=3.1).verdict == "PASS"  # fmt: skip


def test_three_way_ways_are_ordered_low_band_high_with_two_crossovers():
    design = load("studio-3way")
    reversed_design = build_design(
        parse_design(
            {"filter": [
                {"name": "h", "response": "highpass", "alignment": "butterworth", "order": 2,
                 "corner": "3 kHz"},
                {"name": "m", "response": "bandpass", "alignment": "butterworth", "order": 2,
                 "corner": ["300", "3k"]},
                {"name": "l", "response": "lowpass", "alignment": "butterworth", "order": 2,
                 "corner": "300"},
            ]},
            "<test>",
        )
    )  # fmt: skip
    assert [f.name for f in order_ways(reversed_design.filters)] == ["l", "m", "h"]
    check = check_crossover(design)
    assert [(c.lower, c.upper) for c in check.crossovers] == [("low", "mid"), ("mid", "high")]
    assert check.crossovers[0].f_hz == pytest.approx(300.0, rel=0.01)
    assert check.crossovers[1].f_hz == pytest.approx(3000.0, rel=0.01)
    data = check.to_dict()
    assert set(data) >= {"crossovers", "sum", "polarity", "verdict"}
    assert set(data["crossovers"][0]) >= {"f_hz", "phase_diff_deg"}
    assert set(data["sum"]) >= {"max_dev_db", "band_hz"}


def test_bad_inputs_are_refused_with_what_and_how():
    with pytest.raises(UserInputError, match=r"needs at least two filters .* this design has 1"):
        check_crossover(load("candidate-bessel"))
    design = load("bookshelf-2way")
    with pytest.raises(UserInputError, match=r"band 2000 to 200 Hz is not a range"):
        check_crossover(design, band_hz=(2000.0, 200.0))
    with pytest.raises(UserInputError, match=r"tolerance 0 dB must be positive"):
        check_crossover(design, tolerance_db=0.0)
    louder = build_design(
        parse_design(
            {"filter": [
                {"name": "a", "response": "lowpass", "alignment": "butterworth", "order": 1,
                 "corner": "1 kHz", "topology": "gain", "gain": "6 dB"},
                {"name": "b", "response": "lowpass", "alignment": "butterworth", "order": 1,
                 "corner": "100 Hz"},
            ]},
            "<test>",
        )
    )  # fmt: skip
    with pytest.raises(UserInputError, match=r"never reach equal level"):
        check_crossover(louder)


@pytest.mark.parametrize(
    ("argv", "pattern"),
    [
        (["candidate-bessel"], r"needs at least two filters"),
        (["bookshelf-2way", "--band", "20k", "20"], r"band 20000 to 20 Hz is not a range"),
        (["bookshelf-2way", "--band", "low", "20k"], r"argument --band: cannot read 'low'"),
        (["bookshelf-2way", "--tolerance-db", "-1"], r"tolerance -1 dB must be positive"),
    ],
)
def test_bad_command_line_input_gives_one_line_and_status_2(argv, pattern, capsys):
    from filtertwin import cli

    assert cli.main(["crossover", *argv]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and re.search(pattern, err), err


def test_command_line_prints_json_writes_the_figure_and_refuses_one_filter(tmp_path):
    def run(*args):
        return subprocess.Popen(
            [sys.executable, "-m", "filtertwin", "crossover", *args],
            cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )  # fmt: skip

    passing = run("bookshelf-2way", "--json", "--out", "plots")
    single = run("candidate-bessel")
    out, err = passing.communicate()
    assert passing.returncode == 0, err
    data = json.loads(out)
    assert data["verdict"] == "PASS"
    assert data["crossovers"][0]["f_hz"] == pytest.approx(2200.0, rel=0.01)
    assert (tmp_path / data["files"]["figure"]).read_bytes()[:4] == b"\x89PNG"
    out, err = single.communicate()
    assert single.returncode == 2 and out == "" and err.count("\n") == 1
    assert "needs at least two filters" in err


def test_a_failing_sum_exits_with_status_1(capsys):
    from filtertwin import cli

    assert cli.main(["crossover", "studio-3way", "--tolerance-db", "0.05"]) == 1
    assert "verdict: FAIL (flat within 0.05 dB)" in capsys.readouterr().out


def test_command_defaults_agree_with_the_check():
    import inspect

    from filtertwin.commands import crossover as command

    defaults = inspect.signature(check_crossover).parameters
    assert command.DEFAULT_BAND_HZ == defaults["band_hz"].default
    assert command.DEFAULT_TOLERANCE_DB == defaults["tolerance_db"].default


def test_odd_order_butterworth_ways_sum_flat_either_way_90_degrees_apart_and_any_gain_is_told():
    # Linkwitz 1976: odd-order Butterworth low- and high-pass are in quadrature (90 degrees
    # apart) at every frequency, so the sum is flat in magnitude with either polarity
    low, high = prototype(3, "low"), prototype(3, "high")
    normal = analyse_ways(["low", "high"], [low, high])
    (point,) = normal.crossovers
    assert abs(point.phase_diff_deg) == pytest.approx(90.0, abs=1e-6)  # Linkwitz 1976
    assert normal.max_dev_db < 1e-6  # flat: Linkwitz 1976
    assert normal.polarity.quadrature
    assert "both polarities sum flat" in normal.polarity.advice()
    inverted = analyse_ways(["low", "high"], [low, lambda f: -high(f)])
    assert inverted.max_dev_db < 1e-6 and inverted.polarity.invert == ()  # Linkwitz 1976


def test_a_small_improvement_from_the_other_polarity_is_reported_not_hidden():
    # As built (E96 / E12 parts), 3rd-order Butterworth ways with the tweeter inverted: both
    # choices are nearly flat (Linkwitz 1976), part rounding makes normal slightly flatter
    inverted = check_crossover(two_way("butterworth", 3, tweeter_polarity="inverted",
                                       capacitors="E12"))  # fmt: skip
    normal = check_crossover(two_way("butterworth", 3, capacitors="E12"))
    advice = inverted.polarity
    assert advice.best_dev_db == pytest.approx(normal.max_dev_db, abs=1e-9)  # the same sum
    assert 0.001 <= advice.improvement_db < 0.1 and advice.invert == ()
    text = advice.advice()
    assert text.startswith("keep the polarities, or invert 'tweeter' for a slightly flatter sum")
    assert f"{advice.current_dev_db:.3f} -> {advice.best_dev_db:.3f} dB" in text
    assert "both polarities sum flat (odd order)" in text  # Linkwitz 1976: 90 degrees apart
