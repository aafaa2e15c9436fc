"""Live edits of a candidate (parts and corners) and the level matching after them."""

import math

import pytest

from filtertwin import examples
from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import load_design
from filtertwin.errors import UserInputError
from filtertwin.live.edits import (
    PartEdit,
    describe_stage,
    edit_corner,
    edit_part,
    format_part,
    parse_corner,
    parse_part,
)

# IEC 60063:2015, E12 series (the examples' capacitor series)
E12 = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]


def load(name):
    return build_design(load_design(examples.resolve(name)))


def unity_lowpass_f0_q(parts):
    """Unity-gain Sallen-Key low-pass, textbook closed form (R1 input, C1 feedback):
    f0 = 1 / (2 pi sqrt(R1 R2 C1 C2)), Q = sqrt(R1 R2 C1 C2) / (C2 (R1 + R2))."""
    r1, r2, c1, c2 = parts["R1"], parts["R2"], parts["C1"], parts["C2"]
    root = math.sqrt(r1 * r2 * c1 * c2)
    return 1 / (2 * math.pi * root), root / (c2 * (r1 + r2))


@pytest.mark.parametrize(
    ("words", "expected"),
    [
        (["low", "2", "C1", "+1"], PartEdit("low", 2, "C1", "+1")),
        (["2", "c2", "22n"], PartEdit(None, 2, "C2", "22n")),
        (["woofer", "R1", "-2"], PartEdit("woofer", None, "R1", "-2")),
        (["RF", "10k"], PartEdit(None, None, "RF", "10k")),
    ],
)
def test_part_commands_name_way_stage_part_and_change(words, expected):
    assert parse_part(words) == expected


@pytest.mark.parametrize(
    ("words", "message"),
    [
        (["low", "2", "L1", "+1"], r"'L1' is not a part name; use one of R1, R2, C1, C2, RF, RG"),
        (["low", "two", "C1", "+1"], r"stage 'two' is not a stage number"),
    ],
)
def test_a_wrong_part_command_says_how_to_write_it(words, message):
    with pytest.raises(UserInputError, match=message):
        parse_part(words)


def test_corner_commands_take_an_optional_way_and_one_or_two_frequencies():
    assert parse_corner(["low", "2.5k"]).corners_hz == (2500.0,)
    assert parse_corner(["2k5"]).way is None
    assert parse_corner(["mid", "350", "2.8k"]).corners_hz == (350.0, 2800.0)
    with pytest.raises(UserInputError, match=r"corner 'soon'"):
        parse_corner(["low", "soon"])


def test_stepping_a_capacitor_moves_one_e12_value_and_rebuilds_the_stage_from_its_parts():
    design = load("candidate-butterworth")
    before = design.filter("topcut").stages[1].circuit.parts()["C1"]
    edited, old_stage, value = edit_part(design, "topcut", PartEdit(None, 2, "C1", "+1"))
    mantissa = before / 10 ** math.floor(math.log10(before))
    nxt = E12[(E12.index(round(mantissa, 1)) + 1) % 12]  # IEC 60063 E12 table
    expected = nxt * 10 ** math.floor(math.log10(before)) * (10 if nxt < mantissa else 1)
    assert value == pytest.approx(expected, rel=1e-12)
    f = edited.filter("topcut")
    assert f.spec.kind == "built"
    stage = f.stages[1]
    assert stage.circuit.parts()["C1"] == value
    assert stage.circuit.parts()["R1"] == old_stage.circuit.parts()["R1"]  # others unchanged
    assert f.stages[0].circuit == design.filter("topcut").stages[0].circuit
    f0, q = unity_lowpass_f0_q(stage.circuit.parts())
    assert stage.ideal.f0_hz == pytest.approx(f0, rel=1e-9)  # textbook closed form
    assert stage.ideal.q == pytest.approx(q, rel=1e-9)
    assert edited.amplifier == design.amplifier  # the amplifier model is kept


def test_setting_a_part_by_value_and_the_other_ways_stay_as_designed():
    design = load("bookshelf-2way")
    edited, _, value = edit_part(design, "woofer", PartEdit("low", 1, "R1", "4k7"))
    assert value == 4700.0  # IEC 60062 letter code
    assert edited.filter("woofer").stages[0].circuit.r1 == 4700.0
    assert edited.filter("tweeter").spec == design.filter("tweeter").spec
    assert edited.filter("tweeter").stages[0].circuit == design.filter("tweeter").stages[0].circuit


def test_a_band_pass_way_keeps_its_high_pass_and_low_pass_stages_after_a_part_edit():
    design = load("studio-3way")
    edited, _, _ = edit_part(design, "mid", PartEdit("mid", 3, "R2", "+1"))
    responses = [s.circuit.response for s in edited.filter("mid").stages]
    assert responses == [s.circuit.response for s in design.filter("mid").stages]


@pytest.mark.parametrize(
    ("edit", "message"),
    [
        (PartEdit(None, 3, "C1", "+1"), r"'topcut' has stages 1 to 2, there is no stage 3"),
        (PartEdit(None, 1, "RF", "+1"), r"stage 1 of 'topcut' has no RF; its parts are R1, R2"),
        (PartEdit(None, None, "C1", "+1"), r"'topcut' has 2 stages; say which"),
        (PartEdit(None, 1, "C1", "big"), r"C1 change 'big'"),
    ],
)
def test_an_impossible_part_edit_is_refused_in_one_line(edit, message):
    with pytest.raises(UserInputError, match=message):
        edit_part(load("candidate-butterworth"), "topcut", edit)


def test_moving_the_corner_redesigns_the_filter_around_the_new_corner():
    design = load("candidate-butterworth")
    edited = edit_corner(design, "topcut", (2500.0,))
    f = edited.filter("topcut")
    assert f.spec.corner_hz == (2500.0,) and f.spec.alignment == "butterworth"
    # Butterworth: every pole pair has f0 at the corner (textbook); E-series parts: within 3 %
    for stage in f.stages:
        assert stage.ideal.f0_hz == pytest.approx(2500.0, rel=0.03)
    assert "kHz" in describe_stage(f.stages[0]) and "Q " in describe_stage(f.stages[0])


def test_a_band_pass_corner_takes_two_frequencies_in_order():
    design = load("studio-3way")
    edited = edit_corner(design, "mid", (350.0, 2800.0))
    assert edited.filter("mid").spec.corner_hz == (350.0, 2800.0)
    with pytest.raises(UserInputError, match=r"takes 2 corner\(s\), got 1"):
        edit_corner(design, "mid", (350.0,))
    with pytest.raises(UserInputError, match=r"lower corner first"):
        edit_corner(design, "mid", (2800.0, 350.0))


def test_a_filter_given_by_its_parts_has_no_corner_to_move():
    with pytest.raises(UserInputError, match=r"'bench' is given by its parts"):
        edit_corner(load("bench-circuit-asbuilt"), "bench", (1000.0,))


def test_part_values_print_in_letter_code():
    assert format_part("C1", 2.7e-8) == "C1 = 27n"  # IEC 60062
    assert format_part("R1", 4700.0) == "R1 = 4k7"
