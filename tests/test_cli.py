"""The command line, run as a user runs it: python -m filtertwin."""

import csv
import json
import subprocess
import sys

import pytest

from filtertwin import examples


def run(*args, cwd=None):
    return subprocess.run(
        [sys.executable, "-m", "filtertwin", *args], capture_output=True, text=True, cwd=cwd
    )


def test_design_json_has_the_documented_shape_in_si_units():
    r = run("design", "bookshelf-2way", "--json", "--rate", "48000")
    assert r.returncode == 0, r.stderr
    data = json.loads(r.stdout)
    woofer = data["filters"][0]
    assert woofer["name"] == "woofer" and woofer["response"] == "lowpass"
    stage = woofer["stages"][0]
    assert set(stage["target"]) >= {"f0_hz", "q", "gain"}
    assert set(stage["built"]) >= {"f0_hz", "q", "gain"}
    assert stage["target"]["f0_hz"] == pytest.approx(2200.0)
    assert stage["built"]["f0_hz"] == pytest.approx(2200.0, rel=0.01)
    assert all(k[0] in "RC" for k in stage["parts"])
    assert 1e3 <= stage["parts"]["R1"] <= 1e5 and stage["parts"]["C1"] < 1e-6  # ohms, farads
    twin = woofer["twin"]
    assert twin["rate_hz"] == 48000.0 and twin["oversampling"] == 1
    assert all(len(row) == 6 and row[3] == 1.0 for row in twin["sos"])
    assert set(twin["fidelity"]) >= {"max_db", "max_deg", "at_hz", "band_hz", "stopband_error_db"}
    assert set(woofer["stopband_floor"]) == {"level_db", "at_hz", "rises_to_db"}
    assert data["filters"][1]["stopband_floor"] is None  # the tweeter is a high-pass
    assert data["amplifier"]["output_resistance_ohm"] == 50.0
    noise = woofer["noise"]
    assert noise["band_hz"] == [20.0, 20000.0] and noise["rms_a_weighted_v"] > 0
    assert data["noise"]["sum"]["rms_v"] ** 2 == pytest.approx(
        noise["rms_v"] ** 2 + data["filters"][1]["noise"]["rms_v"] ** 2  # uncorrelated ways
    )


def test_noise_band_follows_a_sensor_rate_or_the_option():
    r = run("design", "vibration-antialias", "--json", "--rate", "8000")
    noise = json.loads(r.stdout)["noise"]
    assert noise["band_hz"] == [8.0, 3600.0] and not noise["a_weighted"]  # twin's band
    r = run("design", "vibration-antialias", "--noise-band", "1", "2k")
    assert "noise 1.00 Hz to 2.00 kHz" in r.stdout
    r = run("design", "vibration-antialias", "--noise-band", "2k", "1")
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "swap them" in r.stderr


def test_every_example_designs_without_unexpected_warnings():
    for name in examples.names():
        r = run("design", name, "--json")
        assert r.returncode == 0, (name, r.stderr)
        warnings = json.loads(r.stdout)["warnings"]
        if name == "synth-resonant-lowpass":
            # this example exists to show the headroom warning of a Q = 4 stage with gain
            assert any("swing" in w["message"] for w in warnings)
        else:
            assert warnings == [], (name, warnings)


def test_table_names_filters_stages_and_parts_in_letter_code():
    r = run("design", "studio-3way")
    assert r.returncode == 0
    assert "filter 'mid' (bandpass)" in r.stdout
    assert "HP2" in r.stdout and "LP2" in r.stdout
    assert "R1=" in r.stdout and ("n " in r.stdout or "n\n" in r.stdout)


def test_bom_is_written_and_opens_as_csv(tmp_path):
    out = tmp_path / "parts.csv"
    r = run("design", "bookshelf-2way", "--bom", str(out))
    assert r.returncode == 0, r.stderr
    rows = list(csv.DictReader(out.open()))
    assert len(rows) == 16  # 2 ways x 2 stages x 4 parts
    assert {"designator", "value", "series", "tolerance", "stage", "role"} <= set(rows[0])
    assert rows[0]["series"] == "E96" and rows[0]["tolerance"] == "1%"
    assert not list(tmp_path.glob("*.tmp*"))


def test_examples_are_listed_and_usable_from_any_folder(tmp_path):
    r = run("examples", cwd=tmp_path)
    assert r.returncode == 0
    for name in ("bookshelf-2way", "studio-3way", "vibration-antialias", "bench-circuit-asbuilt"):
        assert name in r.stdout
    r = run("examples", "--copy", str(tmp_path / "mine"))
    assert r.returncode == 0 and (tmp_path / "mine" / "turntable-rumble.toml").exists()


def test_unknown_design_name_is_one_line_exit_2(tmp_path):
    r = run("design", "no-such-example", cwd=tmp_path)
    assert r.returncode == 2
    assert len(r.stderr.strip().splitlines()) == 1 and "no such design file or example" in r.stderr


def test_a_bad_option_value_is_one_line_naming_the_option(tmp_path):
    r = run("render", "bookshelf-2way", "x.wav", "--out", str(tmp_path), "--oversample", "3")
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1
    assert "argument --oversample: must be 1, 2, 4, 8, 16 or auto, got '3'" in lines[0]
    assert "see 'filtertwin render --help'" in lines[0]


def test_examples_say_once_above_the_list_that_they_are_invented(capsys):
    from filtertwin import cli, examples

    assert cli.main(["examples"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert "invented scenario" in out[0]  # STYLE: demo data says it is invented
    listed = [line.split()[0] for line in out[1:] if line.startswith("  ")]
    assert listed == examples.names()
