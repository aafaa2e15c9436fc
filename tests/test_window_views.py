"""What the preview window computes, without a browser or a stream: the spectrum, the tap,
the response curves and stage cards, and "save as"."""

import math
import tomllib

import numpy as np
import pytest
from scipy import signal

from filtertwin import examples
from filtertwin.circuit import sallenkey
from filtertwin.circuit.design import build_design, with_built_filters
from filtertwin.circuit.spec import load_design
from filtertwin.digital.twin import build_twin
from filtertwin.errors import UserInputError
from filtertwin.live.candidates import way_names
from filtertwin.live.edits import PartEdit, edit_corner, edit_part
from filtertwin.live.tap import SignalTap
from filtertwin.live.window import savefile, views

RATE_HZ = 48000.0


def load(name):
    return build_design(load_design(examples.resolve(name)))


@pytest.mark.parametrize("level_dbfs", [0.0, -20.0, -57.5])
def test_a_sine_reads_its_level_in_dbfs_in_the_band_that_holds_it(level_dbfs):
    f_hz = 997.0
    n = np.arange(views.SPECTRUM_FRAMES)
    x = 10 ** (level_dbfs / 20) * np.sin(2 * np.pi * f_hz * n / RATE_HZ)
    bands = views.spectrum_db(x, RATE_HZ)
    edges = views.spectrum_grid_hz(RATE_HZ)
    band = int(np.searchsorted(edges, f_hz)) - 1
    # a full-scale sine is 0 dBFS (AES17 convention); the Hann window's scalloping loss is
    # at most 1.42 dB between bins (Harris 1978, table 1)
    assert bands[band] <= level_dbfs + 0.01
    assert bands[band] >= level_dbfs - 1.43
    assert max(bands[: band - 8]) < level_dbfs - 40  # far bands hold only leakage


def test_the_tap_keeps_the_latest_frames_in_order_and_averages_the_channels():
    tap = SignalTap(64)
    rng = np.random.default_rng(0)
    dry = rng.standard_normal((200, 2)).astype(np.float32)
    out = rng.standard_normal((200, 4)).astype(np.float32)
    for k in range(0, 200, 25):
        tap.write(dry[k : k + 25], out[k : k + 25])
    got_dry, got_out, written = tap.latest(50)
    assert written == 200
    np.testing.assert_allclose(got_dry, dry[150:].astype(np.float64).mean(axis=1), atol=1e-6)
    np.testing.assert_allclose(got_out, out[150:, :2].astype(np.float64).mean(axis=1), atol=1e-6)
    empty = SignalTap(64)
    assert np.all(empty.latest(10)[0] == 0)


def test_the_response_curves_are_the_analog_stages_and_the_twin_s_sections():
    design = load("bookshelf-2way")
    twin = build_twin(design, RATE_HZ)
    ways = way_names(design)
    f = views.plot_grid_hz(RATE_HZ)
    curves = views.response_curves(ways, design, twin, f)
    total = np.zeros(len(f), complex)
    for k, filt in enumerate(design.filters):
        # scipy.signal.freqs of each stage's node-equation polynomials, multiplied
        h = np.ones(len(f), complex)
        for stage in filt.stages:
            h *= signal.freqs(stage.built.b, stage.built.a, worN=2 * np.pi * f)[1]
        h *= filt.polarity
        total += h
        expected_db = np.maximum(20 * np.log10(np.abs(h)), views.FLOOR_DB)
        np.testing.assert_allclose(curves["ways"][k]["analog_db"], expected_db, atol=2e-3)
        # scipy.signal.sosfreqz of the twin's sections
        ht = signal.sosfreqz(twin.filters[k].sos, worN=f, fs=RATE_HZ)[1]
        expected_twin_db = np.maximum(20 * np.log10(np.abs(ht)), views.FLOOR_DB)  # the floor
        np.testing.assert_allclose(curves["ways"][k]["twin_db"], expected_twin_db, atol=2e-3)
    expected_sum_db = np.maximum(20 * np.log10(np.abs(total)), views.FLOOR_DB)
    np.testing.assert_allclose(curves["sum"]["analog_db"], expected_sum_db, atol=2e-3)
    # Linkwitz 1976: an LR4 crossover sums flat (all-pass): within the E96/E12 rounding
    assert max(abs(v) for v in curves["sum"]["analog_db"]) < 0.5


def test_a_card_shows_the_parts_in_letter_code_and_the_stage_s_own_f0_and_q():
    design = load("candidate-butterworth")
    edited, _, _ = edit_part(design, "topcut", PartEdit(None, 2, "C1", "+1"))
    cards = views.stage_cards(("low",), edited, design, ())
    card = cards[1]
    assert [p["name"] for p in card["parts"]] == ["R1", "R2", "C1", "C2"]
    c1 = next(p for p in card["parts"] if p["name"] == "C1")
    assert c1["text"] == "33n" and c1["series"] == "E12"  # IEC 60062 letter code, E12 step
    model = sallenkey.analyze(edited.filter("topcut").stages[1].circuit, edited.amplifier)
    assert card["built_f0_hz"] == model.f0_hz and card["built_q"] == model.q
    # the edited stage has no target of its own: the card keeps the original design's
    assert card["target_f0_hz"] == pytest.approx(design.filter("topcut").stages[1].target.f0_hz)


def test_save_as_writes_a_new_design_file_that_reads_back_to_the_same_parts(tmp_path):
    design = load("bookshelf-2way")
    edited, _, _ = edit_part(design, "woofer", PartEdit("low", 1, "C1", "+1"))
    edited = edit_corner(edited, "tweeter", (2500.0,))
    path = savefile.save_design(edited, tmp_path / "my-build.toml")
    again = build_design(load_design(path))
    for a, b in zip(edited.filters, again.filters, strict=True):
        assert [s.circuit for s in a.stages] == [s.circuit for s in b.stages]
    assert again.filter("tweeter").spec.corner_hz == (2500.0,)
    assert again.filter("woofer").spec.kind == "built"
    document = tomllib.loads(path.read_text())
    assert document["amplifier"] == {"preset": "audio dual bipolar"}  # kept as written
    with pytest.raises(UserInputError, match="exists; choose a new name"):
        savefile.save_design(edited, path)
    with pytest.raises(UserInputError, match="must end in .toml"):
        savefile.save_design(edited, tmp_path / "my-build.txt")


def test_a_design_given_by_parts_is_saved_with_its_gain_resistors(tmp_path):
    design = load("synth-resonant-lowpass")
    name = design.filters[0].name
    parts = [s.circuit.parts() for s in design.filters[0].stages]
    edited = with_built_filters(design, {name: parts})
    path = savefile.save_design(edited, tmp_path / "synth.toml")
    again = build_design(load_design(path))
    for a, b in zip(edited.filters[0].stages, again.filters[0].stages, strict=True):
        assert a.circuit.topology == b.circuit.topology
        for key, value in a.circuit.parts().items():
            # the letter code keeps 3 significant figures (IEC 60062): E96 needs no more
            assert math.isclose(b.circuit.parts()[key], value, rel_tol=5e-3)


def test_toml_text_round_trips_through_the_standard_reader():
    document = {
        "title": 'a "quoted" name',
        "n": 3,
        "x": 0.1,
        "on": True,
        "t": {"list": [1, 2]},
        "rows": [{"a": "1"}, {"a": "2", "sub": [{"b": 1.5}]}],
    }
    assert tomllib.loads(savefile.dumps(document)) == document  # Python's tomllib (TOML 1.0)


def test_the_tolerance_envelope_holds_the_nominal_response_of_every_way():
    design = load("bookshelf-2way")
    f = views.plot_grid_hz(RATE_HZ)
    envelope = views.tolerance_envelope(way_names(design), design, f, builds=200)
    for band, filt in zip(envelope, design.filters, strict=True):
        nominal = np.maximum(20 * np.log10(np.abs(filt.frequency_response(f))), views.FLOOR_DB)
        lo, hi = np.array(band["min_db"]), np.array(band["max_db"])
        # the analog response of the nominal parts lies between the extremes of the builds
        # wherever parts spread it (Monte Carlo, run_tolerance), to the page's rounding
        assert np.all(lo <= nominal + 0.01) and np.all(nominal <= hi + 0.01)
        assert np.max(hi - lo) > 0.1  # 1 % and 5 % parts do spread it
