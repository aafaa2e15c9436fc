import csv
import math
from fractions import Fraction

import pytest
from scipy import stats

from filtertwin.errors import UserInputError
from filtertwin.live.blind import (
    HIDDEN_COLUMNS,
    LOG_COLUMNS,
    Answer,
    BlindSession,
    TrialLog,
    binomial_p_value,
    design_behind,
    plan_trials,
    score,
)

DESIGNS = ("tone_e12", "tone_e96")


def upper_tail(hits: int, trials: int) -> float:
    """P(K >= hits), K ~ Binomial(trials, 1/2), from the binomial formula (hand computation)."""
    return float(sum(Fraction(math.comb(trials, k), 2**trials) for k in range(hits, trials + 1)))


@pytest.mark.parametrize(("hits", "trials"), [(12, 16), (9, 10), (8, 16), (0, 5), (20, 20)])
def test_one_sided_p_value_matches_the_binomial_formula_and_scipy(hits, trials):
    p = binomial_p_value(hits, trials)
    assert p == pytest.approx(upper_tail(hits, trials), rel=1e-12)  # math.comb, exact
    expected = stats.binomtest(hits, trials, 0.5, alternative="greater").pvalue
    assert p == pytest.approx(expected, rel=1e-12)  # scipy.stats.binomtest


def test_twelve_of_sixteen_right_is_the_classic_abx_pass_mark():
    # hand computation: (C(16,12)+C(16,13)+C(16,14)+C(16,15)+C(16,16)) / 2^16 = 2517 / 65536
    assert binomial_p_value(12, 16) == pytest.approx(2517 / 65536, rel=1e-12)
    assert binomial_p_value(12, 16) < 0.05 < binomial_p_value(11, 16)


def test_two_sided_p_value_doubles_the_smaller_tail_at_chance_one_half():
    # symmetric binomial: two-sided p = min(1, 2 * tail) (hand computation)
    assert binomial_p_value(3, 10, two_sided=True) == pytest.approx(2 * upper_tail(7, 10))
    assert binomial_p_value(5, 10, two_sided=True) == 1.0


def test_the_same_seed_gives_the_same_plan_and_another_seed_another():
    first = plan_trials(DESIGNS, 40, seed=5)
    assert first == plan_trials(DESIGNS, 40, seed=5)
    assert first.x_is != plan_trials(DESIGNS, 40, seed=6).x_is
    assert set(first.x_is) == {"A", "B"}  # 40 draws: both occur (chance of not: 2^-39)


def test_x_plays_the_design_behind_the_hidden_answer():
    plan = plan_trials(DESIGNS, 20, seed=1)
    for trial in range(1, 21):
        x = design_behind(plan, trial, "X")
        assert x == design_behind(plan, trial, plan.x_is[trial - 1])
        assert {design_behind(plan, trial, "A"), design_behind(plan, trial, "B")} == set(DESIGNS)


def test_abx_score_counts_right_answers():
    plan = plan_trials(DESIGNS, 10, seed=2)
    wrong = {"A": "B", "B": "A"}
    answers = [Answer(t, plan.x_is[t - 1], 1.0) for t in range(1, 9)]  # 8 right
    answers += [Answer(t, wrong[plan.x_is[t - 1]], 1.0) for t in (9, 10)]  # 2 wrong
    result = score(plan, answers)
    assert (result.trials, result.hits) == (10, 8)
    assert result.p_value == pytest.approx(upper_tail(8, 10))


def test_preference_score_counts_choices_of_the_first_design():
    plan = plan_trials(DESIGNS, 6, seed=3, kind="preference")
    always_first = [
        Answer(t, "1" if plan.order[t - 1][0] == DESIGNS[0] else "2", 2.0) for t in range(1, 7)
    ]
    result = score(plan, always_first)
    assert result.hits == 6
    assert result.p_value == pytest.approx(2 * upper_tail(6, 6))  # 2 / 64, two-sided


def test_a_session_logs_every_answer_with_its_time(tmp_path):
    plan = plan_trials(DESIGNS, 3, seed=4)
    path = tmp_path / "trials.csv"
    session = BlindSession(plan, TrialLog(path, plan))
    session.start_trial(10.0)
    session.answer("a", 12.5)
    session.answer("B", 13.0)
    with path.open() as f:
        rows = list(csv.DictReader(f))
    assert tuple(rows[0]) == LOG_COLUMNS
    assert [r["time_s"] for r in rows] == ["2.500", "0.500"]
    assert [r["answer"] for r in rows] == ["A", "B"]
    # during the trials nothing in the log tells X apart or how an answer fared
    assert all(r[column] == "" for r in rows for column in HIDDEN_COLUMNS)
    assert not session.finished
    session.answer("A", 14.0)
    assert session.finished
    session.end()  # the trials are over: the hidden columns are written
    with path.open() as f:
        rows = list(csv.DictReader(f))
    assert rows[0]["x_design"] == design_behind(plan, 1, "X")
    assert rows[0]["correct"] == str(int(plan.x_is[0] == "A"))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["trials.csv"]  # no temporary left
    with pytest.raises(UserInputError, match="all trials are answered"):
        session.answer("A", 15.0)


def test_an_existing_log_is_never_overwritten(tmp_path):
    path = tmp_path / "trials.csv"
    path.write_text("keep me")
    with pytest.raises(UserInputError, match="trials.csv exists already; choose a new name"):
        TrialLog(path, plan_trials(DESIGNS, 3, seed=4))
    assert path.read_text() == "keep me"


def test_an_impossible_answer_is_refused_with_the_possible_ones():
    session = BlindSession(plan_trials(DESIGNS, 3, seed=4, kind="preference"))
    with pytest.raises(UserInputError, match="answer 'A' is not possible .* answer 1 or 2"):
        session.answer("A", 1.0)


def test_a_plan_needs_two_different_designs_and_a_sane_trial_count():
    with pytest.raises(UserInputError, match="two different designs"):
        plan_trials(("same", "same"), 10, seed=0)
    with pytest.raises(UserInputError, match="number of trials must be 1 to 1000, got 0"):
        plan_trials(DESIGNS, 0, seed=0)
