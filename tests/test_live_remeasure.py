"""The level match after an edit: only the edited candidate is measured again, off the
edit path, and a design measured before (undo) matches again at once."""

import numpy as np
import pytest

from filtertwin.live import routing
from filtertwin.live.matching import match_by_loudness, with_level
from filtertwin.live.session import ListenSession
from test_live_listen_core import RATE_HZ, noise, setup


def loudness_session():
    """Candidates A (Butterworth) and B (Bessel), matched by loudness on a noise excerpt."""
    core, plain, twins, _ = setup(["candidate-butterworth", "candidate-bessel"])
    program = noise(int(RATE_HZ), amplitude=0.3).astype(np.float64)  # 1 s
    match = match_by_loudness(program, RATE_HZ, twins)
    messages = []
    session = ListenSession(
        plain.candidates, twins, core, core, RATE_HZ, match, routing.STEREO_MIX,
        program=program, say=messages.append,
    )  # fmt: skip
    session.start(0.0)
    return session, program, messages


def test_with_level_finds_every_gain_again_from_the_new_level():
    session, program, _ = loudness_session()
    match = session.match
    louder = with_level(match, 0, match.levels[0] + 3.0)
    # gains turn every source down to the quietest (matching.py's rule): A now 3 dB louder,
    # so its gain drops by 3 dB against the others' (10^(-3/20), arithmetic)
    assert louder.levels[1] == match.levels[1] and louder.bypass_level == match.bypass_level
    assert louder.gains[0] / louder.gains[1] == pytest.approx(
        match.gains[0] / match.gains[1] * 10 ** (-3 / 20), rel=1e-12
    )


def test_an_edit_measures_the_edited_candidate_again_and_undo_matches_at_once():
    session, program, messages = loudness_session()
    before = session.match
    session.step_part(None, 1, "C1", 3)
    assert session.levels is not None and session.levels.wait(30.0)
    # reference: the whole measurement made again, every candidate and the dry input
    # (BS.1770-4, checked against the standard in test_live_loudness.py)
    full = match_by_loudness(program, RATE_HZ, session.twins)
    assert session.match.levels == pytest.approx(full.levels, abs=1e-9)
    assert session.match.gains == pytest.approx(full.gains, rel=1e-9)
    assert session.match.levels[1] == before.levels[1]  # B was not measured again
    assert session.match.levels[0] != pytest.approx(before.levels[0], abs=1e-3)  # it moved
    assert session.layout.candidates[0].level_gain == pytest.approx(full.gains[0], rel=1e-9)
    assert messages[-1].startswith("level match (loudness)")
    session.undo()  # the loaded design: measured at the start, matched again at once
    assert not session.levels.pending
    assert session.match.levels == pytest.approx(before.levels, abs=1e-12)
