"""Candidates, their ways, output routing and level matching for `filtertwin listen`."""

import math

import numpy as np
import pytest
from scipy import signal

from filtertwin import examples
from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import load_design, parse_design
from filtertwin.digital.twin import build_twin
from filtertwin.errors import UserInputError
from filtertwin.live import candidates as cands
from filtertwin.live.loudness import integrated_loudness
from filtertwin.live.matching import (
    describe,
    match_by_gain,
    match_by_loudness,
    no_match,
    twin_output,
)
from filtertwin.live.mixer import Selection
from filtertwin.live.routing import (
    STEREO_MIX,
    bypass_warning,
    low_reaching_high_ways,
    pair_gains,
)

RATE_HZ = 48000.0


def load(name):
    return build_design(load_design(examples.resolve(name)))


def lowpass(gain: str | None = None, name: str = "lp"):
    table = {"name": name, "response": "lowpass", "alignment": "butterworth", "order": 2,
             "corner": "3k"}  # fmt: skip
    if gain is not None:
        table |= {"topology": "gain", "gain": gain}
    return build_design(parse_design({"filter": [table]}, f"{name}.toml"))


def test_ways_are_named_by_what_each_filter_passes():
    assert cands.way_names(load("studio-3way")) == ("low", "mid", "high")
    assert cands.way_names(load("bookshelf-2way")) == ("low", "high")  # woofer, tweeter
    assert cands.way_names(load("turntable-rumble")) == ("high",)


def test_two_filters_of_the_same_kind_cannot_be_two_ways():
    two = {"filter": [{"name": n, "response": "lowpass", "alignment": "bessel", "order": 2,
                       "corner": c} for n, c in (("a", "1k"), ("b", "2k"))]}  # fmt: skip
    with pytest.raises(UserInputError, match=r"two.toml: filters a, b are all low ways"):
        cands.way_names(build_design(parse_design(two, "two.toml")))


def test_candidates_are_labelled_in_order_and_a_repeated_name_is_told_apart():
    design = load("candidate-bessel")
    made = cands.make_candidates([("x", design), ("y", design), ("x", design)])
    assert [(c.label, c.name) for c in made] == [("A", "x"), ("B", "y"), ("C", "x (2)")]
    with pytest.raises(UserInputError, match=r"give 1 to 9 designs"):
        cands.make_candidates([])


def test_a_way_is_found_by_its_way_name_or_its_filter_name():
    (c,) = cands.make_candidates([("b", load("bookshelf-2way"))])
    assert c.filter_of("high") == "tweeter" and c.filter_of("woofer") == "woofer"
    with pytest.raises(UserInputError, match=r"no way 'mid'; its ways are low \(woofer\)"):
        c.filter_of("mid")


def test_chains_run_candidate_by_candidate_and_way_by_way():
    made = cands.make_candidates([("3", load("studio-3way")), ("2", load("bookshelf-2way"))])
    twins = cands.build_twins(made, RATE_HZ)
    sos, levels = cands.chains(twins)
    assert len(sos) == len(levels) == 5
    np.testing.assert_array_equal(sos[3], twins[1].filters[0].sos)
    assert cands.chain_index(made, 1, 1) == 4
    assert cands.output_ways(made) == ("low", "mid", "high")


def test_the_stereo_mix_sums_the_selected_candidates_ways_onto_one_pair():
    made = cands.make_candidates([("3", load("studio-3way")), ("2", load("bookshelf-2way"))])
    layout = cands.layout(made, [0.5, 1.0])
    (gains,) = pair_gains(layout, Selection(candidate=0), STEREO_MIX)
    np.testing.assert_array_equal(gains, [0.5, 0.5, 0.5, 0, 0, 0])


def test_ways_out_sends_each_way_only_to_its_own_pair_and_bypass_to_every_pair():
    made = cands.make_candidates([("3", load("studio-3way")), ("2", load("bookshelf-2way"))])
    layout = cands.layout(made)
    ways = cands.output_ways(made)
    low, mid, high = pair_gains(layout, Selection(candidate=1), ways)
    np.testing.assert_array_equal(low, [0, 0, 0, 1, 0, 0])
    np.testing.assert_array_equal(mid, [0, 0, 0, 0, 0, 0])  # the 2-way has no mid
    np.testing.assert_array_equal(high, [0, 0, 0, 0, 1, 0])
    for pair in pair_gains(layout, Selection(candidate=None), ways):
        np.testing.assert_array_equal(pair, [0, 0, 0, 0, 0, 1])
    solo = pair_gains(layout, Selection(candidate=0, solo="mid"), ways)
    assert [float(g.sum()) for g in solo] == [0.0, 1.0, 0.0]  # a solo never moves a way


def test_bypass_needs_a_warning_only_when_a_pair_feeds_a_mid_or_high_driver():
    assert bypass_warning(STEREO_MIX) is None
    assert bypass_warning(("low",)) is None
    text = bypass_warning(("low", "mid", "high"))
    assert "mid (channels 3-4), high (channels 5-6)" in text and "destroyed" in text


def test_gain_matching_turns_the_louder_candidate_down_by_its_passband_gain():
    match = match_by_gain([lowpass(), lowpass("6 dB", "loud")])
    # hand computation: 20 log10(2) = 6.0206 dB
    assert match.offsets_db() == pytest.approx((0.0, -20 * math.log10(2)), abs=1e-9)
    assert match.bypass_gain == 1.0


def test_loudness_matching_finds_the_gain_difference_on_a_program():
    rng = np.random.default_rng(3)
    frames = int(3 * RATE_HZ)
    sos = signal.butter(2, [100, 1000], btype="band", fs=RATE_HZ, output="sos")
    program = 0.1 * signal.sosfilt(sos, rng.standard_normal((frames, 2)), axis=0)
    made = cands.make_candidates([("a", lowpass()), ("b", lowpass("6 dB", "loud"))])
    twins = cands.build_twins(made, RATE_HZ)
    match = match_by_loudness(program, RATE_HZ, twins)
    # BS.1770 loudness is 10 log10 of a gated mean power: a gain g adds 20 log10 g; the two
    # circuits (different parts) agree within 0.01 dB below 1 kHz, where the program is
    assert match.levels[1] - match.levels[0] == pytest.approx(20 * math.log10(2), abs=0.01)
    assert match.gains == pytest.approx((1.0, 0.5), rel=2e-3)
    assert match.gains[1] == pytest.approx(10 ** ((match.levels[0] - match.levels[1]) / 20))
    assert match.levels[0] == pytest.approx(  # the whole signal at once, BS.1770 meter
        integrated_loudness(twin_output(program, twins[0]), RATE_HZ), abs=1e-9
    )
    assert match.bypass_level == pytest.approx(integrated_loudness(program, RATE_HZ), abs=1e-9)
    line = describe(match, ["A", "B"])
    assert "A +0.0 dB" in line and "B -6.0 dB" in line and "LKFS" in line


def test_the_program_through_a_twin_is_what_sosfilt_gives_below_the_swing():
    twin = build_twin(load("bookshelf-2way"), RATE_HZ, oversampling=1)
    x = 0.1 * np.random.default_rng(1).standard_normal((10000, 2))
    expected = sum(signal.sosfilt(f.sos, x, axis=0) for f in twin.filters)  # scipy sosfilt
    np.testing.assert_allclose(twin_output(x, twin), expected, rtol=0, atol=1e-13)


def test_candidates_run_at_the_oversampling_render_picks_and_say_so():
    made = cands.make_candidates([("b", load("bookshelf-2way")), ("r", load("turntable-rumble"))])
    twins = cands.build_twins(made, RATE_HZ)
    picked = [build_twin(c.design, RATE_HZ, oversampling="auto").oversampling for c in made]
    assert {t.oversampling for t in twins} == {max(picked)}  # one runner, one rate
    lines = cands.fidelity_lines(made, twins)
    assert len(lines) == 3 and lines[0].startswith("A b 'woofer': twin at ")
    assert all(f"oversampled {max(picked)}x, linear-phase resampling" in line for line in lines)


def test_loudness_matching_needs_an_audio_rate():
    with pytest.raises(UserInputError, match=r"8 kHz or more.*use --match gain"):
        match_by_loudness(np.zeros((1000, 1)), 1000.0, [])


def test_matching_off_leaves_every_level_alone():
    assert describe(no_match(2), ["A", "B"]).startswith("level match: off")


def test_a_high_pass_that_reaches_into_the_bass_is_flagged_before_ways_out():
    made = cands.make_candidates([("b", load("bookshelf-2way")), ("r", load("turntable-rumble"))])
    warnings = low_reaching_high_ways(made)
    assert len(warnings) == 1  # the 2.2 kHz tweeter way is fine, the 18 Hz rumble filter is not
    assert "high way of B (rumble) reaches down to" in warnings[0] and "tweeter" in warnings[0]
