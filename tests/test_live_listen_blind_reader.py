"""Blind trials are blind: a reader of the screen and of the trial log, trying to tell X
apart without listening, scores at chance (callback driven with synthetic blocks)."""

import csv
from dataclasses import replace

import numpy as np
from scipy import stats

from filtertwin.live.blind import BlindSession, TrialLog, plan_trials
from filtertwin.live.keys import Command
from filtertwin.live.status import StatusReader, status_line
from test_live_listen_core import BLOCK, RATE_HZ, noise, play, setup

TRIALS = 60


def cmd(name, *args):
    return Command(name, tuple(args))


def _number(word):
    try:
        return float(word)
    except ValueError:
        return None


def screen_guess(seen):
    """The reader's guess of X from the screens seen with A, B and X: at every word where A
    and B differ, X's word votes for the one it equals or, for numbers, lies nearer to."""
    votes = 0
    for a, b, x in zip(*(seen[k].split() for k in ("A", "B", "X")), strict=False):
        if a == b:
            continue
        na, nb, nx = _number(a), _number(b), _number(x)
        if None not in (na, nb, nx):
            votes += (abs(nx - na) < abs(nx - nb)) - (abs(nx - nb) < abs(nx - na))
        else:
            votes += (x == a) - (x == b)
    return "A" if votes >= 0 else "B"


def run_trials(tmp_path, leaky=False, seed=11):
    """Run ABX trials answered at random; return (screen reader's hits, log reader's hits)."""
    core, session, _, said = setup(["candidate-butterworth", "candidate-bessel"])
    core._clock = lambda: 0.0  # callback times: equal for both designs (every chain runs
    # always, see test_live_listen_core), here made exactly equal so the reader is not noisy
    names = (session.candidates[0].name, session.candidates[1].name)
    plan = plan_trials(names, TRIALS, seed, "abx")
    log_path = tmp_path / f"trials-{int(leaky)}.csv"
    session.blind = BlindSession(plan, TrialLog(log_path, plan))
    session.start(0.0)
    now = [0.0]
    reader = StatusReader(session, lambda: 0.05, clock=lambda: now[0])
    rng = np.random.default_rng(seed)
    # a steady 2.5 kHz tone (the two designs differ by 1.1 dB there) under a little noise
    t = np.arange(TRIALS * 3 * 12 * BLOCK) / RATE_HZ
    x = noise(len(t), amplitude=0.01, seed=seed) + (0.5 * np.sin(2 * np.pi * 2500.0 * t))[:, None]
    position = 0
    screen_hits = log_hits = 0
    for trial in range(TRIALS):
        seen = {}
        for button in rng.permutation(["A", "B", "X"]):  # in any order, as a listener would
            first_line = len(said)
            session.handle(cmd("listen", button), now[0])
            play(core, x[position : position + 12 * BLOCK])  # 64 ms of the program
            position += 12 * BLOCK
            now[0] += 1.0
            facts = reader.facts()
            if leaky:  # what the status line showed before: the heard chain's own peak
                chain = session.selection.candidate
                peak = float(core.meters[chain])
                facts = replace(facts, blind=False, way_peaks=(("low", peak),))
            line = status_line(facts).rsplit(" | ", 1)[0]  # the clock field says only when
            screen = " ".join(said[first_line:]) + " " + line
            seen[button] = screen.replace(f": {button}", ":").replace(f"now {button}", "now")
        guess = screen_guess(seen)
        screen_hits += guess == plan.x_is[trial]
        answer = "A" if rng.integers(2) else "B"
        session.handle(cmd("answer", answer), now[0])
        right = answer == plan.x_is[trial]
        if leaky:
            session.blind.log.reveal()  # as the log was written before: every column
        with log_path.open(newline="") as f:
            row = list(csv.DictReader(f))[trial]
        log_guess = row["correct"] == "1" if row["correct"] else True
        log_hits += log_guess == right
    return screen_hits, log_hits


def test_a_reader_of_the_screen_and_the_log_scores_at_chance(tmp_path):
    screen_hits, log_hits = run_trials(tmp_path)
    # exact one-sided binomial test against guessing (Clark 1982; scipy.stats.binomtest)
    assert stats.binomtest(screen_hits, TRIALS, 0.5, alternative="greater").pvalue > 0.01
    assert stats.binomtest(log_hits, TRIALS, 0.5, alternative="greater").pvalue > 0.01


def test_the_same_reader_finds_x_when_the_meter_and_the_log_give_it_away(tmp_path):
    screen_hits, log_hits = run_trials(tmp_path, leaky=True)
    assert stats.binomtest(screen_hits, TRIALS, 0.5, alternative="greater").pvalue < 0.001
    assert log_hits == TRIALS  # the log's "correct" column read during the trials
