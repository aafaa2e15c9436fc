"""Design files: every bad input gets one line naming the file, the field, the rule and a fix."""

import subprocess
import sys
import textwrap

import pytest

from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import load_design
from filtertwin.errors import UserInputError

GOOD = """
[[filter]]
name = "lp"
response = "lowpass"
alignment = "butterworth"
order = 4
corner = "1 kHz"
"""


def write(tmp_path, text, name="d.toml"):
    p = tmp_path / name
    p.write_text(textwrap.dedent(text))
    return p


def test_a_minimal_file_loads_with_the_documented_defaults(tmp_path):
    spec = load_design(write(tmp_path, GOOD))
    f = spec.filters[0]
    assert f.corner_hz == (1000.0,) and f.order == 4 and f.topology == "unity"
    assert spec.parts.resistor_series == "E96" and spec.parts.resistor_range_ohm == (1e3, 100e3)
    assert spec.amplifier is None


def test_values_accept_letter_code_and_si_prefixes(tmp_path):
    text = GOOD.replace('"1 kHz"', '"1k5"') + '\n[parts]\nresistor_range = ["2k2", "47 kohm"]\n'
    spec = load_design(write(tmp_path, text))
    assert spec.filters[0].corner_hz == (1500.0,)  # IEC 60062 letter code
    assert spec.parts.resistor_range_ohm == (2200.0, 47000.0)


def test_output_resistance_is_read_in_ohm_and_defaults_to_the_preset(tmp_path):
    amp = '[amplifier]\npreset = "low-noise bipolar"\n'
    spec = load_design(write(tmp_path, GOOD + amp + 'output_resistance = "4R7"\n'))
    assert spec.amplifier.output_resistance_ohm == pytest.approx(4.7)  # IEC 60062 letter code
    spec = load_design(write(tmp_path, GOOD + amp + "output_resistance = 0\n"))
    assert spec.amplifier.output_resistance_ohm == 0.0
    preset = load_design(write(tmp_path, GOOD + amp)).amplifier
    assert preset.output_resistance_ohm == 50.0  # the preset's own class figure
    custom = '[amplifier]\ngbw = "1 MHz"\nswing = "13 V"\nslew = "1 V/us"\n'
    assert load_design(write(tmp_path, GOOD + custom)).amplifier.output_resistance_ohm > 0


BAD = [
    (
        "missing response",
        GOOD.replace('response = "lowpass"\n', ""),
        r"field 'filter\[1\] \('lp'\).response': missing",
    ),
    (
        "unknown field",
        GOOD + 'colour = "red"\n',
        r"'filter\[1\] \('lp'\).colour': unknown field; valid fields here",
    ),
    (
        "negative corner",
        GOOD.replace('"1 kHz"', '"-1 kHz"'),
        r"corner.*must be a positive Hz value|corner.*negative",
    ),
    ("zero corner", GOOD.replace('"1 kHz"', "0"), r"corner.*positive"),
    ("non-numeric corner", GOOD.replace('"1 kHz"', '"fast"'), r"corner.*fast"),
    (
        "unknown alignment",
        GOOD.replace("butterworth", "elliptic"),
        r"alignment': unknown value 'elliptic'; use one of: butterworth",
    ),
    (
        "order 11",
        GOOD.replace("order = 4", "order = 11"),
        r"order': order must be a whole number 1 to 10, got 11",
    ),
    (
        "order 0",
        GOOD.replace("order = 4", "order = 0"),
        r"order must be a whole number 1 to 10, got 0",
    ),
    (
        "LR order 3",
        GOOD.replace("butterworth", "linkwitz-riley").replace("order = 4", "order = 3"),
        r"Linkwitz-Riley order must be 2, 4 or 8",
    ),
    (
        "chebyshev without ripple",
        GOOD.replace("butterworth", "chebyshev"),
        r"ripple_db': Chebyshev needs a passband ripple",
    ),
    (
        "reversed band-pass",
        GOOD.replace("lowpass", "bandpass").replace('"1 kHz"', '["3k", "300"]'),
        r"band-pass corners are reversed",
    ),
    ("no filter", "[parts]\n", r"the design has no filter"),
    (
        "bad series",
        GOOD + '[parts]\nresistors = "E7"\n',
        r"unknown part series 'E7'; use one of: E3, E6",
    ),
    ("bad toml", GOOD + "name = \n", r"not valid TOML"),
    ("gain without topology", GOOD + 'gain = "6 dB"\n', r"a passband gain needs topology 'gain'"),
    (
        "unknown preset",
        GOOD + '[amplifier]\npreset = "fast one"\n',
        r"unknown amplifier preset 'fast one'",
    ),
    (
        "negative output resistance",
        GOOD + '[amplifier]\npreset = "low-noise bipolar"\noutput_resistance = "-5 ohm"\n',
        r"amplifier.output_resistance",
    ),
    (
        "output resistance in farad",
        GOOD + '[amplifier]\npreset = "low-noise bipolar"\noutput_resistance = "50 nF"\n',
        r"amplifier.output_resistance",
    ),
    (
        "capacitor as resistor",
        GOOD + '[parts]\nresistor_range = ["1nF", "100k"]\n',
        r"resistor_range",
    ),
]


@pytest.mark.parametrize("label,text,message", BAD, ids=[b[0] for b in BAD])
def test_bad_design_files_raise_one_line_naming_file_and_field(tmp_path, label, text, message):
    path = write(tmp_path, text)
    with pytest.raises(UserInputError, match=message) as info:
        build_design(load_design(path))
    text = str(info.value)
    assert text.startswith(str(path)) and "\n" not in text


def test_q_out_of_reach_of_the_parts_is_a_design_error(tmp_path):
    text = """
    [parts]
    capacitor_range = ["10n", "22n"]
    [[filter]]
    name = "peaky"
    response = "lowpass"
    [[filter.section]]
    f0 = "1 kHz"
    q = 3.0
    """
    with pytest.raises(
        UserInputError, match=r"filter 'peaky' stage 1 .*Q 3.*out of reach.*C1/C2 >= 4 Q\^2"
    ):
        build_design(load_design(write(tmp_path, text)))


def test_missing_file_is_one_line():
    with pytest.raises(UserInputError, match="no such design file"):
        load_design("/nonexistent/x.toml")


def test_the_command_exits_2_with_one_line_and_no_traceback(tmp_path):
    path = write(tmp_path, GOOD.replace("order = 4", "order = 12"))
    run = subprocess.run(
        [sys.executable, "-m", "filtertwin", "design", str(path)], capture_output=True, text=True
    )
    assert run.returncode == 2
    assert run.stdout == ""
    lines = run.stderr.strip().splitlines()
    assert len(lines) == 1 and "order must be a whole number 1 to 10, got 12" in lines[0]
    assert "Traceback" not in run.stderr
