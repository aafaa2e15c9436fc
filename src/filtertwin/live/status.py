"""The status line (redrawn about ten times a second) and the summary printed at the end.

:class:`StatusReader` gathers the facts from the stream's counters and meters (written by
the audio callback into preallocated arrays, only read here) into a :class:`StatusFacts`;
:func:`status_line` and :func:`summary_lines` turn facts into text. Nothing here runs in the
audio thread.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from filtertwin.live.candidates import chain_index
from filtertwin.live.session import ListenSession
from filtertwin.live.stream import BLOCKS, CPU_HISTORY, STARVED_FRAMES, XRUNS

METER_FLOOR_DB = -48.0
DISPLAY_FLOOR = 1e-6
"""Peaks at or below -120 dBFS are shown as "-inf" (silence, or the tail of a decay)."""
CLIP_HOLD_S = 1.0


@dataclass(frozen=True)
class StatusFacts:
    """What the status line shows.

    Attributes
    ----------
    hearing : str
        What is heard ("A", "bypass", "trial 2/8: X").
    design : str
        The heard design's name ("" in bypass and during blind trials).
    edited : bool
        The heard candidate has a live edit in force.
    ways : str
        What the ways do ("all ways", "solo woofer", "without mid"; "" for one way).
    blind : bool
        Blind trials run: the meters, the limiter and the clip flags (which differ between
        the designs) are hidden until the end.
    capture : str
        "ADC 8 kHz" while the ADC capture is heard, "ADC off" when it could be, else "".
    noise : str
        "noise on" while the circuit noise is added (``noise on|off``), else "".
    way_peaks : tuple of (str, float)
        Peak (full-scale units, falling) of each way of the heard candidate, by the design's
        filter names.
    output_peak : float
        Peak of the output after the ceiling.
    limiter_db : float
        Gain reduction of the ceiling limiter now (0.0 when not limiting, else negative).
    limiting : bool
        The ceiling reduced the level since the last redraw.
    input_over : bool
        The input went over full scale (a peak above 1.0) within the last second.
    clipping : tuple of str
        Stages that reached their amplifier's swing within the last second ("woofer s2").
    slewing : tuple of str
        Stages limited to their amplifier's slew rate within the last second.
    xruns, starved_frames : int
        Blocks with stream status flags; frames the read-ahead did not deliver in time.
    cpu_load : float or None
        The stream's own CPU load estimate (fraction), when known.
    callback_median_s, callback_max_s : float
        Time spent in the callback over the recent blocks.
    period_s : float
        Duration of one block.
    level_db : float
        Output level set.
    ramp_gain : float
        Level-ramp gain reached now, over the gain of the level set (1.0 when there).
    elapsed_s : float
        Time since the stream started.
    """

    hearing: str
    capture: str
    way_peaks: tuple[tuple[str, float], ...]
    output_peak: float
    limiting: bool
    clipping: tuple[str, ...]
    xruns: int
    starved_frames: int
    cpu_load: float | None
    callback_median_s: float
    callback_max_s: float
    period_s: float
    level_db: float
    ramp_gain: float
    elapsed_s: float
    slewing: tuple[str, ...] = ()
    design: str = ""
    edited: bool = False
    ways: str = ""
    blind: bool = False
    limiter_db: float = 0.0
    input_over: bool = False
    noise: str = ""


def dbfs(value: float) -> str:
    """A peak in dBFS with one decimal, or "-inf" below the display floor."""
    if value <= DISPLAY_FLOOR:
        return " -inf"
    return f"{20 * math.log10(value):5.1f}"


def meter_bar(peak: float, width: int = 8) -> str:
    """A bar of ``width`` cells from -48 dBFS (empty) to 0 dBFS (full)."""
    if peak <= 0:
        return "." * width
    fraction = (20 * math.log10(peak) - METER_FLOOR_DB) / -METER_FLOOR_DB
    cells = max(0, min(width, round(fraction * width)))
    return "#" * cells + "." * (width - cells)


def _fields(facts: StatusFacts) -> list[tuple[int, str]]:
    """The status line's fields in order, each with its priority (0 is kept longest)."""
    name = facts.hearing
    if facts.design:
        name += f" {facts.design}"
    if facts.edited:
        name += " (edited)"
    level = f"level {facts.level_db:+.0f} dB"
    if facts.ramp_gain < 0.999:
        level += f" (ramp {100 * facts.ramp_gain:.0f} %)"
    cpu = f"cb {1e6 * facts.callback_median_s:.0f}/{1e6 * facts.callback_max_s:.0f} us"
    cpu += f" ({100 * facts.callback_median_s / facts.period_s:.1f} %)"
    if facts.cpu_load is not None:
        cpu += f" load {100 * facts.cpu_load:.0f} %"
    fields = [(0, name)]
    if facts.input_over:
        fields.append((0, "INPUT OVER 0 dBFS"))
    if facts.ways:
        fields.append((1, facts.ways))
    if facts.capture:
        fields.append((1, facts.capture))
    if facts.noise:
        fields.append((1, facts.noise))
    if facts.blind:
        fields.append((2, "meters hidden until the trials end"))
    else:
        meters = " ".join(f"{w} {meter_bar(p)} {dbfs(p)}" for w, p in facts.way_peaks)
        fields.append((4, meters or "-"))
        out = f"out {dbfs(facts.output_peak)} dBFS"
        if facts.limiter_db < -0.05:
            out += f" limit {facts.limiter_db:.1f} dB"
        elif facts.limiting:
            out += " limited"
        fields.append((1, out))
        clip = "clip " + (",".join(facts.clipping) if facts.clipping else "-")
        if facts.slewing:
            clip += " slew " + ",".join(facts.slewing)
        fields.append((3, clip))
    xruns = f"xruns {facts.xruns}" + (
        f" starved {facts.starved_frames}" if facts.starved_frames else ""
    )
    fields += [(2, xruns), (6, cpu), (2, level), (5, f"{facts.elapsed_s:.1f} s")]
    return fields


def status_line(facts: StatusFacts, width: int | None = None) -> str:
    """The status line, e.g. ``A candidate-bessel | topcut ####.... -18.2 | out ...``.

    Parameters
    ----------
    facts : StatusFacts
    width : int, optional
        Columns available (the terminal's width): fields of lower priority are left out
        until the line fits in ``width - 1`` columns (a line that still does not fit is cut).
        Default: no limit.
    """
    fields = _fields(facts)
    if width is not None:
        room = max(1, width - 1)
        for priority in range(6, 0, -1):
            if len(" | ".join(text for _, text in fields)) <= room:
                break
            fields = [(p, text) for p, text in fields if p < priority]
        return " | ".join(text for _, text in fields)[:room]
    return " | ".join(text for _, text in fields)


class StatusReader:
    """Reads the stream's meters and counters for the status line (control thread).

    Parameters
    ----------
    session : ListenSession
        The session (what is heard, the core, the runner's clip counts).
    cpu_load : callable
        Returns the stream's CPU load (fraction) or None.
    clock : callable
        Seconds, monotonic.
    """

    def __init__(
        self,
        session: ListenSession,
        cpu_load: Callable[[], float | None] = lambda: None,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.session = session
        self.core = session.core
        self.cpu_load = cpu_load
        self.clock = clock
        self.started_s = clock()
        self._limited = 0
        self._counts = {
            "clip": session.swapper.clip_counts().copy(),
            "slew": session.swapper.slew_counts().copy(),
        }
        self._seen_s: dict[str, dict[tuple[int, int], float]] = {"clip": {}, "slew": {}}
        self._input_over_s = -math.inf

    def _recent_callback_s(self) -> tuple[float, float]:
        done = int(self.core.counters[BLOCKS])
        recent = max(1, min(done, round(1.0 / self.core.period_s), CPU_HISTORY))
        if done == 0:
            return 0.0, 0.0
        index = (np.arange(done - recent, done)) % CPU_HISTORY
        times = self.core.cpu_s[index]
        return float(np.median(times)), float(np.max(times))

    def _flagged_stages(self, now_s: float, kind: str = "clip") -> tuple[str, ...]:
        """Stages whose clip (or, with ``kind="slew"``, slew) count grew within a second."""
        swapper = self.session.swapper
        counts = swapper.clip_counts() if kind == "clip" else swapper.slew_counts()
        if counts.shape != self._counts[kind].shape:
            self._counts[kind] = np.zeros_like(counts)
        grown = np.argwhere(counts > self._counts[kind])
        self._counts[kind] = counts.copy()
        seen_s = self._seen_s[kind]
        for chain, section in grown:
            seen_s[(int(chain), int(section))] = now_s
        index = self.session.selection.candidate
        if index is None:
            return ()
        first = chain_index(self.session.candidates, index, 0)
        twin = self.session.twins[index]
        flags = []
        for k, way in enumerate(self.session.candidates[index].filter_names):
            stages = twin.filters[k].stage_of_section
            for section, stage in enumerate(stages):
                seen = seen_s.get((first + k, section))
                label = f"{way} s{stage}"
                if seen is not None and now_s - seen <= CLIP_HOLD_S and label not in flags:
                    flags.append(label)
        return tuple(flags)

    def facts(self) -> StatusFacts:
        """The facts now."""
        now_s = self.clock()
        core, session = self.core, self.session
        index = session.selection.candidate
        blind = session.blind_active
        plan, captured = session.capture_plan, session.capture_on
        # while the capture is heard, the meters of the captured sources (after the chains)
        offset = core.n_chains if captured else 0
        peaks: list[tuple[str, float]] = []
        if blind:
            pass  # nothing that differs between the designs is even read (below too)
        elif index is not None:
            first = offset + chain_index(session.candidates, index, 0)
            peaks = [
                (name, float(core.meters[first + k]))
                for k, name in enumerate(session.candidates[index].filter_names)
            ]
        else:
            dry = 2 * core.n_chains if captured else core.dry_meter
            peaks = [("dry", float(core.meters[dry]))]
        limited = core.safety.limited_frames
        limiting = limited > self._limited
        self._limited = limited
        median_s, max_s = self._recent_callback_s()
        target = 10 ** (core.safety.level_db / 20)
        if float(core.meters[core.dry_meter]) > 1.0:
            self._input_over_s = now_s
        clipping: tuple[str, ...] = ()
        slewing: tuple[str, ...] = ()
        if blind:
            limiting, limiter_db = False, 0.0
        else:
            clipping, slewing = self._flagged_stages(now_s), self._flagged_stages(now_s, "slew")
            limiter_db = 20 * math.log10(max(core.safety.limiter_gain, 1e-12))
        return StatusFacts(
            design="" if blind or index is None else session.candidates[index].name,
            edited=not blind and index is not None and session.edited(index),
            ways=session.ways_heard(),
            blind=blind,
            limiter_db=limiter_db,
            input_over=now_s - self._input_over_s <= CLIP_HOLD_S,
            hearing=session.now_hearing(),
            noise=session.noise_label(),
            capture="" if plan is None else plan.label if captured else "ADC off",
            way_peaks=tuple(peaks),
            output_peak=0.0 if blind else float(core.meters[core.dry_meter + 1]),
            limiting=limiting,
            clipping=clipping,
            slewing=slewing,
            xruns=int(core.counters[XRUNS]),
            starved_frames=int(core.counters[STARVED_FRAMES]),
            cpu_load=self.cpu_load(),
            callback_median_s=median_s,
            callback_max_s=max_s,
            period_s=core.period_s,
            level_db=core.safety.level_db,
            ramp_gain=min(1.0, core.safety.gain / target) if target > 0 else 1.0,
            elapsed_s=now_s - self.started_s,
        )


def summary_lines(session: ListenSession, played_s: float) -> list[str]:
    """The short summary printed when the stream stops."""
    core = session.core
    done = int(core.counters[BLOCKS])
    lines = [
        f"played {played_s:.1f} s: {done} blocks of {core.block_frames} frames, "
        f"{int(core.counters[XRUNS])} xruns, {int(core.counters[STARVED_FRAMES])} frames "
        "not read ahead in time"
    ]
    if done:
        times = core.cpu_s[: min(done, CPU_HISTORY)]
        period_us = 1e6 * core.period_s
        median_us, p99_us = (1e6 * float(np.percentile(times, q)) for q in (50, 99))
        lines.append(
            f"callback time: median {median_us:.0f} us, 99th percentile {p99_us:.0f} us "
            f"({100 * median_us / period_us:.1f} % and {100 * p99_us / period_us:.1f} % of "
            f"the {period_us:.0f} us period)"
        )
    safety = core.safety
    lines.append(
        f"output ceiling {safety.ceiling_dbfs:g} dBFS: limited {safety.limited_frames} frames, "
        f"{safety.nonfinite_samples} non-finite samples silenced"
    )
    clips = _stage_counts(session, session.swapper.clip_counts())
    lines.append("stage clipping at the amplifier swing: " + clips)
    slews = _stage_counts(session, session.swapper.slew_counts())
    lines.append("stage slewing at the amplifier slew rate: " + slews)
    if session.noise is not None and session.noise.used:
        lines.append(f"circuit noise: {session.noise.starved_frames} frames not made in time")
    if session.edits_made:
        lines.append(f"live edits: {session.edits_made} made, {len(session.history)} in force")
        lines += [f"  {line}" for line in session.edit_lines()]
    return lines


def _stage_counts(session: ListenSession, counts: np.ndarray) -> str:
    """``counts`` (chain, section) summed by stage: "A low stage 2: 5 samples; ...", or
    "none"."""
    found = []
    chain = 0
    for candidate, twin in zip(session.candidates, session.twins, strict=True):
        for way, filter_twin in zip(candidate.ways, twin.filters, strict=True):
            per_stage: dict[int, int] = {}
            for section, stage in enumerate(filter_twin.stage_of_section):
                per_stage[stage] = per_stage.get(stage, 0) + int(counts[chain, section])
            for stage, n in per_stage.items():
                if n:
                    found.append(f"{candidate.label} {way} stage {stage}: {n} samples")
            chain += 1
    return "; ".join(found) if found else "none"
