"""What the listener's commands do: selection, blind trials, level, confirmations, edits.

:class:`ListenSession` runs in the control (main) thread. It turns each
:class:`~filtertwin.live.keys.Command` into a new mix for the stream (a crossfade, via
:meth:`StreamCore.request <filtertwin.live.stream.StreamCore.request>`), a level change of
the output safety, a step of the blind session, or a live edit: the design is rebuilt and
its twin made here, then each changed chain is crossfaded to its new sections through a
warm spare (:class:`~filtertwin.live.chains.BlendedSwap`, moved on by :meth:`poll`). Edits
can be undone and redone, listed and saved to a new design file. Every outcome is one line
handed to ``say``.

Ways: ``solo WAY`` hears that way alone (``solo sum``: every way) and clears the mutes;
``mute WAY`` leaves a way out of the sum (again: back in), ends a solo, and is refused when
it would leave nothing to hear. A way is named by its role (low, mid, high: the keys l, m,
h) or by the design's filter name (``topcut``, ``woofer``). Switching to a candidate
without the soloed way hears all its ways; mutes of ways it lacks do not apply to it.
"""

from __future__ import annotations

import math
import threading
import time
from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from filtertwin.digital.twin import Twin, build_twin
from filtertwin.errors import UserInputError
from filtertwin.live import candidates as cands
from filtertwin.live import capture, edits, keys, matching, routing
from filtertwin.live.blind import BlindSession, buttons, describe_score
from filtertwin.live.chains import BlendedSwap, ChainHost, ChainSwapper
from filtertwin.live.hiss import LiveNoise
from filtertwin.live.mixer import SUM, Selection
from filtertwin.live.remeasure import LoudnessRemeasure
from filtertwin.live.safety import MAX_LEVEL_DB, MIN_LEVEL_DB, OutputSafety
from filtertwin.live.stream import StreamCore

CONFIRM_WINDOW_S = 3.0
POLL_EVERY_S = 0.005
"""How often the edit crossfades are moved on while one is under way."""
POLL_GIVE_UP_S = 10.0
"""The edit thread stops after this (a stalled stream); the control loop polls on."""


class ListenSession:
    """Control state of a listening session.

    Parameters
    ----------
    candidates : sequence of ListenCandidate
        The designs, labelled A, B ...
    twins : sequence of Twin
        Each candidate's twin at ``processing_rate_hz``.
    core : StreamCore
        The audio callback's state (mixers, safety).
    host : ChainHost
        Whatever runs the runner (the core, or the read-ahead pre-filter).
    processing_rate_hz : float
        Rate the twins run at.
    match : LevelMatch
        Level matching found before the start.
    pair_ways : sequence of str
        Way of each output pair (ways-out), or empty for the stereo mix.
    program : numpy.ndarray, optional
        The excerpt used for loudness matching, to match again after an edit.
    blind : BlindSession, optional
        Blind trials (two candidates); names stay hidden until the end.
    say : callable
        Where messages go (one line each).
    capture_plan : CapturePlan, optional
        The ADC capture (``--adc-rate``): the core then carries a capture of every chain and
        of the dry input, and ``capture on|off`` chooses between them and the signals.
    noise : LiveNoise, optional
        Every chain's circuit noise, switched by ``noise on|off``; it follows edits.
    noise_on : bool
        Switch the noise on at the start (``--circuit-noise``).
    """

    def __init__(
        self,
        candidates: Sequence[cands.ListenCandidate],
        twins: Sequence[Twin],
        core: StreamCore,
        host: ChainHost,
        processing_rate_hz: float,
        match: matching.LevelMatch,
        pair_ways: Sequence[str] = routing.STEREO_MIX,
        program: np.ndarray | None = None,
        blind: BlindSession | None = None,
        say: Callable[[str], None] = print,
        capture_plan: capture.CapturePlan | None = None,
        noise: LiveNoise | None = None,
        noise_on: bool = False,
    ) -> None:
        self.candidates = list(candidates)
        self.twins = list(twins)
        self.core = core
        self.swapper = ChainSwapper(host)
        self.processing_rate_hz = processing_rate_hz
        self.match = match
        self.pair_ways = tuple(pair_ways)
        self.program = program
        self.blind = blind
        self.say = say
        self.selection = Selection(candidate=0)
        self.heard = ""  # the blind button heard now
        self.pending: tuple[keys.Command, float] | None = None
        self.quit_requested = False
        self.edits_made = 0
        self.capture_plan = capture_plan
        self.capture_on = False
        self.noise = noise
        self.noise_at_start = noise_on
        self.layout = cands.layout(self.candidates, match.gains, match.bypass_gain)
        self.original_designs = [c.design for c in self.candidates]
        self.history: list[EditRecord] = []
        self.undone: list[EditRecord] = []
        self.queued: deque[tuple[int, np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = deque()
        """Chain crossfades waiting their turn: (chain, sos, clip levels, slew steps, old sos)."""
        self.swapping: BlendedSwap | None = None
        self.fade_frames = max(
            1, round(core.mixers[0].fade_frames / core.rate_hz * self._runner_rate_hz())
        )
        self.lock = threading.RLock()
        """Held by every command: the console and a preview window may both call in."""
        self._poller: threading.Thread | None = None
        self.match_updates = 0
        """Counts level matches found again after edits (a preview window redraws on it)."""
        self.levels: LoudnessRemeasure | None = None
        if match.mode == "loudness" and program is not None:
            self.levels = LoudnessRemeasure(program, processing_rate_hz, self._level_measured)
            for c, level in zip(self.candidates, match.levels, strict=True):
                self.levels.remember(c.design, level)

    @property
    def safety(self) -> OutputSafety:
        """The stream's output safety (level and ceiling)."""
        return self.core.safety

    # --- starting and the mix ---------------------------------------------------------------

    def start(self, now_s: float) -> None:
        """Set the first mix (candidate A, or the first blind choice)."""
        if self.blind is not None:
            self.blind.start_trial(now_s)
            self._hear_button(self.blind_buttons()[0])
            self._trial_prompt()
        self._apply()
        if self.noise is not None and self.noise_at_start:
            self.noise.switch(True)

    def _apply(self) -> None:
        gains = routing.pair_gains(self.layout, self.selection, self.pair_ways)
        if self.capture_plan is not None:
            gains = [capture.source_gains(g, self.capture_on) for g in gains]
        self.core.request(gains)

    def _select(self, selection: Selection) -> None:
        routing.pair_gains(self.layout, selection, self.pair_ways)  # refuses a bad selection
        self.selection = selection
        self._apply()

    @property
    def blind_active(self) -> bool:
        """True while blind trials run (nothing shown may tell the designs apart)."""
        return self.blind is not None and not self.blind.finished

    def now_hearing(self) -> str:
        """What is heard now, for the status line (hidden names in blind trials)."""
        if self.blind is not None and not self.blind.finished:
            what = f"trial {self.blind.trial}/{self.blind.plan.n_trials}: {self.heard}"
            return what if self.selection.candidate is not None else f"{what} (bypass)"
        if self.selection.candidate is None:
            return "bypass"
        return self.candidates[self.selection.candidate].label

    # --- commands -----------------------------------------------------------------------------

    def handle(self, command: keys.Command, now_s: float) -> None:
        """Carry out one command; a problem is said, never raised."""
        with self.lock:
            try:
                self._dispatch(command, now_s)
            except UserInputError as error:
                self.say(f"{command.name}: {error}")

    def _dispatch(self, command: keys.Command, now_s: float) -> None:
        handler = getattr(self, f"_do_{command.name}", None)
        if handler is None:
            raise UserInputError(f"'{command.name}' does nothing while listening")
        handler(command, now_s)

    def _do_select(self, command: keys.Command, now_s: float) -> None:
        choice = command.args[0]
        if self.blind is not None and not self.blind.finished:
            if choice in self.blind_buttons():
                self._do_listen(keys.Command("listen", (choice,)), now_s)
                return
            raise UserInputError(
                f"during blind trials listen with {', '.join(self.blind_buttons())}"
            )
        labels = [c.label for c in self.candidates]
        index = (
            int(choice) - 1
            if choice.isdigit()
            else labels.index(choice)
            if choice in labels
            else -1
        )
        if not 0 <= index < len(self.candidates):
            raise UserInputError(
                f"there is no candidate {choice}; the candidates are {', '.join(labels)}"
            )
        selection, note = self._fitted(replace(self.selection, candidate=index))
        self._select(selection)
        self.say(self._describe_selection() + note)

    def _fitted(self, selection: Selection) -> tuple[Selection, str]:
        """The selection made possible for its candidate, and a note on what changed."""
        if selection.candidate is None:
            return selection, ""
        candidate = self.candidates[selection.candidate]
        if selection.solo != SUM and selection.solo not in candidate.ways:
            note = f" ({candidate.label} has no {selection.solo} way: all its ways are heard)"
            return replace(selection, solo=SUM, muted=frozenset()), note
        if selection.solo == SUM and all(w in selection.muted for w in candidate.ways):
            note = f" (every way of {candidate.label} was muted: all its ways are heard)"
            return replace(selection, muted=frozenset()), note
        return selection, ""

    def _way_listing(self, index: int) -> str:
        c = self.candidates[index]
        return ", ".join(
            w if n == w else f"{n} ({w})" for w, n in zip(c.ways, c.filter_names, strict=True)
        )

    def _resolve_way(self, word: str) -> str:
        """The way role (low, mid, high or sum) a word names for the candidate heard."""
        if word == SUM:
            return SUM
        if self.blind_active:
            common = [w for w in self.candidates[0].ways if w in self.candidates[1].ways]
            if word not in common:
                raise UserInputError(
                    f"during blind trials solo and mute take a way both designs have: "
                    f"{', '.join(common)}"
                )
            return word
        index = self.selection.candidate
        if index is None:
            raise UserInputError("bypass has no ways; select a candidate first")
        candidate = self.candidates[index]
        if word in candidate.ways:
            return word
        if word in candidate.filter_names:
            return candidate.ways[candidate.filter_names.index(word)]
        raise UserInputError(
            f"candidate {candidate.label} has no {word!r} way; "
            f"its ways are {self._way_listing(index)}"
        )

    def _do_bypass(self, command: keys.Command, now_s: float) -> None:
        warning = routing.bypass_warning(self.pair_ways)
        if warning is not None and self.selection.candidate is not None:
            if not self._confirmed(command, now_s):
                self.pending = (command, now_s + CONFIRM_WINDOW_S)
                self.say(f"{warning}; press 0 again within {CONFIRM_WINDOW_S:g} s to confirm")
                return
            self.say("bypass confirmed: full-range input on every output pair")
        self.pending = None
        self._select(replace(self.selection, candidate=None))
        self.say("now: bypass (the input without any filter)")

    def _confirmed(self, command: keys.Command, now_s: float) -> bool:
        return self.pending is not None and self.pending[0] == command and now_s <= self.pending[1]

    def _do_confirm(self, command: keys.Command, now_s: float) -> None:
        if self.pending is None or now_s > self.pending[1]:
            self.pending = None
            raise UserInputError("nothing to confirm (a confirmation holds for 3 s)")
        self._dispatch(self.pending[0], now_s)

    def _do_solo(self, command: keys.Command, now_s: float) -> None:
        way = self._resolve_way(command.args[0])
        self._select(replace(self.selection, solo=way, muted=frozenset()))
        self.say(self._describe_selection())

    def _do_mute(self, command: keys.Command, now_s: float) -> None:
        way = self._resolve_way(command.args[0])
        if way == SUM:
            raise UserInputError("mute takes one way; to hear nothing, lower the level")
        muted = frozenset(self.selection.muted ^ {way})
        selection = replace(self.selection, solo=SUM, muted=muted)
        if not self._heard_ways(selection):
            raise UserInputError(
                f"muting {command.args[0]} would leave nothing to hear; press s to hear every way"
            )
        self._select(selection)
        self.say(self._describe_selection())

    def _heard_ways(self, selection: Selection) -> list[str]:
        """The ways a selection plays (role names), for the candidate it selects."""
        if selection.candidate is None:
            return []
        ways = self.candidates[selection.candidate].ways
        if self.blind_active:  # the same words for both designs (only common ways allowed)
            ways = tuple(w for w in ways if w in self.candidates[1 - selection.candidate].ways)
        if selection.solo != SUM:
            return [selection.solo]
        return [w for w in ways if w not in selection.muted]

    def ways_heard(self) -> str:
        """What the ways are doing, for the status line: "all ways", "solo woofer",
        "without mid" (role names during blind trials)."""
        s = self.selection
        if s.candidate is None:
            return ""
        c = self.candidates[s.candidate]

        def name(way: str) -> str:
            return way if self.blind_active else c.filter_names[c.ways.index(way)]

        if s.solo != SUM:
            return f"solo {name(s.solo)}"
        muted = [w for w in c.ways if w in s.muted]
        if self.blind_active:
            muted = [w for w in muted if w in self.candidates[1 - s.candidate].ways]
        if not muted:
            return "all ways" if len(c.ways) > 1 else ""
        return "without " + "+".join(name(w) for w in muted)

    def _do_level(self, command: keys.Command, now_s: float) -> None:
        self._set_level(float(command.args[0]))

    def _do_louder(self, command: keys.Command, now_s: float) -> None:
        self._set_level(min(MAX_LEVEL_DB, self.safety.level_db + keys.LEVEL_STEP_DB))

    def _do_quieter(self, command: keys.Command, now_s: float) -> None:
        self._set_level(max(MIN_LEVEL_DB, self.safety.level_db - keys.LEVEL_STEP_DB))

    def _set_level(self, level_db: float) -> None:
        self.safety.set_level(level_db)
        self.say(
            f"output level {level_db:+.1f} dB (ceiling {self.safety.ceiling_dbfs:g} dBFS stays)"
        )

    def _do_capture(self, command: keys.Command, now_s: float) -> None:
        plan = self.capture_plan
        if plan is None:
            raise UserInputError(
                "there is no ADC capture to hear; start listen with --adc-rate HZ and a "
                "recording sampled faster than the ADC (--input)"
            )
        self.capture_on = command.args[0] == "on" if command.args else not self.capture_on
        self._apply()
        if self.capture_on:
            self.say(
                f"now: {self.now_hearing()} as an ideal {plan.adc_rate_hz:g} Hz ADC captures "
                f"it (aliases included), played back band-limited at {plan.stream_rate_hz:g} Hz"
            )
        else:
            self.say(f"now: {self.now_hearing()} itself (ADC capture off)")

    def noise_label(self) -> str:
        """For the status line: "noise on" while the circuit noise is heard, else ""."""
        return "noise on" if self.noise is not None and self.noise.on else ""

    def _do_noise(self, command: keys.Command, now_s: float) -> None:
        if self.noise is None:
            raise UserInputError("this session has no circuit noise to add")
        on = command.args[0] == "on" if command.args else not self.noise.on
        self.noise.switch(on)
        if on:
            self.say(
                "circuit noise on: each way's computed output noise (resistors and amplifier) "
                "at its true level against full scale, with the way's own gain"
            )
        else:
            self.say("circuit noise off")

    def _do_help(self, command: keys.Command, now_s: float) -> None:
        self.say(keys.help_text())

    def _do_edit(self, command: keys.Command, now_s: float) -> None:
        raise UserInputError(
            "edit opens a line on the keyboard; in a script write the command itself, "
            "e.g. 'part low 2 C1 +1'"
        )

    def _do_quit(self, command: keys.Command, now_s: float) -> None:
        self.quit_requested = True

    def _describe_selection(self) -> str:
        s = self.selection
        if s.candidate is None:
            return "now: bypass"
        c = self.candidates[s.candidate]
        heard = self._heard_ways(s)
        if self.blind_active:
            return f"now: {self.heard}, ways {'+'.join(heard)}"
        ways = "ways " + "+".join(c.filter_names[c.ways.index(w)] for w in heard)
        offset = 20 * math.log10(self.layout.candidates[s.candidate].level_gain)
        match_db = round(offset, 1) + 0.0
        return f"now: {c.label} ({c.name}), {ways}, level match {match_db:+.1f} dB"

    # --- blind trials ---------------------------------------------------------------------

    def blind_buttons(self) -> tuple[str, ...]:
        """The choices to listen to in the blind trials."""
        assert self.blind is not None
        return buttons(self.blind.plan.kind)

    def _hear_button(self, button: str) -> None:
        assert self.blind is not None
        name = self.blind.design_for(button)
        index = [c.name for c in self.candidates].index(name)
        self.heard = button
        self._select(replace(self.selection, candidate=index))

    def _trial_prompt(self) -> None:
        assert self.blind is not None
        if self.blind.plan.kind == "abx":
            hint = "listen with a, b, x; answer 'X is A' or 'X is B' with A or B (Shift)"
        else:
            hint = "listen with 1 and 2; answer with Enter (the one you hear) or 'answer 1|2'"
        self.say(f"trial {self.blind.trial} of {self.blind.plan.n_trials}: {hint}")

    def _need_blind(self) -> BlindSession:
        if self.blind is None:
            raise UserInputError("there are no blind trials; start with --abx N or --prefer N")
        if self.blind.finished:
            raise UserInputError("the blind trials are over")
        return self.blind

    def _do_trials(self, command: keys.Command, now_s: float) -> None:
        self._need_blind()
        self._trial_prompt()

    def _do_listen(self, command: keys.Command, now_s: float) -> None:
        blind = self._need_blind()
        button = command.args[0]
        if button not in self.blind_buttons():
            raise UserInputError(
                f"{button} is not a choice in {blind.plan.kind} trials; "
                f"use {', '.join(self.blind_buttons())}"
            )
        self._hear_button(button)
        self.say(f"trial {blind.trial}: now {button}")

    def _do_answer(self, command: keys.Command, now_s: float) -> None:
        blind = self._need_blind()
        given = command.args[0] if command.args else self.heard
        if given == "X":
            raise UserInputError("say which X is: answer A or B (Shift+a, Shift+b)")
        blind.answer(given, now_s)
        self.say(f"trial {blind.trial - 1} answered: {given}")
        if blind.finished:
            blind.end()
            self.say(describe_score(blind.plan, blind.score()))
            if blind.log is not None:
                self.say(f"trial log written to {blind.log.path}")
            self.quit_requested = True
            return
        self._hear_button(self.blind_buttons()[0])
        self._trial_prompt()

    # --- live edits -----------------------------------------------------------------------
    #
    # The session API (also used by the preview window): step_part, set_part, set_corner,
    # undo, redo, edit_lines, save_as. Each returns the line it said; a problem is raised
    # as UserInputError. The audio follows within about half a second (see poll).

    def _edited_candidate(self) -> int:
        if self.blind_active:
            raise UserInputError("no edits during blind trials (they would give the names away)")
        if self.selection.candidate is None:
            raise UserInputError("select a candidate first: an edit changes the one you hear")
        return self.selection.candidate

    def _way_filter(self, index: int, way: str | None) -> str:
        candidate = self.candidates[index]
        if way is None:
            if len(candidate.ways) != 1:
                raise UserInputError(
                    f"candidate {candidate.label} has ways {self._way_listing(index)}; "
                    f"say which, e.g. 'part {candidate.ways[0]} 2 C1 +1'"
                )
            way = candidate.ways[0]
        return candidate.filter_of(way)

    def edit_part(self, edit: edits.PartEdit) -> str:
        """Change one part of the candidate heard (``part [WAY] [STAGE] PART CHANGE``)."""
        with self.lock:
            index = self._edited_candidate()
            name = self._way_filter(index, edit.way)
            old_design = self.candidates[index].design
            design, old_stage, value = edits.edit_part(old_design, name, edit)
            new_stage = design.filter(name).stages[old_stage.index - 1]
            old_value = old_stage.circuit.parts()[edit.part]
            line = (
                f"{self.candidates[index].label} {name} stage {old_stage.index}: "
                f"{edits.format_part(edit.part, value)} (was "
                f"{edits.format_part(edit.part, old_value).split(' = ')[1]}); as built "
                f"{edits.describe_stage(new_stage)} (was {edits.describe_stage(old_stage)})"
            )
            self._record(index, name, design, line)
            return line

    def step_part(self, way: str | None, stage: int | None, part: str, steps: int) -> str:
        """Step a part ``steps`` values along its E-series (the session API)."""
        return self.edit_part(edits.PartEdit(way, stage, part.upper(), f"{steps:+d}"))

    def set_part(self, way: str | None, stage: int | None, part: str, value: str) -> str:
        """Set a part to a value such as "22n" or "10k2" (the session API)."""
        return self.edit_part(edits.PartEdit(way, stage, part.upper(), value))

    def set_corner(self, way: str | None, *corners_hz: float) -> str:
        """Move a filter's corner; its parts are chosen again (the session API).

        A filter given by an alignment keeps working after part edits: its parts are then
        chosen again from the alignment for the new corner (the part edits are replaced).
        """
        with self.lock:
            index = self._edited_candidate()
            name = self._way_filter(index, way)
            original = self.original_designs[index].filter(name).spec
            design = edits.edit_corner(
                self.candidates[index].design, name, tuple(corners_hz), original
            )
            stages = "; ".join(
                f"stage {s.index} {edits.describe_stage(s)}" for s in design.filter(name).stages
            )
            replaced = (
                " (its part edits are replaced: parts chosen again for the new corner)"
                if self.candidates[index].design.filter(name).spec.kind == "built"
                else ""
            )
            line = (
                f"{self.candidates[index].label} {name}: corner moved{replaced}; as built {stages}"
            )
            self._record(index, name, design, line)
            return line

    def undo(self) -> str:
        """Take back the last edit (the session API)."""
        with self.lock:
            if self.blind_active:
                raise UserInputError("no edits during blind trials")
            if not self.history:
                raise UserInputError("nothing to undo: no edit was made")
            record = self.history.pop()
            self.undone.append(record)
            self._install(record.index, record.before)
            line = f"undone: {record.line}"
            self.say(line)
            self._rematch(record.index)
            return line

    def redo(self) -> str:
        """Make the last undone edit again (the session API)."""
        with self.lock:
            if self.blind_active:
                raise UserInputError("no edits during blind trials")
            if not self.undone:
                raise UserInputError("nothing to redo: no edit was undone since the last edit")
            record = self.undone.pop()
            self.history.append(record)
            self._install(record.index, record.after)
            line = f"redone: {record.line}"
            self.say(line)
            self._rematch(record.index)
            return line

    def _record(self, index: int, name: str, design: cands.Design, line: str) -> None:
        before = self.candidates[index].design
        self._install(index, design)
        self.history.append(EditRecord(index, name, before, design, line))
        self.undone.clear()
        self.say(line)
        self._rematch(index)

    def edited(self, index: int) -> bool:
        """True when candidate ``index`` is not as loaded (an edit is in force)."""
        return self.candidates[index].design is not self.original_designs[index]

    def edited_filters(self, index: int) -> list[str]:
        """Names of the filters of candidate ``index`` that differ from the loaded design."""
        now, was = self.candidates[index].design, self.original_designs[index]
        if now is was:
            return []
        return [f.name for f, o in zip(now.filters, was.filters, strict=True) if f.spec != o.spec]

    def edit_lines(self) -> list[str]:
        """Every edit in force, then the final parts of every edited filter."""
        lines = [f"edit {n}: {r.line}" for n, r in enumerate(self.history, start=1)]
        for index, candidate in enumerate(self.candidates):
            for name in self.edited_filters(index):
                for stage in candidate.design.filter(name).stages:
                    parts = ", ".join(
                        edits.format_part(k, v) for k, v in stage.circuit.parts().items()
                    )
                    lines.append(
                        f"{candidate.label} {name} stage {stage.index}: {parts} "
                        f"({edits.describe_stage(stage)})"
                    )
        return lines

    def save_as(self, path: str | Path) -> Path:
        """Save the heard candidate, as edited, as a new design file (the session API).

        The file is written by :func:`filtertwin.live.window.savefile.save_design`: never
        over an existing file, read back before it is kept.
        """
        from filtertwin.live.window import savefile

        with self.lock:
            index = self._edited_candidate()
            candidate = self.candidates[index]
            saved = savefile.save_design(candidate.design, Path(path))
            self.say(f"saved {candidate.label} as {saved}")
            return saved

    def _do_part(self, command: keys.Command, now_s: float) -> None:
        self.edit_part(edits.parse_part(command.args))

    def _do_corner(self, command: keys.Command, now_s: float) -> None:
        edit = edits.parse_corner(command.args)
        self.set_corner(edit.way, *edit.corners_hz)

    def _do_undo(self, command: keys.Command, now_s: float) -> None:
        self.undo()

    def _do_redo(self, command: keys.Command, now_s: float) -> None:
        self.redo()

    def _do_edits(self, command: keys.Command, now_s: float) -> None:
        self.say("\n".join(self.edit_lines()) or "no edits in force")

    def _do_save(self, command: keys.Command, now_s: float) -> None:
        self.save_as(command.args[0])

    def _runner_rate_hz(self) -> float:
        """The rate the runner runs the sections at (oversampled twins: a multiple)."""
        return self.processing_rate_hz * (self.twins[0].oversampling if self.twins else 1)

    def _install(self, index: int, design: cands.Design) -> None:
        """Make the twin of an edited candidate and crossfade its changed chains in."""
        old = self.twins[index]  # the same oversampling: the runner's rate stays
        twin = build_twin(
            design, self.processing_rate_hz, oversampling=old.oversampling,
            resampling=old.resampling,
        )  # fmt: skip
        first = cands.chain_index(self.candidates, index, 0)
        steps = twin.slew_steps()
        old_steps = old.slew_steps()
        changes = {
            first + k: (f.sos, f.clip_fs, steps[k])
            for k, (f, o) in enumerate(zip(twin.filters, old.filters, strict=True))
            if not (
                np.array_equal(f.sos, o.sos)
                and np.array_equal(f.clip_fs, o.clip_fs)
                and np.array_equal(steps[k], old_steps[k])
            )
        }
        runner = self.swapper.host.runner
        if all(runner.n_sections[i] == len(c[0]) for i, c in changes.items()):
            for chain, (sos, levels, chain_steps) in changes.items():
                old_sos = old.filters[chain - first].sos
                self.queued.append((chain, sos, levels, chain_steps, old_sos))
            self.poll()
            self._keep_polling()
        else:  # another section count: a new runner (taken up whole at the next block)
            self.finish_edits(levels=False)
            twins = [*self.twins[:index], twin, *self.twins[index + 1 :]]
            all_sos, all_levels = cands.chains(twins)
            self.swapper.swap(changes, all_sos, all_levels, cands.slew_steps(twins))
        self.twins[index] = twin
        self.candidates[index] = replace(self.candidates[index], design=design)  # same ways
        if self.noise is not None:
            self.noise.redesign(index, design)
        self.edits_made += 1

    def poll(self) -> None:
        """Move the edit crossfades on (the control loop calls this every tick)."""
        with self.lock:
            while True:
                if self.swapping is not None:
                    self.swapping.advance()
                    if not self.swapping.done:
                        return
                    self.swapping = None
                if not self.queued:
                    return
                chain, sos, levels, steps, old_sos = self.queued.popleft()
                self.swapping = BlendedSwap(
                    self.swapper.host, chain, sos, levels, steps, old_sos,
                    self._runner_rate_hz(), self.fade_frames,
                )  # fmt: skip

    def _keep_polling(self) -> None:
        """Move the crossfades on from a thread of their own as well, so that an edit
        completes whoever drives the session (console loop, preview window, a test)."""
        if self._poller is not None and self._poller.is_alive():
            return

        def run() -> None:
            deadline = time.monotonic() + POLL_GIVE_UP_S
            while self.edits_pending and time.monotonic() < deadline:
                self.poll()
                time.sleep(POLL_EVERY_S)

        self._poller = threading.Thread(target=run, name="filtertwin-edit-fades", daemon=True)
        self._poller.start()

    @property
    def edits_pending(self) -> bool:
        """True while an edit's crossfade is still under way."""
        return self.swapping is not None or bool(self.queued)

    def finish_edits(self, timeout_s: float = 5.0, levels: bool = True) -> bool:
        """Wait until every edit crossfade is done (the stream must be running); True if so.

        With ``levels`` also wait until the level match after the edits is measured and
        in force (see :meth:`_rematch`).
        """
        deadline = time.monotonic() + timeout_s
        while self.edits_pending and time.monotonic() < deadline:
            self.poll()
            time.sleep(POLL_EVERY_S)
        if levels and self.levels is not None:
            self.levels.wait(max(0.0, deadline - time.monotonic()))
            self.finish_edits(max(0.0, deadline - time.monotonic()), levels=False)
        measuring = levels and self.levels is not None and self.levels.pending
        return not self.edits_pending and not measuring

    def _rematch(self, index: int) -> None:
        """Match the levels again after candidate ``index`` changed.

        By loudness, only that candidate is measured again (the others and the dry input
        did not change), in a thread of its own (:mod:`filtertwin.live.remeasure`): the
        edit is heard at once at the old gain, the new gain follows when measured (a
        few hundred milliseconds); a design measured before (undo, redo) matches at once.
        """
        if self.levels is not None:
            design = self.candidates[index].design
            level = self.levels.known_level(design)
            if level is None:
                self.levels.request(index, design, self.twins[index])
                return
            self.match = matching.with_level(self.match, index, level)
        elif self.match.mode == "gain":
            self.match = matching.match_by_gain([c.design for c in self.candidates])
        else:
            return
        self._matched_again()

    def _level_measured(self, index: int, design: cands.Design, level: float) -> None:
        """The measuring thread's report: put the new level in force if still current."""
        with self.lock:
            if self.candidates[index].design is not design:
                return  # edited again meanwhile: that edit's measurement follows
            self.match = matching.with_level(self.match, index, level)
            self._matched_again()

    def _matched_again(self) -> None:
        self.layout = cands.layout(self.candidates, self.match.gains, self.match.bypass_gain)
        self._apply()
        self.match_updates += 1
        self.say(matching.describe(self.match, [c.label for c in self.candidates]))


@dataclass(frozen=True)
class EditRecord:
    """One live edit: the candidate, the filter, the designs before and after, its line."""

    index: int
    filter_name: str
    before: cands.Design
    after: cands.Design
    line: str
