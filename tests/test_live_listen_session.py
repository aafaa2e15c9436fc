"""The listener's commands (selection, blind trials, level, live edits) and the status line,
on a callback driven with synthetic blocks."""

import csv

import numpy as np
from scipy import signal, stats

from filtertwin.live.blind import BlindSession, TrialLog, plan_trials
from filtertwin.live.keys import Command
from filtertwin.live.mixer import Selection
from filtertwin.live.status import StatusReader, status_line, summary_lines
from test_live_listen_core import BLOCK, RATE_HZ, noise, play, setup


def cmd(name, *args):
    return Command(name, tuple(args))


def settle(core, blocks=8):
    """Run silent blocks until the crossfade is over."""
    play(core, np.zeros((blocks * BLOCK, core.channels), np.float32))


def test_select_solo_and_mute_set_the_mix_and_say_what_is_heard():
    core, session, _, said = setup(["studio-3way", "bookshelf-2way"])
    session.handle(cmd("select", "B"), 1.0)
    assert said[-1].startswith("now: B (bookshelf-2way), ways woofer+tweeter")
    session.handle(cmd("solo", "high"), 2.0)
    session.handle(cmd("select", "1"), 3.0)
    settle(core)
    np.testing.assert_array_equal(core.mixers[0].gains, [0, 0, 1, 0, 0, 0])  # A's high alone
    session.handle(cmd("solo", "sum"), 4.0)
    session.handle(cmd("mute", "mid"), 5.0)
    settle(core)
    np.testing.assert_array_equal(core.mixers[0].gains, [1, 0, 1, 0, 0, 0])
    session.handle(cmd("mute", "mid"), 6.0)  # again: back in the sum
    assert session.selection == Selection(candidate=0)


def test_a_command_that_cannot_be_done_is_said_and_changes_nothing():
    core, session, _, said = setup(["candidate-butterworth", "candidate-bessel"])
    session.handle(cmd("select", "3"), 1.0)
    assert "there is no candidate 3; the candidates are A, B" in said[-1]
    session.handle(cmd("solo", "mid"), 1.0)
    assert "candidate A has no 'mid' way" in said[-1]
    session.handle(cmd("answer", "A"), 1.0)
    assert "there are no blind trials" in said[-1]
    assert session.selection == Selection(candidate=0)


def test_level_steps_stay_within_the_safe_range_and_the_ceiling_stays():
    core, session, _, said = setup(["candidate-butterworth"])
    session.handle(cmd("level", "11.5"), 1.0)
    session.handle(cmd("louder"), 1.0)
    session.handle(cmd("louder"), 1.0)
    assert core.safety.level_db == 12.0
    assert "ceiling -1 dBFS stays" in said[-1]
    session.handle(cmd("level", "20"), 1.0)
    assert "output level must be -60 to +12 dB" in said[-1]


def blind_setup(tmp_path, kind="abx", trials=4, seed=1):
    core, session, _, said = setup(["candidate-butterworth", "candidate-bessel"])
    plan = plan_trials((session.candidates[0].name, session.candidates[1].name), trials, seed, kind)
    session.blind = BlindSession(plan, TrialLog(tmp_path / "trials.csv", plan))
    session.start(0.0)
    return core, session, plan, said


def test_an_abx_run_hides_the_names_logs_every_trial_and_scores_with_the_binomial_test(tmp_path):
    core, session, plan, said = blind_setup(tmp_path)
    names = [c.name for c in session.candidates]
    answers = ["A", "B", "A", "A"]
    for trial, answer in enumerate(answers, start=1):
        for button in ("B", "X", "A"):
            session.handle(cmd("listen", button), trial + 0.1)
            heard = session.candidates[session.selection.candidate].name
            assert heard == plan.order[0][0 if button == "A" else 1] or button == "X"
            assert not any(name in session.now_hearing() for name in names)
        session.handle(cmd("answer", answer), trial + 0.5)
    hits = sum(a == x for a, x in zip(answers, plan.x_is, strict=True))
    p = stats.binomtest(hits, 4, 0.5, alternative="greater").pvalue  # scipy.stats.binomtest
    assert f"ABX: {hits} of 4 right, p = {p:.4f}" in "\n".join(said)
    assert session.quit_requested
    before_end = said[: next(i for i, s in enumerate(said) if s.startswith("ABX:"))]
    assert not any(name in line for line in before_end for name in names)
    with open(tmp_path / "trials.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert [r["answer"] for r in rows] == answers
    assert [r["correct"] for r in rows] == [
        str(int(a == x)) for a, x in zip(answers, plan.x_is, strict=True)
    ]


def test_x_is_the_design_the_plan_says_in_every_trial(tmp_path):
    core, session, plan, _ = blind_setup(tmp_path, trials=6, seed=9)
    for trial in range(6):
        session.handle(cmd("listen", "X"), 1.0 + trial)
        x_name = plan.order[trial][0 if plan.x_is[trial] == "A" else 1]
        assert session.candidates[session.selection.candidate].name == x_name
        session.handle(cmd("answer", "A"), 1.5 + trial)


def test_preference_trials_listen_with_1_and_2_and_answer_with_the_one_heard(tmp_path):
    core, session, plan, said = blind_setup(tmp_path, kind="preference", trials=2, seed=4)
    session.handle(cmd("select", "2"), 1.0)  # the key 2 chooses "2" in preference trials
    assert session.heard == "2"
    session.handle(cmd("answer"), 2.0)  # Enter: the one heard
    session.handle(cmd("select", "1"), 3.0)
    session.handle(cmd("answer"), 4.0)
    assert [a.answer for a in session.blind.answers] == ["2", "1"]
    assert any(line.startswith("preference:") for line in said)


def test_edits_are_refused_during_blind_trials(tmp_path):
    _, session, _, said = blind_setup(tmp_path)
    session.handle(cmd("part", "2", "C1", "+1"), 1.0)
    assert "no edits during blind trials" in said[-1]
    session.handle(cmd("answer", "X"), 1.0)
    assert "answer A or B" in said[-1]


def test_a_part_edit_ends_with_the_new_sections_in_the_chain_itself():
    core, session, twins, said = setup(["candidate-butterworth", "candidate-bessel"])
    x = noise(80 * BLOCK, amplitude=0.1)
    play(core, x[: 12 * BLOCK])
    runner = core.runner
    session.handle(cmd("part", "topcut", "2", "C1", "+1"), 1.0)
    assert "A topcut stage 2: C1 = 33n (was 27n)" in said[-1]
    assert "as built f0" in said[-1] and "(was f0" in said[-1]
    assert core.blend is not None  # a warm spare carries the change in
    start = 12 * BLOCK
    while session.edits_pending:
        play(core, x[start : start + BLOCK])
        session.poll()
        start += BLOCK
    assert core.blend is None and core.runner is runner  # same section count: set_chain
    new_sos = session.twins[0].filters[0].sos
    assert not np.array_equal(new_sos, twins[0].filters[0].sos)
    zi = runner.state[0, :4].transpose(0, 2, 1).copy()  # scipy's zi layout (sections, 2, ch)
    out = play(core, x[start : start + BLOCK])
    # the new coefficients from the chain's own state on: scipy.signal.sosfilt with zi
    expected, _ = signal.sosfilt(new_sos, x[start : start + BLOCK].astype(np.float64),
                                 axis=0, zi=zi)  # fmt: skip
    np.testing.assert_array_equal(out, expected.astype(np.float32))


def test_a_corner_edit_redesigns_the_candidate_heard_and_bypass_cannot_be_edited():
    core, session, _, said = setup(["candidate-butterworth", "candidate-bessel"])
    session.handle(cmd("select", "2"), 1.0)
    session.handle(cmd("corner", "2k"), 1.0)
    assert said[-1].startswith("B topcut: corner moved; as built stage 1 f0")
    assert session.candidates[1].design.filter("topcut").spec.corner_hz == (2000.0,)
    assert session.candidates[0].design.filter("topcut").spec.corner_hz == (3000.0,)
    session.handle(cmd("bypass"), 2.0)
    session.handle(cmd("part", "1", "R1", "+1"), 2.0)
    assert "select a candidate first" in said[-1]


def test_the_status_line_reports_what_the_callback_measured():
    core, session, _, _ = setup(["synth-resonant-lowpass"], level_db=12.0)
    now = [100.0]
    reader = StatusReader(session, lambda: 0.031, clock=lambda: now[0])
    t = np.arange(16 * BLOCK) / RATE_HZ
    x = np.repeat(np.sin(2 * np.pi * 1200.0 * t)[:, None], 2, axis=1)
    play(core, x)
    core.process(None, np.zeros((BLOCK, 2), np.float32), True)  # a block with a status flag
    now[0] += 1.5
    facts = reader.facts()
    assert facts.hearing == "A"
    assert facts.xruns == 1
    assert facts.limiting  # driven into the ceiling
    # the stages that the analog model says a full-scale sine clips (design.Stage.clip_input_dbfs)
    stages = session.candidates[0].design.filters[0].stages
    expected = tuple(f"voice s{s.index}" for s in stages if s.clip_input_dbfs < 0)
    assert facts.clipping == expected == ("voice s2",)
    assert facts.way_peaks[0][0] == "voice" and facts.way_peaks[0][1] > 1.0  # the design's name
    assert facts.elapsed_s == 1.5
    line = status_line(facts)
    assert "xruns 1" in line and "clip voice s2" in line and "load 3 %" in line
    # the limiter's gain reduction now, from the safety's own state
    limit_db = 20 * np.log10(core.safety.limiter_gain)
    assert f"limit {limit_db:.1f} dB" in line and limit_db < -1.0
    summary = "\n".join(summary_lines(session, 1.5))
    assert "1 xruns" in summary and "A low stage 2:" in summary


def test_arrow_keys_are_dropped_whole_and_escape_still_cancels_a_line():
    from filtertwin.live.console import EscapeFilter, LineEditor

    keys_in = list("\x1b[A" + "\x1b[1;5C" + "x" + "\x1bOP" + "\x1b")  # up, ctrl-right, F1, Esc
    escapes = EscapeFilter()
    passed = [k for k in keys_in if escapes.passes(k)]
    assert passed == ["\x1b", "\x1b", "x", "\x1b", "\x1b"]  # never the A, C or P of a sequence
    editor = LineEditor()
    editor.open()
    for key in "part 2 C1 +2\x7f1":
        editor.key(key)
    assert editor.key("\r") == "part 2 C1 +1"
    editor.open()
    editor.key("p")
    assert editor.key("\x1b") is None and not editor.active


def test_way_state_carries_across_candidates_and_never_plays_silence_unannounced():
    core, session, _, said = setup(["studio-3way", "bookshelf-2way"])
    session.handle(cmd("mute", "mid"), 1.0)
    session.handle(cmd("select", "B"), 2.0)  # a 2-way candidate after a mute of mid: fine
    assert said[-1].startswith("now: B (bookshelf-2way), ways woofer+tweeter")
    session.handle(cmd("select", "A"), 2.5)
    session.handle(cmd("solo", "mid"), 3.0)
    session.handle(cmd("select", "B"), 4.0)  # no mid way: all of B is heard, and said
    assert "(B has no mid way: all its ways are heard)" in said[-1]
    session.handle(cmd("solo", "low"), 5.0)
    session.handle(cmd("mute", "low"), 6.0)  # ends the solo: everything but low
    assert said[-1].startswith("now: B (bookshelf-2way), ways tweeter")
    session.handle(cmd("mute", "high"), 6.5)  # would leave nothing: refused
    assert "would leave nothing to hear" in said[-1]
    session.handle(cmd("solo", "sum"), 7.0)
    settle(core)
    reader = StatusReader(session)
    assert reader.facts().ways == "all ways" == session.ways_heard()
    # A's three chains silent, B's two at their level, the dry input off (chain order)
    np.testing.assert_array_equal(core.mixers[0].gains, [0, 0, 0, 1, 1, 0])


def test_a_single_filter_way_goes_by_the_designs_name():
    core, session, _, said = setup(["candidate-butterworth", "bookshelf-2way"])
    reader = StatusReader(session)
    assert [w for w, _ in reader.facts().way_peaks] == ["topcut"]
    session.handle(cmd("solo", "topcut"), 1.0)
    assert said[-1].startswith("now: A (candidate-butterworth), ways topcut")
    session.handle(cmd("solo", "high"), 2.0)
    assert "candidate A has no 'high' way; its ways are topcut (low)" in said[-1]


def test_the_status_line_fits_the_terminal_and_warns_of_an_input_over_full_scale():
    core, session, _, _ = setup(["bookshelf-2way"])
    session.handle(cmd("part", "woofer", "2", "C1", "+1"), 0.5)
    now = [10.0]
    reader = StatusReader(session, clock=lambda: now[0])
    t = np.arange(8 * BLOCK) / RATE_HZ
    x = np.repeat(1.5 * np.sin(2 * np.pi * 440.0 * t)[:, None], 2, axis=1)  # +3.5 dBFS
    play(core, x)
    facts = reader.facts()
    full = status_line(facts)
    assert full.startswith("A bookshelf-2way (edited) | INPUT OVER 0 dBFS | all ways | ")
    assert "woofer " in full and "tweeter " in full and "cb " in full
    for width in (60, 80, 100, 120):
        line = status_line(facts, width)
        assert len(line) <= width - 1  # never wraps
        assert line.startswith("A bookshelf-2way (edited) | INPUT OVER 0 dBFS")
    assert "woofer " not in status_line(facts, 80)  # the meters go before the name
    play(core, np.zeros((1400 * BLOCK, 2), np.float32))  # 7.5 s of silence
    now[0] += 7.5
    quiet = reader.facts()
    assert not quiet.input_over
    # after 7.5 s at 20 dB/s (our fall rate) the held peaks are below -120 dBFS: "-inf"
    assert "woofer ........  -inf" in status_line(quiet) and "out  -inf dBFS" in status_line(quiet)
