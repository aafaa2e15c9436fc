"""Where the mix goes: one stereo pair, or one channel pair per way (active monitoring).

In the default *stereo mix* every heard source is summed onto one stereo pair: no way feeds
a driver directly, so bypass is harmless to speakers. With *ways out* each way has its own
output pair (low on channels 1-2, mid on 3-4, high on 5-6 ... for the ways present), as an
active crossover feeds its amplifiers. A source then reaches a pair only if it is that way
of the selected candidate; bypass sends the full-range input to every pair, and a pair that
feeds a mid or high driver (a way with a high-pass) would get bass it cannot take: that
needs a confirmation (:func:`bypass_warning`).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from filtertwin.live.candidates import PROTECTED_WAYS, ListenCandidate
from filtertwin.live.mixer import Layout, Selection, target_gains

STEREO_MIX: tuple[str, ...] = ()
"""Routing of the default mode: every source on one stereo pair."""
LOWEST_TWEETER_HZ = 1000.0
"""Common practice (no source): tweeters are crossed over well above 1 kHz."""


def pair_gains(layout: Layout, selection: Selection, pair_ways: Sequence[str]) -> list[np.ndarray]:
    """Source gains of every output pair.

    Parameters
    ----------
    layout : Layout
        The candidates and their ways.
    selection : Selection
        What the listener wants to hear.
    pair_ways : sequence of str
        The way each output pair carries (ways-out mode), or :data:`STEREO_MIX` (empty)
        for one pair carrying the whole mix.

    Returns
    -------
    list of numpy.ndarray
        One gain vector (``layout.n_sources`` values) per output pair.

    Raises
    ------
    UserInputError
        From :func:`~filtertwin.live.mixer.target_gains` for a selection that does not exist.
    """
    gains = target_gains(layout, selection)
    if not pair_ways:
        return [gains]
    result = []
    for way in pair_ways:
        pair = np.zeros_like(gains)
        pair[-1] = gains[-1]  # bypass: the dry input reaches every pair
        chain = 0
        for candidate in layout.candidates:
            for candidate_way in candidate.ways:
                if candidate_way == way:
                    pair[chain] = gains[chain]
                chain += 1
        result.append(pair)
    return result


def channels_of(pair_ways: Sequence[str], way: str) -> str:
    """1-based output channels of a way's pair, e.g. "5-6"."""
    first = 2 * list(pair_ways).index(way) + 1
    return f"{first}-{first + 1}"


def bypass_warning(pair_ways: Sequence[str]) -> str | None:
    """The warning to confirm before bypass, or None when bypass is harmless.

    Bypass needs a confirmation only in ways-out mode with a pair for a mid or high way.
    """
    at_risk = [way for way in pair_ways if way in PROTECTED_WAYS]
    if not at_risk:
        return None
    places = ", ".join(f"{way} (channels {channels_of(pair_ways, way)})" for way in at_risk)
    return (
        f"WARNING: bypass sends the full-range input, bass included, to the {places} "
        "outputs; a tweeter or mid driver there can be destroyed"
    )


def low_reaching_high_ways(candidates: Sequence[ListenCandidate]) -> list[str]:
    """Warnings for ``high`` ways (ways-out mode) whose high-pass lets bass through.

    A high-pass with a stage below 1 kHz (a rumble filter, say) is named by its response a
    ``high`` way, but it is no tweeter feed: its pair would carry nearly the full range.
    """
    warnings = []
    for candidate in candidates:
        for way, f in zip(candidate.ways, candidate.design.filters, strict=True):
            lowest_hz = f.characteristic_hz()[0]
            if way == "high" and lowest_hz < LOWEST_TWEETER_HZ:
                warnings.append(
                    f"WARNING: the high way of {candidate.label} ({f.name}) reaches down to "
                    f"{lowest_hz:.0f} Hz: do not connect a tweeter to its outputs"
                )
    return warnings
