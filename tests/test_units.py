"""Tests of filtertwin.circuit.units against the IEC 60062 letter code and SI prefixes."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from filtertwin.circuit import eseries
from filtertwin.circuit.units import format_letter_code, format_si, parse_quantity


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # IEC 60062:2016 letter code, the letter standing for the decimal point (from memory)
        ("4k7", 4.7e3),
        ("4K7", 4.7e3),  # IEC 60062 writes kilo-ohm as upper-case K (from memory)
        ("2n2", 2.2e-9),
        ("R47", 0.47),
        ("4R7", 4.7),
        ("47R", 47.0),
        ("1M5", 1.5e6),
        ("3m3", 3.3e-3),
        ("p47", 0.47e-12),
        ("4F7", 4.7),
        ("12k1", 12.1e3),
        ("1k02", 1.02e3),
        ("2G2", 2.2e9),
        # SI brochure, 9th ed. (2019), table 7: prefixes p n µ m k M G
        ("100p", 100e-12),
        ("10u", 10e-6),
        ("10\u00b5", 10e-6),  # MICRO SIGN
        ("10\u03bc", 10e-6),  # GREEK SMALL LETTER MU
        ("4.7k", 4.7e3),
        ("2.2nF", 2.2e-9),
        ("10uF", 10e-6),
        ("47kohm", 47e3),
        ("47k\u03a9", 47e3),  # GREEK CAPITAL LETTER OMEGA
        ("47k\u2126", 47e3),  # OHM SIGN
        ("47 kohms", 47e3),
        ("1.5 MHz", 1.5e6),
        ("20 kHz", 20e3),
        ("100 mV", 0.1),
        ("10 ms", 0.01),
        ("2 A", 2.0),
        # plain numbers (Python float syntax)
        ("4700", 4700.0),
        ("1e3", 1000.0),
        ("0.47", 0.47),
        (".5", 0.5),
        ("  12k1 ", 12.1e3),
        ("0", 0.0),
    ],
)
def test_parse_quantity_reads_letter_code_si_prefixes_and_plain_numbers(text, expected):
    # exact equality: the float nearest the decimal value, no product rounding error
    assert parse_quantity(text) == expected


@pytest.mark.parametrize("number", [4700, 4.7e3, np.float64(4700.0), np.int64(4700)])
def test_parse_quantity_passes_numbers_through_as_floats(number):
    value = parse_quantity(number, "ohm")
    assert value == 4700.0 and type(value) is float


@pytest.mark.parametrize(
    ("text", "unit"),
    [("10uF", "F"), ("4k7", "ohm"), ("4R7", "ohm"), ("47kΩ", "ohm"), ("1.5 MHz", "Hz"),
     ("100", "V"), ("2n2", "F"), ("4F7", "F")],
)  # fmt: skip
def test_parse_quantity_accepts_a_matching_or_missing_unit(text, unit):
    assert parse_quantity(text, unit) == parse_quantity(text)


@pytest.mark.parametrize(
    ("text", "unit", "match"),
    [
        ("10uF", "ohm", r"'10uF' as a value in ohm: it is written in F"),
        ("4R7", "F", r"'4R7' as a value in F: it is written in ohm"),
        ("47kohm", "Hz", r"in Hz: it is written in ohm"),
        ("4F7", "ohm", r"in ohm: it is written in F"),
    ],
)
def test_parse_quantity_rejects_a_unit_that_does_not_match(text, unit, match):
    with pytest.raises(ValueError, match=match):
        parse_quantity(text, unit)


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("", r"cannot read '' as a value: it is empty"),
        ("   ", r"it is empty"),
        ("abc", r"cannot read 'abc' as a value: not a number"),
        ("nan", r"not a number"),
        ("1.2.3", r"not a number"),
        ("4k7.1", r"'4k7.1' as a value: it has two decimal markers"),
        ("4.7k1", r"two decimal markers"),
        ("10x", r"unknown suffix 'x'"),
        ("10 kx", r"unknown suffix 'x'"),
        ("47kR", r"unknown suffix 'R'"),
        ("4R7F", r"the letter 'R' means ohm but the unit is F"),
        ("-4k7", r"it is negative"),
        ("1e999", r"it is not finite"),
    ],
)
def test_parse_quantity_rejects_bad_text_naming_it_and_the_accepted_forms(text, match):
    with pytest.raises(ValueError, match=match) as caught:
        parse_quantity(text)
    message = str(caught.value)
    assert "\n" not in message
    if "negative" not in message:
        assert "write e.g. 4700, 4.7k, 4k7, 2n2, R47" in message


@pytest.mark.parametrize("number", [math.nan, math.inf, -math.inf])
def test_parse_quantity_rejects_numbers_that_are_not_finite(number):
    with pytest.raises(ValueError, match="it is not finite"):
        parse_quantity(number, allow_negative=True)


def test_parse_quantity_accepts_negative_values_only_when_asked():
    with pytest.raises(ValueError, match="it is negative"):
        parse_quantity(-3.0)
    assert parse_quantity("-3.01", "V", allow_negative=True) == -3.01
    assert parse_quantity("-100 mV", allow_negative=True) == -0.1
    assert math.copysign(1.0, parse_quantity("-0")) == 1.0  # no negative zero


@pytest.mark.parametrize("thing", [True, None, [4700], b"4k7"])
def test_parse_quantity_rejects_things_that_are_neither_text_nor_numbers(thing):
    with pytest.raises(TypeError, match="a value must be text or a number"):
        parse_quantity(thing)


def test_parse_quantity_rejects_an_unknown_expected_unit():
    with pytest.raises(ValueError, match=r"unit must be one of F, ohm, Hz, V, A, s or None"):
        parse_quantity("4k7", "kohm")


@pytest.mark.parametrize(
    ("value", "kind", "expected"),
    [
        # IEC 60062:2016 letter code examples (from memory), SI lower-case k
        (4700.0, "R", "4k7"),
        (4.7, "R", "4R7"),
        (0.47, "R", "R47"),
        (47.0, "R", "47R"),
        (470.0, "R", "470R"),
        (10e3, "R", "10k"),
        (1.5e6, "R", "1M5"),
        (12.1e3, "R", "12k1"),
        (1.02e3, "R", "1k02"),
        (0.047, "R", "R047"),
        (2.2e-9, "C", "2n2"),
        (100e-12, "C", "100p"),
        (1e-6, "C", "1u"),
        (4.7e-6, "C", "4u7"),
        (0.47e-12, "C", "p47"),
        (3.3e-3, "C", "3m3"),
        (4.7, "C", "4F7"),
    ],
)
def test_format_letter_code_writes_the_iec_60062_code(value, kind, expected):
    assert format_letter_code(value, kind) == expected


def test_format_letter_code_rounds_to_three_significant_figures():
    # three significant figures, as the E192 values (IEC 60063:2015)
    assert format_letter_code(4712.0, "R") == "4k71"
    assert format_letter_code(999.6, "R") == "1k"
    assert format_letter_code(2.2e-9 * (1 + 1e-12), "C") == "2n2"


@pytest.mark.parametrize(
    ("value", "kind", "match"),
    [
        (0.0, "R", "value must be a finite positive number"),
        (-1.0, "C", "value must be a finite positive number"),
        (math.nan, "R", "value must be a finite positive number"),
        (1.0, "L", 'unit_kind must be "R" or "C"'),
    ],
)
def test_format_letter_code_rejects_bad_arguments(value, kind, match):
    with pytest.raises(ValueError, match=match):
        format_letter_code(value, kind)


_E192 = eseries.mantissas("E192")
_KIND_UNIT = {"R": "ohm", "C": "F"}


@pytest.mark.parametrize("kind", ["R", "C"])
def test_every_e192_value_in_every_decade_survives_format_and_parse(kind):
    # IEC 60063:2015 E192 values times 1e-12 .. 1e7, IEC 60062:2016 letter code round trip
    worst = 0.0
    for decade in range(-12, 8):
        for mantissa in _E192:
            value = float(f"{mantissa:.2f}e{decade}")
            back = parse_quantity(format_letter_code(value, kind), _KIND_UNIT[kind])
            worst = max(worst, abs(back - value) / value)
    assert worst <= 1e-12


@settings(max_examples=300, deadline=None)
@given(
    index=st.integers(min_value=0, max_value=191),
    decade=st.integers(min_value=-12, max_value=7),
    kind=st.sampled_from(["R", "C"]),
)
def test_letter_code_round_trip_holds_for_any_e192_value(index, decade, kind):
    value = float(_E192[index]) * 10.0**decade  # float noise on purpose
    text = format_letter_code(value, kind)
    assert math.isclose(parse_quantity(text, _KIND_UNIT[kind]), value, rel_tol=1e-12)


@settings(max_examples=300, deadline=None)
@given(
    value=st.floats(min_value=1e-13, max_value=1e11),
    kind=st.sampled_from(["R", "C"]),
)
def test_letter_code_of_any_value_reads_back_within_three_figure_rounding(value, kind):
    # three significant figures: relative rounding error at most 0.5 / 100
    back = parse_quantity(format_letter_code(value, kind), _KIND_UNIT[kind])
    assert abs(back - value) <= 0.005 * value * (1 + 1e-12)


@pytest.mark.parametrize(
    ("value", "unit", "digits", "expected"),
    [
        # SI brochure, 9th ed. (2019): prefixes in steps of 10**3
        (1234.0, "Hz", 4, "1.234 kHz"),
        (10e-9, "F", 4, "10.00 nF"),
        (0.0, "Hz", 4, "0 Hz"),
        (-0.25, "V", 4, "-250.0 mV"),
        (4.7e-6, "F", 2, "4.7 \u00b5F"),
        (47e3, "ohm", 3, "47.0 kohm"),
        (999.96, "Hz", 4, "1.000 kHz"),  # rounding carries into the next prefix
        (1.5e12, "Hz", 4, "1500 GHz"),  # beyond G: more digits
        (1e-15, "F", 4, "0.001000 pF"),  # below p: leading zeros
        (3.0, "", 3, "3.00"),
        (123456.0, "Hz", 1, "100 kHz"),
    ],
)
def test_format_si_writes_a_prefix_and_fixed_significant_digits(value, unit, digits, expected):
    assert format_si(value, unit, digits) == expected


def test_format_si_rejects_fewer_than_one_digit():
    with pytest.raises(ValueError, match="digits must be an integer >= 1"):
        format_si(1.0, "Hz", 0)


@settings(max_examples=300, deadline=None)
@given(
    value=st.floats(min_value=-1e11, max_value=1e11).filter(lambda v: abs(v) > 1e-13),
    unit=st.sampled_from(["Hz", "F", "ohm", "V"]),
    digits=st.integers(min_value=1, max_value=8),
)
def test_format_si_reads_back_within_its_rounding(value, unit, digits):
    # rounding to `digits` significant figures: relative error at most 0.5 * 10**(1 - digits)
    back = parse_quantity(format_si(value, unit, digits), unit, allow_negative=True)
    assert abs(back - value) <= 0.5 * 10.0 ** (1 - digits) * abs(value) * (1 + 1e-9)


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        # SI brochure 9th ed. (2019) 3: unit symbols are case-sensitive, but these wrong-case
        # spellings name no other unit or prefix, so a person means the value shown
        ("2.2 kHZ", "Hz", 2.2e3),
        ("1 hz", "Hz", 1.0),
        ("10 nf", "F", 10e-9),
        ("10 uf", "F", 10e-6),
        ("100 pf", "F", 100e-12),
        ("4.7 kOHM", "ohm", 4.7e3),
        ("2 ma", "A", 2e-3),
        ("500 mv", "V", 0.5),
    ],
)
def test_unit_letters_in_the_wrong_case_are_read_when_nothing_is_ambiguous(text, unit, expected):
    assert parse_quantity(text, unit) == pytest.approx(expected, rel=1e-15)  # SI brochure 3


def test_prefixes_keep_their_case_milli_is_not_mega():
    # SI brochure 9th ed. (2019) table 7: m = 1e-3, M = 1e6
    assert parse_quantity("1 mHz") == pytest.approx(1e-3)
    assert parse_quantity("1 MHz") == pytest.approx(1e6)
    with pytest.raises(ValueError, match=r"'N' is not a prefix .*; write nF$"):
        parse_quantity("10 NF")


@pytest.mark.parametrize(
    ("text", "match"),
    [
        (
            "10mf",
            r"'mf' could mean millifarads or .* microfarads; write mF for millifarads or "
            r"uF for microfarads$",
        ),  # fmt: skip
        ("10 f", r"a lone 'f' could be a prefix \(femto\) rather than F; write F for farads$"),
        ("10 Mf", r"'mf' could mean millifarads or .* microfarads; write mF for"),
        ("10 S", r"unknown suffix 'S'"),
    ],
)
def test_ambiguous_unit_letters_are_refused_with_one_fix(text, match):
    with pytest.raises(ValueError, match=match) as caught:
        parse_quantity(text)
    assert str(caught.value).count("; ") == 1  # one fix, not two


def test_a_refusal_in_a_design_file_gives_one_fix(tmp_path):
    from filtertwin.circuit.spec import load_design

    path = tmp_path / "d.toml"
    path.write_text('[[filter]]\nname = "lp"\nresponse = "lowpass"\nalignment = "butterworth"\n'
                    'order = 2\ncorner = "2.2 kQ"\n')  # fmt: skip
    with pytest.raises(
        ValueError, match=r"unknown suffix 'Q' \(units: [^;]*\); write it like"
    ) as e:
        load_design(path)
    assert str(e.value).count("; ") == 1 and "write e.g." not in str(e.value)


def test_a_frequency_option_refusal_gives_an_example_in_hertz():
    with pytest.raises(ValueError, match=r"unknown suffix 'Q' .*; write e.g. 1.5 kHz, 1k5"):
        parse_quantity("4Q", "Hz")
