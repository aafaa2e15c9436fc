"""Run one listening session through every live path; print the kernel versions added.

Run as a separate process by ``test_live_no_compile.py`` (a fresh process holds no
compiled versions but those its own warm-up made; the test process has run other tests).
Usage: ``python kernel_census.py SCENARIO FOLDER [--reintroduce]``; prints one JSON line
``{"added": {kernel: [signature, ...]}, "blocks": N, "stream_lost": bool, "errors": [...], ...}``:
the versions added after the stream started (and, apart, those the read-ahead's first fill
added before it). ``--reintroduce`` brings back a fixed bug on purpose (the runner's output
for a short block a slice of its full buffer, which is not contiguous), to show that the
census sees it. The JACK server is the one ``JACK_DEFAULT_SERVER`` names.
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

import numpy as np
import soundfile as sf

from filtertwin.commands.listen import _designs
from filtertwin.digital import kernels
from filtertwin.live.player import ListenOptions, prepare
from filtertwin.live.watchdog import StreamLost, StreamWatchdog, call_within
from filtertwin.live.window.link import SessionLink

RATE_HZ = 48000
ODD_FRAMES = 1024 * 40 + 333
"""Recording length: not a whole number of 1024-frame reads (the loop's last block is short)."""


def _recording(folder: Path, name: str, channels: int, rate_hz: int, dtype: str) -> Path:
    """Invented test signal: noise at -12 dBFS with a 1 kHz tone, seeded."""
    rng = np.random.default_rng(5)
    frames = round(ODD_FRAMES * rate_hz / RATE_HZ)
    t = np.arange(frames) / rate_hz
    x = 0.25 * rng.standard_normal((frames, channels)) + 0.2 * np.sin(2e3 * np.pi * t)[:, None]
    path = folder / name
    sf.write(path, x, rate_hz, subtype=dtype)
    return path


SCENARIOS = {
    # name: (designs, recording (channels, rate, subtype) or None for live input, options,
    #        commands given one after another, ';' between them)
    # a stereo recording, oversampled twins run in the read-ahead (float64), level matched
    # by loudness (measured again after each edit), edits during a 0.1 s region's loop
    "stereo-ab": (
        ["candidate-butterworth", "turntable-rumble"],
        (2, RATE_HZ, "FLOAT"),
        {"match": "loudness", "match_seconds": 0.5},
        "select 2; select 1; bypass; loop; select 2; noise on; part 1 C1 +8; select 1; "
        "part 1 C1 +8; noise off; undo; corner 900; redo; jump; loop all",
    ),
    # a mono recording filtered in the callback (float32 runner, no oversampling)
    "mono-callback": (
        ["turntable-rumble"],
        (1, RATE_HZ, "PCM_16"),
        {},
        "loop; noise on; part 1 C1 +8; bypass; select 1; undo; noise off; jump; loop all",
    ),
    # blind ABX trials on a mono recording at 44.1 kHz (resampled by 160/147 ahead)
    "mono-blind": (
        ["candidate-butterworth", "candidate-bessel"],
        (1, 44100, "PCM_24"),
        {"blind": "abx", "trials": 2, "seed": 4},
        "listen A; listen B; listen X; answer A; listen B; listen X; answer B",
    ),
    # --adc-rate: a 96 kHz stereo recording, the ADC capture switched, causal resampling
    "adc-capture": (
        ["vibration-antialias", "candidate-bessel"],
        (2, 96000, "FLOAT"),
        {"adc_rate_hz": 8000.0, "match": "loudness", "match_seconds": 0.5, "resampling": "causal"},
        "capture on; loop; select 2; capture off; noise on; part 1 C1 +8; capture on; "
        "noise off; undo; jump; loop all; bypass",
    ),
    # live input (the dummy server's two capture ports), oversampled in the callback
    "live-input": (
        ["candidate-butterworth", "turntable-rumble"],
        None,
        {"match": "gain"},
        "select 2; noise on; part 1 C1 +8; select 1; part 1 C1 +8; bypass; noise off; undo",
    ),
    # live input filtered in the callback at the stream rate
    "live-callback": (
        ["turntable-rumble"],
        None,
        {"match": "gain"},
        "noise on; part 1 C1 +8; bypass; select 1; noise off",
    ),
    # the shortest: an edit's crossfade over a region's short last block (``--reintroduce``)
    "short-edit": (
        ["candidate-butterworth", "turntable-rumble"],
        (1, RATE_HZ, "FLOAT"),
        {},
        "loop; part 1 C1 +8",
    ),
}


def _failed(player, watchdog, facts: dict) -> bool:
    """True when the read-ahead or the noise thread stopped on an error, or the callback
    stopped coming (an error in it aborts the stream): the console's control loop ends the
    session then too."""
    try:
        watchdog.check()
    except StreamLost:
        facts["stream_lost"] = True
        return True
    threads = (player.feeder, player.noise_feeder)
    return any(t is not None and t.error is not None for t in threads)


def _run(player, link, commands: str, step_s: float, facts: dict) -> list[str]:
    """Start the stream, give each command in turn (polling as the control loop does)."""
    from filtertwin.errors import UserInputError
    from filtertwin.live.keys import parse_command

    errors = []
    player.open()
    stream_start = player.stream.start

    def start_recorded():  # what the read-ahead's first fill compiled, apart
        found = kernels.package_kernels()
        facts["at_start"] = kernels.signatures(found)
        stream_start()

    player.stream.start = start_recorded
    player.start()
    watchdog = StreamWatchdog(player.core.blocks_done, player.core.period_s)
    facts["stream_lost"] = False
    try:
        for text in (c.strip() for c in commands.split(";")):
            deadline = time.monotonic() + step_s
            try:
                if text == "jump":
                    link.run("jump", (f"{0.25 * player.feeder.info.duration_s:.3f}",))
                elif text == "loop":
                    end = player.feeder.info.duration_s
                    link.run("loop", (f"{0.2 * end:.3f}", f"{0.3 * end:.3f}"))
                elif text == "loop all":
                    link.run("loop", ("all",))
                elif text in ("undo", "redo"):
                    link.run(text)
                else:
                    player.session.handle(parse_command(text), time.monotonic())
            except UserInputError as error:
                errors.append(f"{text}: {error}")
            while time.monotonic() < deadline and not _failed(player, watchdog, facts):
                player.session.poll()
                link.meters()
                link.latest_signals(4096)
                time.sleep(0.01)
        while player.session.edits_pending and not _failed(player, watchdog, facts):
            player.session.poll()
            time.sleep(0.01)
        time.sleep(0.3)
    finally:
        if not call_within(player.close, 3.0):  # a stream whose callback failed may hang
            facts["close_hung"] = True
        link.close()
    return errors


def _reintroduce_sliced_views() -> None:
    """The runner's output for a short block as a slice of the full buffer (the old way)."""
    from filtertwin.digital.engine import CascadeRunner

    def sliced(self, block):
        view = self._out[:, : len(block), :]
        self._views[len(block)] = view
        return view

    CascadeRunner._make_view = sliced


def main(scenario: str, folder: Path, reintroduce: bool = False) -> None:
    if reintroduce:
        _reintroduce_sliced_views()
    names, recording, settings, commands = SCENARIOS[scenario]
    path = None
    if recording is not None:
        channels, rate_hz, subtype = recording
        path = _recording(folder, f"{scenario}.wav", channels, rate_hz, subtype)
    said: list[str] = []
    options = ListenOptions(
        input_path=path, device="system", ramp_s=0.05, **{"match": "off", **settings}
    )
    player = prepare(_designs(names), options, said.append)
    link = SessionLink(player)  # the preview window's side: tap, loop jumps, edits
    found = kernels.package_kernels(import_all=True)
    before = kernels.signatures(found)
    facts: dict = {}
    errors = _run(player, link, commands, 0.35, facts)
    added = kernels.added_signatures(facts["at_start"], kernels.signatures(found))
    core = player.core
    print(
        json.dumps(
            {
                "added": {name: sorted(sigs) for name, sigs in added.items()},
                "before_stream": {
                    name: sorted(sigs)
                    for name, sigs in kernels.added_signatures(before, facts["at_start"]).items()
                },
                "blocks": int(core.counters[0]),
                "starved": int(core.counters[2]),
                "errors": errors,
                "stream_lost": facts["stream_lost"],
                "thread_errors": [
                    repr(thread.error)
                    for thread in (player.feeder, player.noise_feeder)
                    if thread is not None and thread.error is not None
                ],
                "said": said,
            }
        )
    )
    sys.stdout.flush()
    if facts.get("close_hung"):  # as `listen` does: PortAudio's clean-up at exit would wait too
        os._exit(0)


if __name__ == "__main__":
    main(sys.argv[1], Path(sys.argv[2]), "--reintroduce" in sys.argv[3:])
