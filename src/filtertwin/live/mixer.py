"""The selection mixer: which candidate, way or the dry input is heard, with crossfades.

The runner hands over one output per chain, shape ``(n_chains, frames, channels)``; a
candidate design owns one chain per way (a crossover has ``low``/``mid``/``high``, a single
filter one way). The mixer's sources are those chains plus the dry input (bypass), in this
order. Each output block is the weighted sum of the sources; each source's gain moves from
where it is to its target along a straight line over a fixed number of frames (30 ms by
default). When one source fades out while another fades in, the two gains add up to 1 at
every frame: an equal-gain linear crossfade, right for candidates that are strongly
correlated (the same music through two similar filters).

Choosing what to hear is pure: :func:`target_gains` turns a :class:`Layout` and a
:class:`Selection` into a gain vector, with each candidate's level-matching gain applied.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numba
import numpy as np

from filtertwin.errors import UserInputError

SUM = "sum"
"""The way name that means "all ways of the candidate together"."""

# indices into the mixer's int64 control array shared with the kernel
_REQUESTED, _APPLIED, _POSITION, _FADE = 0, 1, 2, 3


@dataclass(frozen=True)
class Candidate:
    """One candidate design as the mixer sees it.

    Parameters
    ----------
    label : str
        What the listener calls it ("A", "B", ...).
    ways : tuple of str
        Name of each of its chains, in chain order ("low", "mid", "high"; one way for a
        single filter).
    level_gain : float
        Linear gain that matches its loudness to the others (1.0: unchanged).
    """

    label: str
    ways: tuple[str, ...]
    level_gain: float = 1.0


@dataclass(frozen=True)
class Layout:
    """The mixer's sources: each candidate's chains in order, then the dry input."""

    candidates: tuple[Candidate, ...]
    bypass_gain: float = 1.0

    @property
    def n_chains(self) -> int:
        """Number of chains (runner outputs) over all candidates."""
        return sum(len(c.ways) for c in self.candidates)

    @property
    def n_sources(self) -> int:
        """Chains plus the dry input."""
        return self.n_chains + 1

    def first_chain(self, candidate: int) -> int:
        """Index of the first chain of candidate number ``candidate`` (0-based)."""
        return sum(len(c.ways) for c in self.candidates[:candidate])


@dataclass(frozen=True)
class Selection:
    """What the listener wants to hear.

    ``candidate`` is a 0-based candidate number, or None for bypass (the dry input).
    ``solo`` is a way name to hear alone (or :data:`SUM` for all ways); ``muted`` are way
    names left out of the sum (a muted way the candidate lacks does not apply to it).
    """

    candidate: int | None = 0
    solo: str = SUM
    muted: frozenset[str] = field(default_factory=frozenset)


def target_gains(layout: Layout, selection: Selection) -> np.ndarray:
    """Gain of every source for a selection, with level matching applied.

    Parameters
    ----------
    layout : Layout
        The candidates and their ways.
    selection : Selection
        What to hear.

    Returns
    -------
    numpy.ndarray
        float64 gains, shape ``(layout.n_sources,)``; the last entry is the dry input.

    Raises
    ------
    UserInputError
        If the candidate number does not exist, or the candidate has no such way.
    """
    gains = np.zeros(layout.n_sources)
    if selection.candidate is None:
        gains[-1] = layout.bypass_gain
        return gains
    if not 0 <= selection.candidate < len(layout.candidates):
        labels = ", ".join(c.label for c in layout.candidates)
        raise UserInputError(
            f"there is no candidate number {selection.candidate + 1}; the candidates are {labels}"
        )
    candidate = layout.candidates[selection.candidate]
    if selection.solo != SUM and selection.solo not in candidate.ways:
        raise UserInputError(
            f"candidate {candidate.label} has no {selection.solo!r} way; "
            f"its ways are {', '.join(candidate.ways)}"
        )
    first = layout.first_chain(selection.candidate)
    for offset, way in enumerate(candidate.ways):
        heard = way == selection.solo if selection.solo != SUM else way not in selection.muted
        if heard:
            gains[first + offset] = candidate.level_gain
    return gains


@numba.njit(cache=True)
def _mix_kernel(
    chains: np.ndarray,
    dry: np.ndarray,
    out: np.ndarray,
    first: int,
    width: int,
    gains: np.ndarray,
    start: np.ndarray,
    target: np.ndarray,
    requested: np.ndarray,
    control: np.ndarray,
) -> None:
    """Weighted sum of the chains and the dry input into columns ``first`` to
    ``first + width`` of ``out``, fading the gains; column ``j`` takes input channel
    ``j % channels`` (a mono input fills every column)."""
    n_chains = chains.shape[0]
    n_sources = n_chains + 1
    frames = out.shape[0]
    channels = dry.shape[1]
    if control[_REQUESTED] != control[_APPLIED]:
        control[_APPLIED] = control[_REQUESTED]
        for s in range(n_sources):
            start[s] = gains[s]
            target[s] = requested[s]
        control[_POSITION] = 0
    fade = control[_FADE]
    for n in range(frames):
        position = control[_POSITION]
        if position < fade:
            position += 1
            control[_POSITION] = position
            if position == fade:
                for s in range(n_sources):
                    gains[s] = target[s]
            else:
                w = position / fade
                for s in range(n_sources):
                    gains[s] = start[s] + (target[s] - start[s]) * w
        for c in range(channels):
            acc = gains[n_chains] * np.float64(dry[n, c])
            for k in range(n_chains):
                if gains[k] != 0.0:
                    acc += gains[k] * np.float64(chains[k, n, c])
            for j in range(c, width, channels):
                out[n, first + j] = acc


class SelectionMixer:
    """Mixes runner outputs and the dry input, crossfading on every change of selection.

    Parameters
    ----------
    n_chains : int
        Number of chains the runner outputs.
    rate_hz : float
        Sample rate of the stream.
    fade_s : float
        Duration of a crossfade (30 ms by default); rounded to whole frames, at least 1.
    initial : numpy.ndarray, optional
        Gains to start with (``n_chains + 1`` values); default: all zero.

    Notes
    -----
    :meth:`request` may be called from a control thread while :meth:`process` runs in the
    audio callback: the request is copied in first and announced by a counter afterwards,
    and the callback takes it over at the start of its next block.
    """

    def __init__(
        self,
        n_chains: int,
        rate_hz: float,
        fade_s: float = 0.030,
        initial: np.ndarray | None = None,
    ) -> None:
        if n_chains < 1:
            raise UserInputError(f"the mixer needs at least 1 chain, got {n_chains}")
        if not 0.0 <= fade_s <= 1.0:
            raise UserInputError(f"crossfade time must be 0 to 1 s, got {fade_s} s")
        self.n_chains = n_chains
        self.fade_frames = max(1, round(fade_s * rate_hz))
        self._gains = np.zeros(n_chains + 1)
        if initial is not None:
            self._gains[:] = self._checked(initial)
        self._start = self._gains.copy()
        self._target = self._gains.copy()
        self._requested = self._gains.copy()
        self._control = np.array([0, 0, self.fade_frames, self.fade_frames], dtype=np.int64)

    def _checked(self, gains: np.ndarray) -> np.ndarray:
        gains = np.asarray(gains, dtype=np.float64)
        if gains.shape != self._gains.shape:
            raise ValueError(f"gains must have shape {self._gains.shape}, got {gains.shape}")
        return gains

    @property
    def gains(self) -> np.ndarray:
        """Copy of the source gains reached at the end of the last block."""
        return self._gains.copy()

    @property
    def fading(self) -> bool:
        """True while a crossfade is under way or requested."""
        control = self._control
        return bool(control[_REQUESTED] != control[_APPLIED] or control[_POSITION] < control[_FADE])

    def request(self, gains: np.ndarray) -> None:
        """Start a crossfade from the current gains to ``gains`` at the next block."""
        self._requested[:] = self._checked(gains)
        self._control[_REQUESTED] += 1

    def process(
        self,
        chains: np.ndarray,
        dry: np.ndarray,
        out: np.ndarray,
        first_column: int = 0,
        columns: int | None = None,
    ) -> None:
        """Mix one block into ``out``. Allocates nothing; safe in an audio callback.

        Parameters
        ----------
        chains : numpy.ndarray
            ``(n_chains, frames, channels)``.
        dry : numpy.ndarray
            ``(frames, channels)``.
        out : numpy.ndarray
            ``(frames, any)``: columns ``first_column`` to ``first_column + columns`` are
            written, column ``j`` of them from input channel ``j % channels`` (a mono input
            fills them all; a stereo input fills them in pairs).
        first_column, columns : int
            Where the mix goes; default: every column of ``out``.

        Raises
        ------
        ValueError
            If the columns are not within ``out`` or not a multiple of the channels.
        """
        width = out.shape[1] - first_column if columns is None else columns
        if not 0 <= first_column <= first_column + width <= out.shape[1] or width % dry.shape[1]:
            raise ValueError(
                f"columns {first_column} to {first_column + width} of an output with "
                f"{out.shape[1]} for {dry.shape[1]} channel(s): not within it or not a multiple"
            )
        _mix_kernel(
            chains,
            dry,
            out,
            first_column,
            width,
            self._gains,
            self._start,
            self._target,
            self._requested,
            self._control,
        )


def warm_up() -> None:
    """Compile the kernel now, before a stream starts."""
    mixer = SelectionMixer(1, 48000.0)
    block = np.zeros((2, 2), dtype=np.float32)
    mixer.process(np.zeros((1, 2, 2), dtype=np.float32), block, block)
