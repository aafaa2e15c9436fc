"""Blind listening trials: ABX and blind preference, with a log and an exact score.

ABX: the listener may switch between A, B and X as often as they like, and answers which of
A and B the unknown X is. Which design sits behind A and behind B is drawn once, and which
of them X is, at random for every trial; the names stay hidden until the end. Score: the
number of right answers, with the exact one-sided binomial p-value of getting at least that
many right by guessing (chance 1/2 per trial).

Blind preference: every trial presents the two designs as 1 and 2 in a random order; the
listener answers which they prefer. Score: how often the first design was preferred, with
the exact two-sided binomial p-value (no direction is expected beforehand).

Plans are drawn from a seed, so a session can be repeated exactly. The log is rewritten
after every answer, to a temporary name that is then renamed, so it is always complete; but
until the trials end (or stop) it holds only the answers and their times: the hidden columns
(which design sat behind each button, whether an answer was right) stay empty, so nothing a
listener can open during the session tells X apart or how earlier answers fared.
:meth:`TrialLog.reveal` fills them in at the end.

References
----------
D. L. Clark, "High-resolution subjective testing using a double-blind comparator",
J. Audio Eng. Soc. 30(5), 1982 (the ABX procedure).
"""

from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
from scipy import stats

from filtertwin.errors import UserInputError

Kind = Literal["abx", "preference"]
ABX_ANSWERS = ("A", "B")
PREFERENCE_ANSWERS = ("1", "2")
HIDDEN_COLUMNS = ("first_design", "second_design", "x_design", "answered_design", "correct")
"""Log columns left empty until the trials end (they would tell X apart)."""
LOG_COLUMNS = (
    "trial",
    "kind",
    "first_design",
    "second_design",
    "x_design",
    "answer",
    "answered_design",
    "correct",
    "time_s",
)


@dataclass(frozen=True)
class TrialPlan:
    """The hidden assignments of a blind session.

    ``order[i]`` is the pair of designs behind the first and second button of trial ``i``
    (A and B for ABX, the same pair in every trial; 1 and 2 for preference). For ABX,
    ``x_is[i]`` is "A" or "B"; for preference it is empty.
    """

    kind: Kind
    designs: tuple[str, str]
    order: tuple[tuple[str, str], ...]
    x_is: tuple[str, ...]
    seed: int

    @property
    def n_trials(self) -> int:
        """Number of trials."""
        return len(self.order)


@dataclass(frozen=True)
class Answer:
    """The listener's answer in one trial (``trial`` counts from 1)."""

    trial: int
    answer: str
    time_s: float


@dataclass(frozen=True)
class Score:
    """Result of a session.

    For ABX ``hits`` counts right answers and ``p_value`` is one-sided; for preference
    ``hits`` counts answers for the first design and ``p_value`` is two-sided.
    """

    kind: Kind
    trials: int
    hits: int
    p_value: float


def plan_trials(
    designs: tuple[str, str], n_trials: int, seed: int, kind: Kind = "abx"
) -> TrialPlan:
    """Draw a blind session's hidden assignments from a seed.

    Parameters
    ----------
    designs : tuple of two str
        Names of the two designs compared.
    n_trials : int
        Number of trials, 1 to 1000.
    seed : int
        Seed of the random draw (the same seed gives the same plan).
    kind : {"abx", "preference"}
        The kind of session.

    Returns
    -------
    TrialPlan

    Raises
    ------
    UserInputError
        If the designs are not two different names or the trial count is out of range.
    """
    if len(designs) != 2 or designs[0] == designs[1]:
        raise UserInputError(f"a blind session compares two different designs, got {designs}")
    if not 1 <= n_trials <= 1000:
        raise UserInputError(f"number of trials must be 1 to 1000, got {n_trials}")
    if kind not in ("abx", "preference"):
        raise UserInputError(f"kind of blind session must be abx or preference, got {kind!r}")
    rng = np.random.default_rng(seed)
    swapped = (designs[1], designs[0])
    if kind == "abx":
        pair = swapped if rng.integers(2) else designs
        x_is = tuple(ABX_ANSWERS[i] for i in rng.integers(2, size=n_trials))
        return TrialPlan(kind, designs, (pair,) * n_trials, x_is, seed)
    order = tuple(swapped if flip else designs for flip in rng.integers(2, size=n_trials))
    return TrialPlan(kind, designs, order, (), seed)


def buttons(kind: Kind) -> tuple[str, ...]:
    """The sources a listener can switch between: A, B, X for ABX; 1, 2 for preference."""
    return ("A", "B", "X") if kind == "abx" else PREFERENCE_ANSWERS


def design_behind(plan: TrialPlan, trial: int, button: str) -> str:
    """Name of the design that plays when ``button`` is chosen in ``trial`` (from 1)."""
    if button not in buttons(plan.kind):
        raise UserInputError(
            f"{button!r} is not a choice in a {plan.kind} trial; "
            f"choose one of {', '.join(buttons(plan.kind))}"
        )
    first, second = plan.order[trial - 1]
    if button == "X":
        button = plan.x_is[trial - 1]
    return first if button in ("A", "1") else second


def check_answer(plan: TrialPlan, answer: str) -> str:
    """The answer in canonical form ("A"/"B" or "1"/"2").

    Raises
    ------
    UserInputError
        If it is not one of the possible answers.
    """
    allowed = ABX_ANSWERS if plan.kind == "abx" else PREFERENCE_ANSWERS
    canonical = answer.strip().upper()
    if canonical not in allowed:
        raise UserInputError(
            f"answer {answer!r} is not possible in a {plan.kind} trial; "
            f"answer {' or '.join(allowed)}"
        )
    return canonical


def binomial_p_value(hits: int, trials: int, two_sided: bool = False) -> float:
    """Exact binomial p-value of ``hits`` successes in ``trials`` at chance 1/2.

    One-sided: the probability of at least ``hits`` successes by guessing.

    References
    ----------
    scipy.stats.binomtest; Clark (1982), see the module docstring.
    """
    if not 0 <= hits <= trials:
        raise ValueError(f"hits must be 0 to trials={trials}, got {hits}")
    if trials == 0:
        return 1.0
    alternative = "two-sided" if two_sided else "greater"
    return float(stats.binomtest(hits, trials, 0.5, alternative=alternative).pvalue)


def score(plan: TrialPlan, answers: list[Answer]) -> Score:
    """Score the answers given so far (one per trial, in any order)."""
    hits = 0
    for answer in answers:
        given = check_answer(plan, answer.answer)
        if plan.kind == "abx":
            hits += given == plan.x_is[answer.trial - 1]
        else:
            hits += design_behind(plan, answer.trial, given) == plan.designs[0]
    two_sided = plan.kind == "preference"
    return Score(plan.kind, len(answers), hits, binomial_p_value(hits, len(answers), two_sided))


def describe_score(plan: TrialPlan, result: Score) -> str:
    """A short report of the result that reveals the hidden names."""
    first, second = plan.order[0]
    if plan.kind == "abx":
        return (
            f"ABX: {result.hits} of {result.trials} right, p = {result.p_value:.4f} "
            f"(chance of doing as well by guessing); A was {first}, B was {second}"
        )
    return (
        f"preference: {plan.designs[0]} chosen {result.hits} of {result.trials} times, "
        f"{plan.designs[1]} {result.trials - result.hits} times, "
        f"p = {result.p_value:.4f} (two-sided)"
    )


def log_row(plan: TrialPlan, answer: Answer) -> dict[str, str]:
    """One log row: the trial's hidden assignment, the answer and the time it took."""
    given = check_answer(plan, answer.answer)
    first, second = plan.order[answer.trial - 1]
    x_design = design_behind(plan, answer.trial, "X") if plan.kind == "abx" else ""
    correct = "" if plan.kind != "abx" else str(int(given == plan.x_is[answer.trial - 1]))
    return {
        "trial": str(answer.trial),
        "kind": plan.kind,
        "first_design": first,
        "second_design": second,
        "x_design": x_design,
        "answer": given,
        "answered_design": design_behind(plan, answer.trial, given),
        "correct": correct,
        "time_s": f"{answer.time_s:.3f}",
    }


class TrialLog:
    """CSV log of a blind session, rewritten completely (temporary name, then rename)
    after every answer, with the hidden columns empty until :meth:`reveal`.

    Raises
    ------
    UserInputError
        If the log file exists already (it is never overwritten) or its folder does not.
    """

    def __init__(self, path: Path, plan: TrialPlan) -> None:
        self.path = Path(path)
        if self.path.exists():
            raise UserInputError(
                f"trial log {self.path} exists already; choose a new name or move it away"
            )
        if not self.path.parent.is_dir():
            raise UserInputError(f"folder {self.path.parent} for the trial log does not exist")
        self.plan = plan
        self.revealed = False
        self._rows: list[dict[str, str]] = []

    def record(self, answer: Answer) -> None:
        """Add one answer and write the log again (hidden columns empty)."""
        self._rows.append(log_row(self.plan, answer))
        self._write()

    def reveal(self) -> None:
        """Write the log again with every column (at the end of the trials; safe twice)."""
        self.revealed = True
        self._write()

    def _write(self) -> None:
        rows = self._rows
        if not self.revealed:
            rows = [{**row, **dict.fromkeys(HIDDEN_COLUMNS, "")} for row in rows]
        text = io.StringIO()
        writer = csv.DictWriter(text, fieldnames=LOG_COLUMNS, lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
        temporary = self.path.with_name(f".{self.path.name}.{os.getpid()}.part")
        temporary.write_text(text.getvalue(), encoding="utf-8")
        os.replace(temporary, self.path)


class BlindSession:
    """Steps through a plan: which design each button plays now, and the answers.

    Parameters
    ----------
    plan : TrialPlan
        The hidden assignments.
    log : TrialLog, optional
        Where every answer is written as it comes.
    """

    def __init__(self, plan: TrialPlan, log: TrialLog | None = None) -> None:
        self.plan = plan
        self.log = log
        self.answers: list[Answer] = []
        self._trial_started_s = 0.0

    @property
    def trial(self) -> int:
        """The current trial, from 1 (``n_trials + 1`` once finished)."""
        return len(self.answers) + 1

    @property
    def finished(self) -> bool:
        """True when every trial has been answered."""
        return len(self.answers) == self.plan.n_trials

    def start_trial(self, now_s: float) -> None:
        """Note when the current trial began (its answer time is counted from here)."""
        self._trial_started_s = now_s

    def design_for(self, button: str) -> str:
        """Design to play for ``button`` in the current trial."""
        return design_behind(self.plan, self.trial, button)

    def answer(self, given: str, now_s: float) -> Answer:
        """Record the answer to the current trial and move on to the next.

        Raises
        ------
        UserInputError
            If the session is finished or the answer is not possible.
        """
        if self.finished:
            raise UserInputError("all trials are answered; the session is over")
        answer = Answer(self.trial, check_answer(self.plan, given), now_s - self._trial_started_s)
        if self.log is not None:
            self.log.record(answer)
        self.answers.append(answer)
        self._trial_started_s = now_s
        return answer

    def score(self) -> Score:
        """Score of the answers so far."""
        return score(self.plan, self.answers)

    def end(self) -> None:
        """The trials are over (all answered or stopped): reveal the log (safe twice)."""
        if self.log is not None and self.answers:
            self.log.reveal()
