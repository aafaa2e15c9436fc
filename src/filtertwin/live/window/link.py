"""The one place where the preview window meets the listening session.

Everything the window does to or reads from a running ``filtertwin listen`` goes through
:class:`SessionLink`, so that when the session grows an API of its own only this file
changes. Today it uses what :mod:`filtertwin.live.session` and :mod:`filtertwin.live.edits`
offer:

* commands are the same :class:`~filtertwin.live.keys.Command` words a script or the
  terminal sends (``select``, ``bypass``, ``solo``, ``mute``, ``level``, ``part``,
  ``corner``, ``listen``, ``answer``, ``capture``, ``noise``, ``quit``). The link serialises every
  command, from the terminal and from the page alike, with one lock around the session's
  ``handle``, so the two never interleave;
* undo, redo and "save as" are the session's own (:meth:`ListenSession.undo
  <filtertwin.live.session.ListenSession.undo>`, ``redo``, ``save_as``): one edit history
  for the terminal and the page, every change crossfaded in.

The page reads a snapshot of the session taken under the same lock (:meth:`SessionLink.view`)
and the meters the audio callback wrote (:meth:`SessionLink.meters`); nothing here runs in
the audio thread.
"""

from __future__ import annotations

import collections
import math
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from filtertwin.circuit.design import Design
from filtertwin.errors import UserInputError
from filtertwin.live import keys
from filtertwin.live.player import Player
from filtertwin.live.status import StatusReader
from filtertwin.live.tap import SignalTap
from filtertwin.live.tap import warm_up as warm_up_tap

MESSAGES_KEPT = 40


@dataclass(frozen=True)
class SessionView:
    """What the page shows of the session at one moment (plain data)."""

    version: int
    candidates: tuple[Any, ...]
    twins: tuple[Any, ...]
    selected: int | None
    solo: str
    muted: frozenset[str]
    level_db: float
    ceiling_dbfs: float
    processing_rate_hz: float
    match_offsets_db: tuple[float, ...]
    previous: dict[int, Design]
    can_undo: bool
    can_redo: bool
    capture: str
    noise: str
    blind: dict[str, Any] | None


class SessionLink:
    """Drive and read a prepared :class:`~filtertwin.live.player.Player`'s session.

    Parameters
    ----------
    player : Player
        The prepared session (before or after its stream starts).
    clock : callable
        Seconds, monotonic.

    Notes
    -----
    Construction attaches a :class:`~filtertwin.live.tap.SignalTap` to the stream core (the
    callback then copies each block into it) and wraps the session's ``handle`` and ``say``
    so that terminal commands are serialised with the page's and their messages reach it.
    """

    def __init__(self, player: Player, clock: Callable[[], float] = time.monotonic) -> None:
        self.player = player
        self.session = player.session
        self.core = player.core
        self.clock = clock
        self.lock = threading.RLock()
        self._changes = 0
        self.originals = tuple(c.design for c in self.session.candidates)
        """Each candidate's design as it started (the stage cards' targets)."""
        self.messages: collections.deque[tuple[int, str]] = collections.deque(maxlen=MESSAGES_KEPT)
        self._message_count = 0
        warm_up_tap()
        self.tap = SignalTap()
        self.core.tap = self.tap
        self._reader = StatusReader(self.session, player.cpu_load, clock)
        self._handle = self.session.handle
        self._say = self.session.say
        self.session.handle = self._locked_handle  # type: ignore[method-assign]
        self.session.say = self._say_too

    @property
    def version(self) -> int:
        """Grows with every change the page shows: commands, and level matches found again
        after an edit (they arrive from the session's measuring thread)."""
        return self._changes + self.session.match_updates

    # --- commands --------------------------------------------------------------------------

    def _say_too(self, message: str) -> None:
        self._message_count += 1
        self.messages.append((self._message_count, message))
        self._say(message)

    def _locked_handle(self, command: keys.Command, now_s: float) -> None:
        with self.lock:
            self._handle(command, now_s)
            self._changes += 1

    def run(self, name: str, args: tuple[str, ...] = ()) -> None:
        """Carry out one command word with its arguments, as a script line would.

        Raises
        ------
        UserInputError
            If the word is not a command the session knows.
        """
        if name == "undo":
            self.undo()
        elif name == "redo":
            self.redo()
        elif name in ("jump", "loop"):
            self._move_loop(name, args)
        else:
            command = keys.parse_command(" ".join([name, *args]))
            self.session.handle(command, self.clock())

    def _move_loop(self, name: str, args: tuple[str, ...]) -> None:
        """``jump S``: play from S seconds; ``loop S E``: loop S to E seconds; ``loop all``."""
        feeder = self.player.feeder
        if feeder is None:
            raise UserInputError(f"{name}: the live input has no position; play a recording")
        reader, rate_hz = feeder.reader, feeder.info.rate_hz
        try:
            seconds = [float(a) for a in args if a != "all"]
        except ValueError:
            raise UserInputError(f"{name} takes seconds, e.g. 'jump 12.5', 'loop 10 20'") from None
        frames = [round(s * rate_hz) for s in seconds]
        try:
            if name == "jump" and len(frames) == 1:
                start, end = reader.region
                reader.request(frames[0], start, end)
                self.session.say(f"playing from {seconds[0]:.1f} s")
            elif name == "loop" and len(frames) == 2:
                reader.request(frames[0], frames[0], frames[1])
                self.session.say(f"looping {seconds[0]:.1f} s to {seconds[1]:.1f} s")
            elif name == "loop" and args == ("all",):
                reader.request(0, 0, None)
                self.session.say("looping the whole recording")
            else:
                raise UserInputError("use 'jump S', 'loop S E' or 'loop all' (seconds)")
        except ValueError as error:
            raise UserInputError(
                f"{name}: {error} (the recording lasts {feeder.info.duration_s:.1f} s)"
            ) from None
        self._changes += 1

    def undo(self) -> None:
        """Take back the latest edit (any candidate); it can be redone."""
        self.run_edit(self.session.undo, "undo")

    def redo(self) -> None:
        """Make the latest undone edit again."""
        self.run_edit(self.session.redo, "redo")

    def run_edit(self, action: Callable[[], Any], name: str) -> None:
        with self.lock:
            try:
                action()
            except UserInputError as error:
                self.session.say(f"{name}: {error}")
            self._changes += 1

    def save_as(self, path: str) -> Path:
        """Write the heard candidate's design, as edited, to a new file.

        Raises
        ------
        UserInputError
            During blind trials, in bypass, or if the file exists or cannot be written.
        """
        with self.lock:
            return self.session.save_as(path)

    # --- reading ---------------------------------------------------------------------------

    def view(self) -> SessionView:
        """A snapshot of the session (taken under the command lock)."""
        with self.lock:
            s = self.session
            offsets = tuple(
                20 * math.log10(c.level_gain) if c.level_gain > 0 else -math.inf
                for c in s.layout.candidates
            )
            plan = s.capture_plan
            return SessionView(
                version=self.version,
                candidates=tuple(s.candidates),
                twins=tuple(s.twins),
                selected=s.selection.candidate,
                solo=s.selection.solo,
                muted=frozenset(s.selection.muted),
                level_db=s.safety.level_db,
                ceiling_dbfs=s.safety.ceiling_dbfs,
                processing_rate_hz=s.processing_rate_hz,
                match_offsets_db=offsets,
                previous={r.index: r.before for r in s.history},
                can_undo=bool(s.history),
                can_redo=bool(s.undone),
                capture="" if plan is None else ("on" if s.capture_on else "off"),
                noise="" if s.noise is None else ("on" if s.noise.on else "off"),
                blind=self._blind_view(),
            )

    def _blind_view(self) -> dict[str, Any] | None:
        s = self.session
        blind = s.blind
        if blind is None:
            return None
        view: dict[str, Any] = {
            "kind": blind.plan.kind,
            "trial": min(blind.trial, blind.plan.n_trials),
            "trials": blind.plan.n_trials,
            "answered": len(blind.answers),
            "buttons": list(s.blind_buttons()),
            "heard": s.heard,
            "finished": blind.finished,
        }
        if blind.finished:
            score = blind.score()
            from filtertwin.live.blind import describe_score

            view["score"] = {
                "hits": score.hits,
                "trials": score.trials,
                "p_value": score.p_value,
                "text": describe_score(blind.plan, score),
            }
        return view

    def meters(self) -> dict[str, Any]:
        """Meters and counters of the stream now (read from what the callback wrote)."""
        facts = self._reader.facts()
        core = self.core
        stream = self.player.stream
        latency = getattr(stream, "latency", None) if stream is not None else None
        if isinstance(latency, tuple):
            latency = latency[-1]
        feeder = self.player.feeder
        loop_s = position_s = region_s = None
        if feeder is not None:
            info, reader = feeder.info, feeder.reader
            loop_s = info.duration_s
            start, end = reader.region
            region_s = [start / info.rate_hz, end / info.rate_hz]
            # what is heard now: the read position less what waits in the read-ahead ring
            ahead = feeder.ring.available_frames * info.rate_hz / core.rate_hz
            heard = reader.position - ahead
            position_s = (start + (heard - start) % (end - start)) / info.rate_hz
        return {
            "way_peaks": [[w, p] for w, p in facts.way_peaks],
            "output_peak": facts.output_peak,
            "limit_db": facts.limiter_db,  # 0 during blind trials (it differs between designs)
            "limiting": facts.limiting,
            "clipping": list(facts.clipping),
            "slewing": list(facts.slewing),
            "xruns": facts.xruns,
            "starved_frames": facts.starved_frames,
            "callback_load": facts.callback_median_s / facts.period_s,
            "callback_max_load": facts.callback_max_s / facts.period_s,
            "cpu_load": facts.cpu_load,
            "latency_s": None if latency is None else float(latency),
            "level_db": facts.level_db,
            "ramp": facts.ramp_gain,
            "elapsed_s": facts.elapsed_s,
            "loop_s": loop_s,
            "region_s": region_s,
            "position_s": position_s,
        }

    def flags(self) -> tuple[tuple[str, ...], tuple[str, ...]]:
        """Stages of the heard candidate that reached their swing, and their slew rate, in
        the last second (named as :func:`~filtertwin.live.window.views.stage_label` does)."""
        facts = self._reader.facts()
        return facts.clipping, facts.slewing

    def latest_signals(self, frames: int) -> tuple[np.ndarray, np.ndarray, float]:
        """The last ``frames`` of the dry input and the output, and the stream rate."""
        dry, out, _ = self.tap.latest(frames)
        return dry, out, self.core.rate_hz

    def close(self) -> None:
        """Give the session its own ``handle`` and ``say`` back; detach the tap."""
        with self.lock:
            self.session.handle = self._handle  # type: ignore[method-assign]
            self.session.say = self._say
            self.core.tap = None
