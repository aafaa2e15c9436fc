"""Putting a listening session together: device, input, twins, runner, stream.

:func:`prepare` does everything that may fail or take time before a stream opens: it picks
the device and checks its settings, validates the recording, builds each candidate's twin
at the rate it will run at, measures the level match, compiles and primes every kernel of
the callback path, and makes the read-ahead thread. :class:`Player` then opens, starts and
stops the stream (``open`` and ``start`` are separate, so that a test can connect the
stream's ports in between).

Two paths, chosen by the input:

* *in the callback*: live input, or a recording at the stream's rate whose twins need no
  oversampling. The twins run in the audio callback, on the block just read; for live input
  at the stream rate times the oversampling render would pick (the largest any candidate
  needs), raised and lowered again there by the allocation-free resamplers render uses
  (:class:`~filtertwin.live.stream.Oversampling`).
* *read ahead*: a recording at another rate (a sensor recording, say), a recording whose
  twins run oversampled, or any recording with ``--adc-rate``. The twins run at the
  recording's own rate (times their oversampling) in the read-ahead thread, and every
  chain's output and the dry input are resampled to the stream rate there (with
  ``--adc-rate`` also what an ideal ADC captures of each, :mod:`filtertwin.live.capture`);
  the callback only mixes. Oversampled twins are resampled around the runner there too.

Each candidate's fidelity line (resampling filters included) is printed before the stream
starts.
"""

from __future__ import annotations

import gc
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np

from filtertwin.circuit.design import Design
from filtertwin.digital import engine, kernels
from filtertwin.digital.resample import ratio
from filtertwin.errors import UserInputError
from filtertwin.files import recordings
from filtertwin.files.recordinginfo import RecordingInfo
from filtertwin.live import candidates as cands
from filtertwin.live import capture as capture_mod
from filtertwin.live import chains as chain_swaps
from filtertwin.live import devices, hiss, matching, mixer, ring, routing, safety, stream, tap
from filtertwin.live.blind import BlindSession, Kind, TrialLog, plan_trials
from filtertwin.live.chains import ChainHost
from filtertwin.live.session import ListenSession

CHUNK_FRAMES = 1024
MAX_CHANNELS = 2
SWITCH_INTERVAL_S = 0.0005
"""Interpreter thread switch interval while streaming: the audio callback needs the
interpreter lock within a fraction of a block, not after the default 5 ms."""


@dataclass(frozen=True)
class ListenOptions:
    """Settings of a listening session (what the command line gives).

    Attributes
    ----------
    input_path : Path or None
        Recording to play in a loop; None filters the device's live input.
    input_rate_hz : float or None
        Rate of a CSV (without time column) or NPY recording.
    column : str or None
        The one column or channel of the recording to play.
    device : str or int or None
        Device number or (part of its) name; None for the default device.
    rate_hz : float or None
        Stream rate; default the device's default rate.
    block_frames : int
        Frames per callback.
    latency : str or float or None
        sounddevice latency ("low", "high" or seconds); None: "high" for a recording,
        "low" for live input.
    match : str or None
        "loudness", "gain" or "off"; None: loudness for a recording, gain for live input.
    match_seconds : float
        Length of the excerpt measured for loudness matching.
    level_db, ceiling_dbfs, ramp_s : float
        Output level, ceiling and ramp time (:class:`~filtertwin.live.safety.OutputSafety`).
    fade_s : float
        Crossfade time of a switch.
    ways_out : bool
        One output channel pair per way instead of the stereo mix.
    read_ahead_s : float
        Audio held ready by the read-ahead thread.
    blind : str or None
        "abx" or "preference" for blind trials.
    trials : int
        Number of blind trials.
    seed : int or None
        Seed of the blind plan (None: drawn from the clock, and printed at the end).
    log_path : Path or None
        Trial log (CSV).
    adc_rate_hz : float or None
        Rate of an ideal ADC whose capture of the recording can be heard (a recording
        sampled faster than it only).
    circuit_noise : bool
        Start with every candidate's circuit noise on (``noise on|off``, key n, switch it).
    resampling : str
        Phase of the resampling filters around oversampled twins: "linear" or "causal".
    """

    input_path: Path | None = None
    input_rate_hz: float | None = None
    column: str | None = None
    device: str | int | None = None
    rate_hz: float | None = None
    block_frames: int = 256
    latency: str | float | None = None
    match: str | None = None
    match_seconds: float = 10.0
    level_db: float = 0.0
    ceiling_dbfs: float = safety.MAX_CEILING_DBFS
    ramp_s: float = 1.0
    fade_s: float = 0.03
    ways_out: bool = False
    read_ahead_s: float = 0.25
    blind: str | None = None
    trials: int = 0
    seed: int | None = None
    log_path: Path | None = None
    adc_rate_hz: float | None = None
    circuit_noise: bool = False
    resampling: str = "linear"


def warm_up() -> None:
    """Compile every kernel of the live path (before any stream opens)."""
    engine.warm_up()
    safety.warm_up()
    mixer.warm_up()
    ring.warm_up()
    stream.warm_up()
    chain_swaps.warm_up()
    hiss.warm_up()
    tap.warm_up()  # the preview window's tap, which may be opened while the stream runs


def _read_excerpt(info: RecordingInfo, seconds: float, channels: int) -> np.ndarray:
    wanted = max(1, round(seconds * info.rate_hz))
    pieces, frames = [], 0
    for block in recordings.read_blocks(info, recordings.SCAN_FRAMES):
        pieces.append(block[:, :channels])
        frames += len(block)
        if frames >= wanted:
            break
    return np.concatenate(pieces)[:wanted]


def _inspect_input(options: ListenOptions) -> RecordingInfo:
    assert options.input_path is not None
    info = recordings.inspect(
        options.input_path, rate_hz=options.input_rate_hz, column=options.column
    )
    if info.channels > MAX_CHANNELS:
        raise UserInputError(
            f"{info.path} has {info.channels} channels ({', '.join(info.channel_names)}); "
            "listen to one with --column NAME, or give a mono or stereo file"
        )
    return info


ADC_NEEDS_RECORDING = (
    "--adc-rate needs a recording sampled faster than the ADC (--input REC); "
    "the live input cannot show what the ADC would fold"
)
LOUDNESS_NEEDS_RECORDING = (
    "--match loudness needs a recording (--input); for live input use --match gain"
)


def check_options(options: ListenOptions, n_designs: int) -> None:
    """Refuse settings that cannot work, before any design, recording or device is touched.

    Parameters
    ----------
    options : ListenOptions
        The settings.
    n_designs : int
        How many designs are given.

    Raises
    ------
    UserInputError
        Blind trials without exactly two designs; ``--adc-rate`` or ``--match loudness``
        without a recording; an output level, ceiling or ramp time out of range.
    """
    if options.blind is not None and n_designs != 2:
        raise UserInputError(
            f"blind trials compare two designs, {n_designs} were given; give exactly two"
        )
    if options.input_path is None and options.adc_rate_hz is not None:
        raise UserInputError(ADC_NEEDS_RECORDING)
    if options.input_path is None and options.match == "loudness":
        raise UserInputError(LOUDNESS_NEEDS_RECORDING)
    safety.OutputSafety(48000.0, options.level_db, options.ceiling_dbfs, options.ramp_s)


def _match(
    options: ListenOptions,
    candidates: Sequence[cands.ListenCandidate],
    twins: Sequence[Any],
    program: np.ndarray | None,
    rate_hz: float,
) -> matching.LevelMatch:
    if options.match == "off":
        return matching.no_match(len(candidates))
    if program is None:  # live input or --match gain: the excerpt is read for loudness only
        return matching.match_by_gain([c.design for c in candidates])
    return matching.match_by_loudness(program, rate_hz, twins)


def _blind(
    options: ListenOptions, candidates: Sequence[cands.ListenCandidate]
) -> BlindSession | None:
    if options.blind is None:
        return None
    seed = options.seed if options.seed is not None else time.time_ns() % 2**32
    kind: Kind = "abx" if options.blind == "abx" else "preference"
    plan = plan_trials((candidates[0].name, candidates[1].name), options.trials, seed, kind)
    log = TrialLog(options.log_path, plan) if options.log_path is not None else None
    return BlindSession(plan, log)


@dataclass(eq=False, kw_only=True)
class Player:
    """A prepared session and its stream (see :func:`prepare`)."""

    sd: ModuleType
    device: devices.Device
    options: ListenOptions
    rate_hz: float
    core: stream.StreamCore
    session: ListenSession
    feeder: stream.Feeder | None
    noise_feeder: hiss.NoiseFeeder | None = None
    stream: Any = field(default=None, init=False)
    started_s: float | None = field(default=None, init=False)
    _saved_switch_interval_s: float | None = field(default=None, init=False)
    _locked: list[Any] = field(default_factory=list, init=False)

    @property
    def in_channels(self) -> int:
        """Channels of the input (live input or the recording)."""
        return self.core.channels

    def describe(self) -> str:
        """One line: device, rate, block size and what is played."""
        source = f"{self.options.input_path} in a loop" if self.feeder is not None else "live input"
        return (
            f"device {self.device.describe()}; stream {self.rate_hz:g} Hz, "
            f"{self.core.block_frames} frames per block; {source}"
        )

    def open(self) -> None:
        """Open the stream (not started yet).

        Raises
        ------
        UserInputError
            If PortAudio cannot open it (one line naming the device).
        """
        options = self.options
        kwargs: dict[str, Any] = {
            "samplerate": self.rate_hz,
            "blocksize": self.core.block_frames,
            "dtype": "float32",
            "latency": options.latency or ("high" if self.feeder is not None else "low"),
        }
        try:
            if self.feeder is None:
                self.stream = self.sd.Stream(
                    device=(self.device.index, self.device.index),
                    channels=(self.in_channels, self.core.out_channels),
                    callback=self.core.callback,
                    **kwargs,
                )
            else:
                self.stream = self.sd.OutputStream(
                    device=self.device.index,
                    channels=self.core.out_channels,
                    callback=self.core.output_callback,
                    **kwargs,
                )
        except self.sd.PortAudioError as error:
            raise devices.audio_error(error, self.device) from None

    def start(self) -> None:
        """Fill the read-ahead buffer, set the first mix and start the stream."""
        if self.stream is None:
            self.open()
        if self.feeder is not None:
            self.feeder.start()
            if self.feeder.error is not None:
                raise self.feeder.error
        if self.noise_feeder is not None and self.options.circuit_noise:
            self.noise_feeder.start()  # otherwise at the first 'noise on'
            self.noise_feeder.wait_ready()
        self.session.start(time.monotonic())
        if self._saved_switch_interval_s is None:
            self._saved_switch_interval_s = sys.getswitchinterval()
            sys.setswitchinterval(SWITCH_INTERVAL_S)
            # everything made so far lives as long as the stream: keep it out of the cyclic
            # collector, whose full passes would otherwise hold the interpreter for ~0.1 s
            gc.collect()
            gc.freeze()
        if kernels.kernel_lock_wanted() and not self._locked:
            # every version is compiled by now (prepare, the read-ahead's first fill): with
            # FILTERTWIN_LOCK_KERNELS=1 (the tests) a missed one is an error, not a stall
            self._locked = kernels.lock_kernels(kernels.package_kernels().values())
        try:
            self.stream.start()
        except self.sd.PortAudioError as error:
            raise devices.audio_error(error, self.device) from None
        self.started_s = time.monotonic()

    def cpu_load(self) -> float | None:
        """The stream's CPU load estimate (fraction), or None before it runs."""
        return None if self.stream is None else float(self.stream.cpu_load)

    def played_s(self) -> float:
        """Seconds since the stream started."""
        return 0.0 if self.started_s is None else time.monotonic() - self.started_s

    def fade_out(self, timeout_s: float | None = None) -> None:
        """Ramp the output to silence and wait until it is silent (or the timeout)."""
        self.core.safety.fade_out()
        if self.stream is None or not self.stream.active:
            return
        limit = self.options.ramp_s + 0.5 if timeout_s is None else timeout_s
        deadline = time.monotonic() + limit
        while not self.core.safety.is_silent() and time.monotonic() < deadline:
            time.sleep(0.01)
        time.sleep(2 * self.core.period_s)  # the last blocks reach the device

    def close(self) -> None:
        """Stop and close the stream and the read-ahead thread (safe to call twice)."""
        if self.stream is not None:
            try:
                self.stream.stop()
            finally:
                self.stream.close()
                self.stream = None
        if self.feeder is not None:
            self.feeder.stop()
        if self.noise_feeder is not None:
            self.noise_feeder.stop()
        kernels.unlock_kernels(self._locked)
        self._locked = []
        if self._saved_switch_interval_s is not None:
            sys.setswitchinterval(self._saved_switch_interval_s)
            self._saved_switch_interval_s = None
            gc.unfreeze()


def _feeder(
    options: ListenOptions,
    info: RecordingInfo,
    rate_hz: float,
    sources: int,
    prefilter: stream.PreFilter | None = None,
) -> stream.Feeder:
    """The read-ahead thread and its ring of ``sources`` signals at the stream rate."""
    capacity = max(4 * options.block_frames, round(options.read_ahead_s * rate_hz))
    buffer = ring.BlockRing(sources, capacity, info.channels)
    return stream.Feeder(info, buffer, CHUNK_FRAMES, info.channels, prefilter)


def _prefilter(
    options: ListenOptions,
    info: RecordingInfo,
    rate_hz: float,
    chains: tuple[list[np.ndarray], list[np.ndarray]],
    say: Callable[[str], None],
    over: stream.Oversampling | None = None,
    steps: list[np.ndarray] | None = None,
) -> tuple[stream.PreFilter, capture_mod.CapturePlan | None]:
    """The twins (and the ADC capture) at the recording's rate, for the read-ahead thread."""
    sos, levels = chains
    width = (len(sos) + 1) * info.channels  # every chain and the dry input, side by side
    up, down = ratio(info.rate_hz, rate_hz)
    resampler = capture_mod.resampler(up, down, width)
    plan = adc = None
    if options.adc_rate_hz is not None:
        plan = capture_mod.plan_capture(options.adc_rate_hz, info.rate_hz, rate_hz, str(info.path))
        adc = capture_mod.AdcCapture(plan, width, capture_mod.lag_s(resampler, info.rate_hz))
    factor = over.factor if over is not None else 1
    runner = engine.CascadeRunner(
        sos, info.channels, CHUNK_FRAMES * factor, levels, slew_steps=steps
    )
    if resampler is not None:
        twin_rate = "that rate" if factor == 1 else f"{factor}x that rate"
        say(
            f"{info.path} is at {info.rate_hz:g} Hz: the twins run at {twin_rate} and the "
            f"result is resampled to {rate_hz:g} Hz (x {up}/{down}) ahead of the stream"
        )
    if plan is not None:
        say(
            f"ADC capture ({plan.label}, key c or 'capture on|off'): sampled at "
            f"{plan.adc_rate_hz:g} Hz with no filter of its own, played back band-limited at "
            f"{rate_hz:g} Hz"
        )
    return stream.PreFilter(runner, resampler, adc, over), plan


def prepare(
    named_designs: Sequence[tuple[str, Design]],
    options: ListenOptions,
    say: Callable[[str], None] = print,
    sd: ModuleType | None = None,
) -> Player:
    """Everything before the stream opens (see the module docstring).

    Raises
    ------
    UserInputError
        One line for every problem a user can fix: PortAudio missing, no device, the
        device's rate or channels, the recording, the designs, the blind-trial settings.
    """
    check_options(options, len(named_designs))
    sd = devices.load_sounddevice() if sd is None else sd
    candidates = cands.make_candidates(named_designs)
    pair_ways = cands.output_ways(candidates) if options.ways_out else routing.STEREO_MIX
    out_channels = 2 * max(1, len(pair_ways))
    info = _inspect_input(options) if options.input_path is not None else None
    if info is not None and options.adc_rate_hz is not None:
        capture_mod.check_adc_rate(options.adc_rate_hz, info.rate_hz, str(info.path))
    direction: devices.Direction = "output" if info is not None else "duplex"
    device = devices.find_device(options.device, direction, sd)
    rate_hz = options.rate_hz or device.default_rate_hz
    devices.check_settings(device, rate_hz, out_channels, "output", sd)
    if info is None:
        in_channels = min(MAX_CHANNELS, device.input_channels)
        devices.check_settings(device, rate_hz, in_channels, "input", sd)
    else:
        in_channels = info.channels
    blind = _blind(options, candidates)

    same_rate = info is None or abs(info.rate_hz - rate_hz) <= 1e-6 * rate_hz
    processing_rate_hz = rate_hz if info is None else info.rate_hz
    twins = cands.build_twins(candidates, processing_rate_hz, options.resampling)
    for line in cands.fidelity_lines(candidates, twins, blind=blind is not None):
        say(line)
    factor = twins[0].oversampling
    # a recording's oversampled twins run in the read-ahead thread (the callback only mixes);
    # live input has no read-ahead, so its twins are resampled in the callback
    in_callback = info is None or (same_rate and options.adc_rate_hz is None and factor == 1)
    sos, levels = cands.chains(twins)
    steps = cands.slew_steps(twins)
    program = None
    if info is not None and options.match in (None, "loudness"):
        program = _read_excerpt(info, options.match_seconds, in_channels)
    match = _match(options, candidates, twins, program, processing_rate_hz)

    warm_up()
    block = options.block_frames
    runner = prefilter = plan = feeder = over = None
    captures = 0
    if in_callback:
        runner = engine.CascadeRunner(
            sos, in_channels, block * factor, levels, dtype=np.float32, slew_steps=steps
        )
        if factor > 1:
            over = stream.Oversampling(factor, len(sos), in_channels, block, options.resampling)
        if info is not None:
            feeder = _feeder(options, info, rate_hz, 1)
    else:
        assert info is not None
        if factor > 1:
            over = stream.Oversampling(
                factor, len(sos), in_channels, CHUNK_FRAMES, options.resampling, np.float64
            )
        prefilter, plan = _prefilter(options, info, rate_hz, (sos, levels), say, over, steps)
        if plan is not None:
            for c in candidates:
                # the twins run at the factor the band's rule picked: judge that one
                for note in capture_mod.stopband_notes(c.label, c.design, info.rate_hz,
                                                       plan.adc_rate_hz, factor):  # fmt: skip
                    say(note)
        captures = 0 if plan is None else len(sos) + 1
        feeder = _feeder(options, info, rate_hz, len(sos) + 1 + captures, prefilter)
    noise_ring = hiss.noise_ring(len(sos), in_channels)
    noise = hiss.NoiseAdder(noise_ring, len(sos) + captures, block, rate_hz, options.fade_s)
    noise_feeder = hiss.NoiseFeeder(
        [c.design for c in candidates], rate_hz, in_channels, noise_ring
    )
    core = stream.StreamCore(
        n_chains=len(sos), channels=in_channels, block_frames=block, rate_hz=rate_hz,
        runner=runner, ring=None if feeder is None else feeder.ring,
        safety=safety.OutputSafety(rate_hz, options.level_db, options.ceiling_dbfs, options.ramp_s),
        pairs=out_channels // 2, fade_s=options.fade_s, captures=captures,
        oversampling=over if in_callback else None, noise=noise,
    )  # fmt: skip
    core.prime()
    host: ChainHost = core if prefilter is None else prefilter
    session = ListenSession(
        candidates, twins, core, host, processing_rate_hz, match, pair_ways, program, blind, say,
        capture_plan=plan, noise=hiss.LiveNoise(noise, noise_feeder),
        noise_on=options.circuit_noise,
    )  # fmt: skip
    return Player(
        sd=sd, device=device, options=options, rate_hz=rate_hz, core=core, session=session,
        feeder=feeder, noise_feeder=noise_feeder,
    )  # fmt: skip
