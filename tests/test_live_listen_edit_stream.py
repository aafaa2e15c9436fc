"""A live part edit through a real PortAudio stream on the JACK dummy server, recorded on
the loopback: no click beyond what a candidate switch allows, and no xrun from the edit."""

import math
import time

import numpy as np
import pytest
from scipy import signal

from filtertwin.live.keys import Command
from filtertwin.live.stream import BLOCKS, CPU_HISTORY, XRUNS
from test_live_listen_stream import (
    ATTEMPTS,
    PREROLL,
    RATE_HZ,
    Recorder,
    player_for,
    signal_start,
    write_wav,
)

pytestmark = pytest.mark.live


def record_edit(player, seconds, at_s, command):
    """Play and record; give ``command`` at ``at_s`` and move the edit on as the control
    loop does (every 10 ms here). Returns the recording and the edit's block window."""
    recorder = Recorder(int((seconds + 1.0) * RATE_HZ))
    session, core = player.session, player.core
    try:
        player.open()
        recorder.connect()
        player.start()
        started = time.monotonic()
        time.sleep(max(0.0, at_s - (time.monotonic() - started)))
        first_block, xruns_before = int(core.counters[BLOCKS]), int(core.counters[XRUNS])
        session.handle(command, time.monotonic())
        while time.monotonic() - started < seconds:
            session.poll()
            if not session.edits_pending and first_block is not None:
                window = (first_block, int(core.counters[BLOCKS]))
                xruns = int(core.counters[XRUNS]) - xruns_before
                first_block = None
            time.sleep(0.01)
        player.close()
    finally:
        player.close()
        recorder.close()
    assert first_block is None, "the edit did not finish within the run"
    disturbed = int(core.counters[XRUNS]) + recorder.xruns
    return recorder.data[: recorder.position], window, xruns, disturbed


def test_a_part_edit_on_the_stream_is_click_free_and_causes_no_xrun(tmp_path, jack_server):
    f_hz, amplitude = 400.0, 0.3
    t = np.arange(4 * RATE_HZ) / RATE_HZ
    tone = amplitude * np.sin(2 * np.pi * f_hz * t)
    wav = write_wav(tmp_path / "sine.wav", np.concatenate([np.zeros(PREROLL), tone]))
    edit = Command("part", ("topcut", "2", "C1", "+8"))  # resonance down to 1.4 kHz, Q 2.8
    failures = []
    for _ in range(ATTEMPTS):
        player = player_for(["candidate-butterworth", "candidate-bessel"], wav, [])
        old = player.session.twins[0].filters[0].sos
        captured, (first, last), xruns, disturbed = record_edit(player, 2.4, 1.0, edit)
        new = player.session.twins[0].filters[0].sos
        y = captured[signal_start(captured) :, 0].astype(np.float64)
        y = y[int(0.3 * RATE_HZ) : int(2.0 * RATE_HZ)]  # after the ramp; the edit inside
        twin_hz = player.session.twins[0].rate_hz  # the rate the (oversampled) twin runs at
        amps = [amplitude * abs(signal.sosfreqz(s, [f_hz], fs=twin_hz)[1][0]) for s in (old, new)]
        fade = round(0.030 * RATE_HZ)  # the default crossfade, 30 ms
        # the bound of the candidate-switching test (test_live_listen_stream): hand
        # derivation |y[n+1]-y[n]| <= 2 pi f/fs max(A) + (A_old + A_new)/N, 1 % margin
        bound = (2 * math.pi * f_hz / RATE_HZ * max(amps) + sum(amps) / fade) * 1.01
        step = float(np.max(np.abs(np.diff(y))))
        blocks = np.arange(first, last) % CPU_HISTORY
        slowest_s = float(np.max(player.core.cpu_s[blocks]))
        period_s = player.core.period_s
        # the rebuilding runs in the control thread: no callback of the edit takes even half
        # its period (before, an edit's callback took 2.5-4.3 ms of the 5.3 ms period)
        if disturbed == 0:  # a run without any xrun: the click bound holds, no excuse
            assert step < bound, (step, bound)
        if xruns == 0 and step < bound and slowest_s < period_s / 2:
            return
        # on a busy machine a late JACK cycle drops or repeats a block (LIVE-AUDIO-TESTING.md)
        failures.append((xruns, disturbed, step / bound, slowest_s / period_s))
    pytest.fail(
        "every run was disturbed: (xruns in the edit, xruns in all, step / bound, slowest "
        f"callback of the edit / period) per run: {failures}"
    )
