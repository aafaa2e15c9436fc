"""Level matching of the candidates, so that the louder one does not win a comparison.

Two ways to find each candidate's level:

* ``loudness``: the ITU-R BS.1770-4 integrated loudness of the program (the first seconds
  of the recording) through the candidate's twin, all its ways summed, clipping included;
  the dry program (bypass) is measured the same way.
* ``gain``: the candidate's passband gain (the largest of its ways' passband gains, ideal
  amplifier), for live input where no program is known beforehand; bypass has gain 1.

Every source is then turned down to the quietest one (gains never above 1, so matching never
pushes a candidate into the output ceiling). ``off`` leaves every gain at 1.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from filtertwin.circuit.design import Design
from filtertwin.digital.render import render_array
from filtertwin.digital.twin import Twin
from filtertwin.errors import UserInputError
from filtertwin.live.loudness import integrated_loudness, matching_gain

MATCH_MODES = ("loudness", "gain", "off")
BLOCK_FRAMES = 4096  # short compiled calls: the audio thread gets the interpreter lock


@dataclass(frozen=True)
class LevelMatch:
    """Levels found and the gains that match them.

    Attributes
    ----------
    mode : str
        One of :data:`MATCH_MODES`.
    levels : tuple of float
        Per candidate: loudness in LKFS (``loudness``), passband gain in dB (``gain``), or
        0.0 (``off``).
    bypass_level : float
        The same for the dry input.
    gains : tuple of float
        Linear gain per candidate (at most 1).
    bypass_gain : float
        Linear gain of the dry input (at most 1).
    """

    mode: str
    levels: tuple[float, ...]
    bypass_level: float
    gains: tuple[float, ...]
    bypass_gain: float

    def offsets_db(self) -> tuple[float, ...]:
        """Gain of each candidate in dB (0 or negative)."""
        return tuple(20.0 * math.log10(g) for g in self.gains)

    @property
    def bypass_offset_db(self) -> float:
        """Gain of the dry input in dB."""
        return 20.0 * math.log10(self.bypass_gain)


def _matched(mode: str, levels: Sequence[float], bypass_level: float) -> LevelMatch:
    finite = [v for v in (*levels, bypass_level) if math.isfinite(v)]
    reference = min(finite) if finite else 0.0
    gains = tuple(min(1.0, matching_gain(v, reference)) for v in levels)
    bypass_gain = min(1.0, matching_gain(bypass_level, reference))
    return LevelMatch(mode, tuple(levels), bypass_level, gains, bypass_gain)


def no_match(n_candidates: int) -> LevelMatch:
    """Every gain 1 (``--match off``)."""
    return LevelMatch("off", (0.0,) * n_candidates, 0.0, (1.0,) * n_candidates, 1.0)


def passband_gain_db(design: Design) -> float:
    """The largest passband gain of a design's filters, in dB (ideal amplifier)."""
    return max(20.0 * math.log10(abs(f.passband_gain)) for f in design.filters)


def match_by_gain(designs: Sequence[Design]) -> LevelMatch:
    """Match the candidates by their passband gains (bypass: 0 dB)."""
    return _matched("gain", [passband_gain_db(d) for d in designs], 0.0)


def twin_output(program: np.ndarray, twin: Twin) -> np.ndarray:
    """The program through a twin, its ways summed, the amplifier swing and slew included.

    Parameters
    ----------
    program : numpy.ndarray
        ``(frames, channels)`` float64 samples at ``twin.input_rate_hz``.
    twin : Twin
        The candidate's twin (oversampled as it plays:
        :func:`filtertwin.digital.render.render_array`).

    Returns
    -------
    numpy.ndarray
        ``(frames, channels)`` float64.
    """
    frames = program.shape[0]
    block = min(BLOCK_FRAMES, max(frames, 1))
    return render_array(twin, program, block).sum(axis=0)


def match_by_loudness(program: np.ndarray, rate_hz: float, twins: Sequence[Twin]) -> LevelMatch:
    """Match the candidates by the BS.1770 loudness of the program through each.

    Parameters
    ----------
    program : numpy.ndarray
        ``(frames, channels)`` float64, at least 0.4 s at ``rate_hz``.
    rate_hz : float
        Its sample rate (the twins' rate), at least 8 kHz.
    twins : sequence of Twin
        One per candidate.

    Raises
    ------
    UserInputError
        If the program is shorter than 0.4 s or the rate below 8 kHz.

    References
    ----------
    ITU-R BS.1770-4 (10/2015), Annex 1 (via :mod:`filtertwin.live.loudness`).
    """
    if rate_hz < 8000.0:
        raise UserInputError(
            f"loudness matching needs a recording at 8 kHz or more, this one is at "
            f"{rate_hz:g} Hz; use --match gain"
        )
    levels = [integrated_loudness(twin_output(program, twin), rate_hz) for twin in twins]
    return _matched("loudness", levels, integrated_loudness(program, rate_hz))


def with_level(match: LevelMatch, index: int, level: float) -> LevelMatch:
    """The match again with candidate ``index`` at a new level, the others as measured.

    Only the edited candidate changed: the other candidates' levels and the dry input's
    are kept, and every gain is found again from them (the quietest source may change).
    """
    levels = list(match.levels)
    levels[index] = level
    return _matched(match.mode, levels, match.bypass_level)


def describe(match: LevelMatch, labels: Sequence[str]) -> str:
    """One line: the offsets in dB, e.g. "level match (loudness): A -0.8 dB, B 0.0 dB ..."."""
    if match.mode == "off":
        return "level match: off (every candidate at its own level)"
    unit = "LKFS" if match.mode == "loudness" else "dB gain"
    parts = [
        f"{label} {round(offset, 1) + 0.0:+.1f} dB ({level:.1f} {unit})"
        for label, offset, level in zip(labels, match.offsets_db(), match.levels, strict=True)
    ]
    parts.append(
        f"bypass {round(match.bypass_offset_db, 1) + 0.0:+.1f} dB ({match.bypass_level:.1f} {unit})"
    )
    return f"level match ({match.mode}): " + ", ".join(parts)
