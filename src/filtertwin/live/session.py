"""What the listener's commands do: selection, blind trials, level, confirmations, edits.

:class:`ListenSession` runs in the control (main) thread. It turns each
:class:`~filtertwin.live.keys.Command` into a new mix for the stream (a crossfade, via
:meth:`StreamCore.request <filtertwin.live.stream.StreamCore.request>`), a level change of
the output safety, a step of the blind session, or a live edit: the design is rebuilt and
its twin made here, then the chains are swapped into the runner that the audio thread uses
(:mod:`filtertwin.live.chains`). Every outcome is one line handed to ``say``.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import replace

import numpy as np

from filtertwin.errors import UserInputError
from filtertwin.live import candidates as cands
from filtertwin.live import capture, edits, keys, matching, routing
from filtertwin.live.blind import BlindSession, buttons, describe_score
from filtertwin.live.chains import ChainHost, ChainSwapper
from filtertwin.live.hiss import LiveNoise
from filtertwin.live.mixer import SUM, Selection
from filtertwin.live.safety import MAX_LEVEL_DB, MIN_LEVEL_DB, OutputSafety
from filtertwin.live.stream import StreamCore
from filtertwin.twin import Twin, build_twin

CONFIRM_WINDOW_S = 3.0


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
        self._select(replace(self.selection, candidate=index))
        self.say(self._describe_selection())

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
        self._select(replace(self.selection, solo=command.args[0]))
        self.say(self._describe_selection())

    def _do_mute(self, command: keys.Command, now_s: float) -> None:
        way = command.args[0]
        muted = self.selection.muted ^ {way}
        self._select(replace(self.selection, muted=frozenset(muted)))
        self.say(self._describe_selection())

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
        heard = s.solo if s.solo != SUM else "+".join(w for w in c.ways if w not in s.muted)
        offset = 20 * math.log10(self.layout.candidates[s.candidate].level_gain)
        if self.blind is not None and not self.blind.finished:
            return f"now: {self.heard}, ways {heard or 'none'}"
        match_db = round(offset, 1) + 0.0
        return f"now: {c.label} ({c.name}), ways {heard or 'none'}, level match {match_db:+.1f} dB"

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
            self.say(describe_score(blind.plan, blind.score()))
            if blind.log is not None:
                self.say(f"trial log written to {blind.log.path}")
            self.quit_requested = True
            return
        self._hear_button(self.blind_buttons()[0])
        self._trial_prompt()

    # --- live edits -----------------------------------------------------------------------

    def _edited_candidate(self) -> int:
        if self.blind is not None and not self.blind.finished:
            raise UserInputError("no edits during blind trials (they would give the names away)")
        if self.selection.candidate is None:
            raise UserInputError("select a candidate first: an edit changes the one you hear")
        return self.selection.candidate

    def _way_filter(self, index: int, way: str | None) -> str:
        candidate = self.candidates[index]
        if way is None:
            if len(candidate.ways) != 1:
                raise UserInputError(
                    f"candidate {candidate.label} has ways {', '.join(candidate.ways)}; "
                    "say which, e.g. 'part low 2 C1 +1'"
                )
            way = candidate.ways[0]
        return candidate.filter_of(way)

    def _do_part(self, command: keys.Command, now_s: float) -> None:
        index = self._edited_candidate()
        edit = edits.parse_part(command.args)
        name = self._way_filter(index, edit.way)
        old_design = self.candidates[index].design
        design, old_stage, value = edits.edit_part(old_design, name, edit)
        new_stage = design.filter(name).stages[old_stage.index - 1]
        self._install(index, design)
        old_value = old_stage.circuit.parts()[edit.part]
        self.say(
            f"{self.candidates[index].label} {name} stage {old_stage.index}: "
            f"{edits.format_part(edit.part, value)} (was "
            f"{edits.format_part(edit.part, old_value).split(' = ')[1]}); as built "
            f"{edits.describe_stage(new_stage)} (was {edits.describe_stage(old_stage)})"
        )
        self._rematch()

    def _do_corner(self, command: keys.Command, now_s: float) -> None:
        index = self._edited_candidate()
        edit = edits.parse_corner(command.args)
        name = self._way_filter(index, edit.way)
        design = edits.edit_corner(self.candidates[index].design, name, edit.corners_hz)
        self._install(index, design)
        stages = "; ".join(
            f"stage {s.index} {edits.describe_stage(s)}" for s in design.filter(name).stages
        )
        self.say(f"{self.candidates[index].label} {name}: corner moved; as built {stages}")
        self._rematch()

    def _install(self, index: int, design: cands.Design) -> None:
        """Make the twin of an edited candidate and swap its chains into the runner."""
        twin = build_twin(design, self.processing_rate_hz)
        first = cands.chain_index(self.candidates, index, 0)
        changes = {first + k: (f.sos, f.clip_fs) for k, f in enumerate(twin.filters)}
        all_sos, all_levels = cands.chains([*self.twins[:index], twin, *self.twins[index + 1 :]])
        self.swapper.swap(changes, all_sos, all_levels)
        self.twins[index] = twin
        self.candidates[index] = replace(self.candidates[index], design=design)  # same ways
        if self.noise is not None:
            self.noise.redesign(index, design)
        self.edits_made += 1

    def _rematch(self) -> None:
        if self.match.mode == "loudness" and self.program is not None:
            self.match = matching.match_by_loudness(
                self.program, self.processing_rate_hz, self.twins
            )
        elif self.match.mode == "gain":
            self.match = matching.match_by_gain([c.design for c in self.candidates])
        else:
            return
        self.layout = cands.layout(self.candidates, self.match.gains, self.match.bypass_gain)
        self._apply()
        self.say(matching.describe(self.match, [c.label for c in self.candidates]))
