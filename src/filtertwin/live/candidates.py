"""Candidate designs as the live stream sees them: labels, ways and runner chains.

Each design given to ``filtertwin listen`` is one candidate (A, B, C ...). Each filter of a
design is one *way*, named by what it passes: a low-pass filter is the ``low`` way, a
band-pass the ``mid`` way, a high-pass the ``high`` way (so the keys l, m, h solo the same
way of every candidate, whatever the filters are called in the files). The runner gets one
chain per (candidate, way), candidates in order, each candidate's ways in file order; all
chains filter the same input, all the time, so every filter state stays warm.
"""

from __future__ import annotations

import string
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from filtertwin.circuit.design import Design
from filtertwin.digital.twin import Twin, build_twin
from filtertwin.errors import UserInputError
from filtertwin.live.mixer import Candidate, Layout

WAY_OF_RESPONSE = {"lowpass": "low", "bandpass": "mid", "highpass": "high"}
"""The way name of a filter, from its response."""
WAY_ORDER = ("low", "mid", "high")
PROTECTED_WAYS = ("mid", "high")
"""Ways whose driver a full-range signal can destroy (they contain a high-pass)."""
MAX_CANDIDATES = 9  # keys 1-9


@dataclass(frozen=True)
class ListenCandidate:
    """One candidate design.

    Attributes
    ----------
    label : str
        "A", "B", ... in the order given.
    name : str
        What the listener called it (the design argument), unique among the candidates.
    design : Design
        The design as built (replaced on a live edit).
    ways : tuple of str
        Way name of each filter of the design, in the design's filter order.
    """

    label: str
    name: str
    design: Design
    ways: tuple[str, ...]

    @property
    def filter_names(self) -> tuple[str, ...]:
        """The design's name of each way's filter (what the status line shows)."""
        return tuple(f.name for f in self.design.filters)

    def filter_of(self, way: str) -> str:
        """Name of the design's filter that is ``way`` (a way name or a filter name).

        Raises
        ------
        UserInputError
            If the candidate has no such way or filter.
        """
        names = [f.name for f in self.design.filters]
        if way in self.ways:
            return names[self.ways.index(way)]
        if way in names:
            return way
        listing = ", ".join(f"{w} ({n})" for w, n in zip(self.ways, names, strict=True))
        raise UserInputError(f"candidate {self.label} has no way {way!r}; its ways are {listing}")


def way_names(design: Design) -> tuple[str, ...]:
    """Way name of every filter of a design (see the module docstring).

    Raises
    ------
    UserInputError
        If two filters of the design have the same response (two ``low`` ways).
    """
    ways = tuple(WAY_OF_RESPONSE[f.response] for f in design.filters)
    for way in WAY_ORDER:
        same = [f.name for f, w in zip(design.filters, ways, strict=True) if w == way]
        if len(same) > 1:
            raise UserInputError(
                f"{design.spec.source}: filters {', '.join(same)} are all {way} ways; a "
                "candidate for listening has at most one low-pass, one band-pass and one "
                "high-pass filter (put the others in a design file of their own)"
            )
    return ways


def make_candidates(named_designs: Sequence[tuple[str, Design]]) -> tuple[ListenCandidate, ...]:
    """Label the designs A, B, ... and name their ways.

    Parameters
    ----------
    named_designs : sequence of (str, Design)
        What the listener called each design, and the design.

    Raises
    ------
    UserInputError
        With no design, more than nine, or a design whose ways cannot be named.
    """
    if not 1 <= len(named_designs) <= MAX_CANDIDATES:
        raise UserInputError(
            f"give 1 to {MAX_CANDIDATES} designs to listen to, got {len(named_designs)}"
        )
    seen: dict[str, int] = {}
    result = []
    for label, (name, design) in zip(string.ascii_uppercase, named_designs, strict=False):
        seen[name] = seen.get(name, 0) + 1
        unique = name if seen[name] == 1 else f"{name} ({seen[name]})"
        result.append(ListenCandidate(label, unique, design, way_names(design)))
    return tuple(result)


def build_twins(
    candidates: Sequence[ListenCandidate], rate_hz: float, resampling: str = "linear"
) -> tuple[Twin, ...]:
    """Each candidate's digital twin at ``rate_hz``, oversampled as render would.

    Every candidate gets the factor the offline rule picks for it (``oversampling="auto"``,
    :func:`filtertwin.digital.twin.build_twin`); one runner filters them all in the stream, so all
    run at the largest of those factors (a higher factor only brings a twin closer to its
    analog model), with the same resampling filters as render.
    """
    twins = [build_twin(c.design, rate_hz, oversampling="auto", resampling=resampling)
             for c in candidates]  # fmt: skip
    factor = max(t.oversampling for t in twins)
    return tuple(
        t if t.oversampling == factor
        else build_twin(c.design, rate_hz, oversampling=factor, resampling=resampling)
        for c, t in zip(candidates, twins, strict=True)
    )  # fmt: skip


def fidelity_lines(
    candidates: Sequence[ListenCandidate], twins: Sequence[Twin], blind: bool = False
) -> list[str]:
    """What each candidate plays: every way's fidelity line, as ``design --rate`` shows it.

    With ``blind`` the lines name the candidate's letter and way number only (blind trials
    keep the designs' names and way names out of sight until they end)."""
    from filtertwin.report.design_text import fidelity_line

    lines = []
    for c, twin in zip(candidates, twins, strict=True):
        for k, ft in enumerate(twin.filters, 1):
            who = f"{c.label} way {k}" if blind else f"{c.label} {c.name} '{ft.name}'"
            lines.append(f"{who}:" + fidelity_line(ft, twin)[1:])
    return lines


def chains(twins: Sequence[Twin]) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """SOS arrays and clip levels of every chain, candidate by candidate, way by way."""
    sos: list[np.ndarray] = []
    levels: list[np.ndarray] = []
    for twin in twins:
        sos += twin.chains()
        levels += twin.clip_levels()
    return sos, levels


def slew_steps(twins: Sequence[Twin]) -> list[np.ndarray]:
    """Slew steps of every chain, in the order of :func:`chains`."""
    return [step for twin in twins for step in twin.slew_steps()]


def chain_index(candidates: Sequence[ListenCandidate], candidate: int, way: int) -> int:
    """Runner chain number of way number ``way`` of candidate number ``candidate``."""
    return sum(len(c.ways) for c in candidates[:candidate]) + way


def layout(
    candidates: Sequence[ListenCandidate],
    level_gains: Sequence[float] | None = None,
    bypass_gain: float = 1.0,
) -> Layout:
    """The mixer's view of the candidates, with their level-matching gains."""
    gains = [1.0] * len(candidates) if level_gains is None else list(level_gains)
    return Layout(
        tuple(Candidate(c.label, c.ways, g) for c, g in zip(candidates, gains, strict=True)),
        bypass_gain,
    )


def output_ways(candidates: Sequence[ListenCandidate]) -> tuple[str, ...]:
    """The ways present in any candidate, low to high: one output channel pair each."""
    present = {w for c in candidates for w in c.ways}
    return tuple(w for w in WAY_ORDER if w in present)
