"""Live part and corner edits: crossfaded through a warm spare, undone, listed and saved,
on a callback driven with synthetic blocks (no stream)."""

import math
import tomllib

import numpy as np
import pytest
from scipy import signal

from filtertwin.circuit.design import build_design
from filtertwin.circuit.spec import load_design
from filtertwin.errors import UserInputError
from filtertwin.live.chains import warm_frames
from filtertwin.live.keys import Command
from test_live_listen_core import BLOCK, RATE_HZ, noise, play, setup


def cmd(name, *args):
    return Command(name, tuple(args))


def sine(f_hz, blocks, amplitude=0.3):
    t = np.arange(blocks * BLOCK) / RATE_HZ
    return np.repeat(amplitude * np.sin(2 * np.pi * f_hz * t)[:, None], 2, axis=1)


def play_edit(core, session, x, at_block, command):
    """Play x, giving ``command`` at ``at_block`` and moving the edit on after every block."""
    pieces = [play(core, x[: at_block * BLOCK])]
    session.handle(command, 1.0)
    for start in range(at_block * BLOCK, len(x), BLOCK):
        pieces.append(play(core, x[start : start + BLOCK]))
        session.poll()
    return np.concatenate(pieces)


def switch_bound(f_hz, amps, fade_frames):
    """The bound of the candidate-switching tests: |y[n+1]-y[n]| <= 2 pi f/fs max(A) +
    (A_old + A_new)/N for an equal-gain crossfade of two sines over N frames (hand
    derivation, as in test_live_listen_core), 1 % margin."""
    return (2 * math.pi * f_hz / RATE_HZ * max(amps) + sum(amps) / fade_frames) * 1.01


def test_a_part_edit_during_a_sine_steps_no_more_than_a_candidate_switch():
    core, session, twins, said = setup(["candidate-butterworth", "candidate-bessel"])
    f_hz = 400.0  # C1 of stage 2 up 8 E12 steps: the resonance moves down to 1.4 kHz, Q 2.8
    x = sine(f_hz, 120)
    y = play_edit(core, session, x, 40, cmd("part", "topcut", "2", "C1", "+8"))
    assert not session.edits_pending  # the spare came, faded in, and went
    old, new = twins[0].filters[0].sos, session.twins[0].filters[0].sos
    # steady-state amplitudes before and after (scipy.signal.sosfreqz)
    amps = [0.3 * abs(signal.sosfreqz(s, [f_hz], fs=RATE_HZ)[1][0]) for s in (old, new)]
    assert abs(20 * np.log10(amps[1] / amps[0])) > 0.5  # the edit changes the level here
    steps = np.abs(np.diff(y[20 * BLOCK :, 0].astype(np.float64)))
    assert steps.max() < switch_bound(f_hz, amps, round(0.030 * RATE_HZ))
    # after the edit the output is the new filter alone (scipy.signal.sosfilt, float32)
    tail = signal.sosfilt(new, x[:, 0].astype(np.float64))[-BLOCK:]
    np.testing.assert_allclose(y[-BLOCK:, 0], tail, atol=1e-5)


def test_an_instant_coefficient_swap_would_step_past_that_bound_so_the_test_can_fail():
    core, session, twins, _ = setup(["candidate-butterworth", "candidate-bessel"])
    f_hz = 400.0
    x = sine(f_hz, 60)
    pieces = [play(core, x[: 40 * BLOCK])]
    session.handle(cmd("part", "topcut", "2", "C1", "+8"), 1.0)
    core.blend = None  # as before: the coefficients swapped in place, no spare, no fade
    session.swapping = None
    session.queued.clear()
    core.runner.set_chain(0, session.twins[0].filters[0].sos)
    pieces.append(play(core, x[40 * BLOCK :]))
    y = np.concatenate(pieces)
    old, new = twins[0].filters[0].sos, session.twins[0].filters[0].sos
    amps = [0.3 * abs(signal.sosfreqz(s, [f_hz], fs=RATE_HZ)[1][0]) for s in (old, new)]
    steps = np.abs(np.diff(y[20 * BLOCK :, 0].astype(np.float64)))
    assert steps.max() > 1.5 * switch_bound(f_hz, amps, round(0.030 * RATE_HZ))


def test_the_warm_up_lasts_eight_time_constants_of_the_slowest_pole():
    sos = signal.butter(2, 20.0, fs=RATE_HZ, output="sos")  # poles at 20 Hz, Q 0.707
    radius = np.max(np.abs(np.roots(sos[0, 3:])))
    # the envelope of a pole of radius r falls by e each -1/ln(r) samples (z = e^{sT})
    expected = 8 * (-1 / np.log(radius))
    assert warm_frames(sos, RATE_HZ) == int(expected)
    # and the analog pole's decay rate sigma = w0 / (2 Q) gives the same within 1 %
    sigma = 2 * np.pi * 20.0 / (2 * (1 / np.sqrt(2)))  # Horowitz & Hill, ch. 6 (2nd order)
    assert warm_frames(sos, RATE_HZ) == pytest.approx(8 * RATE_HZ / sigma, rel=0.01)


def test_undo_and_redo_crossfade_back_and_forth_and_the_edits_are_listed():
    core, session, twins, said = setup(["candidate-butterworth", "candidate-bessel"])
    x = noise(200 * BLOCK, amplitude=0.1)
    original = session.candidates[0].design
    y = play_edit(core, session, x[: 60 * BLOCK], 10, cmd("part", "topcut", "2", "C1", "+1"))
    assert session.edited(0) and not session.edited(1)
    edited = session.candidates[0].design
    assert [line.split(":")[0] for line in session.edit_lines()] == [
        "edit 1", "A topcut stage 1", "A topcut stage 2"
    ]  # fmt: skip
    assert "C1 = 33n" in session.edit_lines()[2]
    y = play_edit(core, session, x[60 * BLOCK : 120 * BLOCK], 0, cmd("undo"))
    assert said[-1].startswith("undone: A topcut stage 2: C1 = 33n")
    assert session.candidates[0].design is original and not session.edited(0)
    np.testing.assert_array_equal(session.twins[0].filters[0].sos, twins[0].filters[0].sos)
    # the chain runs the loaded sections again (scipy.signal.sosfilt from the chain's state)
    zi = core.runner.state[0, :4].transpose(0, 2, 1).copy()
    y = play(core, x[120 * BLOCK : 121 * BLOCK])
    block = x[120 * BLOCK : 121 * BLOCK].astype(np.float64)
    expected, _ = signal.sosfilt(twins[0].filters[0].sos, block, axis=0, zi=zi)
    np.testing.assert_array_equal(y, expected.astype(np.float32))
    play_edit(core, session, x[121 * BLOCK : 180 * BLOCK], 0, cmd("redo"))
    assert session.candidates[0].design is edited
    session.handle(cmd("redo"), 2.0)
    assert "nothing to redo" in said[-1]


def test_corner_keeps_working_after_a_part_edit_and_says_the_parts_are_chosen_again():
    core, session, _, said = setup(["candidate-butterworth", "candidate-bessel"])
    session.handle(cmd("part", "2", "C1", "+1"), 1.0)
    session.handle(cmd("corner", "2k"), 2.0)
    assert said[-1].startswith("A topcut: corner moved (its part edits are replaced")
    f = session.candidates[0].design.filter("topcut")
    assert f.spec.kind == "alignment" and f.spec.corner_hz == (2000.0,)
    # the rebuilt filter is a Butterworth at 2 kHz: its -3 dB point (scipy.signal.butter)
    b, a = signal.butter(4, 2 * np.pi * 2000.0, analog=True)
    _, h = signal.freqs(b, a, [2 * np.pi * 2000.0])
    assert 20 * np.log10(abs(h[0])) == pytest.approx(-3.01, abs=0.01)
    stages = f.stages
    built = np.prod([s.built.f0_hz for s in stages]) ** (1 / len(stages))
    assert built == pytest.approx(2000.0, rel=0.03)  # E-series parts: within 3 % (common practice)


def test_an_edited_candidate_is_saved_to_a_new_file_that_loads_to_the_same_parts(tmp_path):
    core, session, _, said = setup(["bookshelf-2way"])
    session.handle(cmd("part", "woofer", "2", "R1", "10k"), 1.0)
    target = tmp_path / "bookshelf-edited.toml"
    saved = session.save_as(target)
    assert saved == target and said[-1] == f"saved A as {target}"
    reloaded = build_design(load_design(target))
    now = session.candidates[0].design
    for f_now, f_new in zip(now.filters, reloaded.filters, strict=True):
        for s_now, s_new in zip(f_now.stages, f_new.stages, strict=True):
            assert s_new.circuit.parts() == pytest.approx(s_now.circuit.parts(), rel=1e-9)
    data = tomllib.loads(target.read_text())
    assert data["filter"][0]["stage"][1]["R1"] == "10k"  # IEC 60062 letter code
    assert data["filter"][1]["alignment"] == "linkwitz-riley"  # the other way is untouched
    assert "(edited while listening)" in data["title"]
    with pytest.raises(UserInputError, match="exists; choose a new name"):
        session.save_as(target)
    source = session.candidates[0].design.spec.source
    with pytest.raises(UserInputError, match="exists; choose a new name"):
        session.save_as(source)  # the original is never overwritten
