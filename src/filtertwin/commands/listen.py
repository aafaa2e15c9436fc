"""`filtertwin listen`: hear candidate designs live, switch between them, run blind trials."""

from __future__ import annotations

import argparse
import os
import sys
from contextlib import ExitStack
from pathlib import Path
from typing import Any

from filtertwin.commands.options import RESAMPLING_HELP, frequency_hz, positive
from filtertwin.errors import UserInputError

SAFETY_EPILOG = """\
Safety: loud playback harms hearing, and full-range or low-frequency signal destroys
tweeters. Every stream starts muted, ramps up over about a second and passes a hard output
ceiling (-1 dBFS at most; --ceiling can only lower it). Still start with the volume low.
In the default stereo mix no way feeds a driver directly. With --ways-out each way goes to
its own channel pair (low 1-2, then mid, then high); bypass would then send the full-range
input, bass included, to the mid and high drivers, so it needs a confirmation: press 0
again within 3 s (a script writes 'confirm'). Never connect a tweeter without its
protection while you try things out.

Keys: 1-9 candidate, 0 bypass, s/l/m/h solo sum/low/mid/high, L/M/H mute a way, + and -
level, c ADC capture on/off (--adc-rate), n circuit noise on/off, e type a command (Enter
runs it, Esc cancels), u/r undo/redo an edit, ? all keys and commands, q quit.
Typed commands: select N|LABEL, solo WAY, mute WAY, level DB, part [WAY] [STAGE] PART
CHANGE (part low 2 C1 +1), corner [WAY] HZ [HZ], undo, redo, edits, save FILE, capture
on|off, noise on|off, confirm, bypass, louder, quieter, quit. WAY is low, mid, high, sum or
a filter's name from the design.
Blind trials (--abx N or --prefer N): a/b/x listen, A/B answer (ABX); 1/2 listen, Enter
answers (preference); t repeats the trial and its keys.
A script has lines 'TIME_S COMMAND [ARGS]', e.g. '2.5 select 2', '5 part low 2 C1 +1'."""

CAUTION_LINES = (
    "caution: loud playback harms hearing; start with the volume low and raise it slowly",
    "caution: a tweeter fed full-range or low-frequency signal (bypass, a low way, a wrong "
    "channel) can burn out; keep its protection in place while you try things out",
)
"""Printed before any sound at every start of ``listen``."""


def _latency(text: str) -> str | float:
    if text in ("low", "high"):
        return text
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"latency must be low, high or seconds, got {text!r}"
        ) from None
    if not 0 < value <= 2:
        raise argparse.ArgumentTypeError(f"latency must be 0 to 2 s, got {text}")
    return value


def register(subparsers: Any) -> None:
    """Add the ``listen`` sub-command."""
    p = subparsers.add_parser(
        "listen",
        help="hear candidate designs live, switch between them, run blind trials",
        description=(
            "Filter a recording (played in a loop) or the live input through the digital "
            "twin of each design and listen: switch candidates with crossfades, solo or mute "
            "the ways of a crossover, compare level-matched, run ABX or preference trials, "
            "and change parts while listening."
        ),
        epilog=SAFETY_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument(
        "designs",
        nargs="+",
        metavar="DESIGN",
        help="design files or example names: candidate A, B, C ... (up to 9)",
    )
    source = p.add_argument_group("input and device")
    add = source.add_argument
    add("--input", metavar="FILE", help="recording to play in a loop (WAV, FLAC, CSV, NPY; "
        "any rate); default: the device's live input")  # fmt: skip
    add("--column", metavar="NAME", help="the one column or channel to play")
    add("--input-rate", type=frequency_hz, metavar="HZ",
        help="rate of a CSV without time column or of an NPY file")  # fmt: skip
    add("--device", metavar="DEV", help="device number or part of its name (see: devices)")
    add("--rate", type=frequency_hz, metavar="HZ",
        help="stream rate (default: the device's default rate)")  # fmt: skip
    add("--blocksize", type=positive(int, "block size"), default=256, metavar="N",
        help="frames per audio block (default 256)")  # fmt: skip
    add("--latency", type=_latency, metavar="low|high|S",
        help="device latency (default: high for a recording, low for live input)")  # fmt: skip
    add = p.add_argument_group("listening").add_argument
    add("--match", choices=("loudness", "gain", "off"),
        help="level matching: BS.1770 loudness of the recording (default with --input), "
        "passband gain (default for live input), or off")  # fmt: skip
    add("--match-seconds", type=positive(float, "--match-seconds"), default=10.0,
        metavar="S", help="seconds of the recording measured (default 10)")  # fmt: skip
    add("--level", type=float, default=0.0, metavar="DB",
        help="output level after the ramp, -60 to +12 dB (default 0)")  # fmt: skip
    add("--ceiling", type=float, default=-1.0, metavar="DBFS",
        help="output ceiling, -60 to -1 dBFS (default -1; never higher)")  # fmt: skip
    add("--crossfade", type=positive(float, "--crossfade"), default=30.0, metavar="MS",
        help="crossfade time of a switch (default 30 ms)")  # fmt: skip
    add("--ways-out", action="store_true",
        help="each way on its own channel pair (active monitoring; see below)")  # fmt: skip
    add("--adc-rate", type=frequency_hz, metavar="HZ",
        help="with a recording sampled faster: key c hears what an ideal ADC at this rate "
        "captures of it (aliases included), with and without each candidate")  # fmt: skip
    add("--circuit-noise", action="store_true",
        help="start with each way's circuit noise (resistors and amplifier, at its computed "
        "density and true level against full scale) added; key n switches it")  # fmt: skip
    add("--resampling", choices=("linear", "causal"), default="linear",
        help="candidates run at the oversampling render picks; " + RESAMPLING_HELP)  # fmt: skip
    trials = p.add_argument_group("blind trials (two designs)")
    kind = trials.add_mutually_exclusive_group()
    kind.add_argument("--abx", type=positive(int, "--abx"), metavar="N",
                      help="N ABX trials: is X the A or the B?")  # fmt: skip
    kind.add_argument("--prefer", type=positive(int, "--prefer"), metavar="N",
                      help="N blind preference trials: which of 1 and 2 is better?")  # fmt: skip
    trials.add_argument("--seed", type=int, help="seed of the hidden assignments")
    trials.add_argument("--log", metavar="FILE", help="write every trial to this CSV file")
    add = p.add_argument_group("running").add_argument
    add("--script", metavar="FILE|-",
        help="timed commands, lines 'TIME_S COMMAND [ARGS]'; - reads stdin")  # fmt: skip
    add("--duration", type=positive(float, "--duration"), metavar="S",
        help="stop after S seconds")  # fmt: skip
    add("--window", action="store_true",
        help="also show the session in a local page in the web browser: stage cards whose "
        "parts step through their series, response, live spectrum, meters, blind trials "
        "(the terminal keys keep working)")  # fmt: skip
    p.set_defaults(func=cmd_listen)


def _options(args: argparse.Namespace) -> Any:
    from filtertwin.live.player import ListenOptions, check_options

    blind = "abx" if args.abx else "preference" if args.prefer else None
    if blind is None and (args.log or args.seed is not None):
        raise UserInputError("--log and --seed belong to blind trials; add --abx N or --prefer N")
    if not 16 <= args.blocksize <= 8192:
        raise UserInputError(f"--blocksize must be 16 to 8192 frames, got {args.blocksize}")
    if args.crossfade > 1000:
        raise UserInputError(f"--crossfade must be at most 1000 ms, got {args.crossfade:g}")
    options = ListenOptions(
        input_path=Path(args.input) if args.input else None,
        input_rate_hz=args.input_rate,
        column=args.column,
        device=args.device,
        rate_hz=args.rate,
        block_frames=args.blocksize,
        latency=args.latency,
        match=args.match,
        match_seconds=args.match_seconds,
        level_db=args.level,
        ceiling_dbfs=args.ceiling,
        fade_s=args.crossfade / 1000.0,
        ways_out=args.ways_out,
        blind=blind,
        trials=args.abx or args.prefer or 0,
        seed=args.seed,
        log_path=Path(args.log) if args.log else None,
        adc_rate_hz=args.adc_rate,
        circuit_noise=args.circuit_noise,
        resampling=args.resampling,
    )
    check_options(options, len(args.designs))
    return options


def _designs(names: list[str]) -> list[tuple[str, Any]]:
    from filtertwin.circuit.design import load

    return [(name, load(name)) for name in names]


def _introduce(player: Any, console: Any, interactive: bool) -> None:
    from filtertwin.live import keys, matching, routing

    session = player.session
    for line in CAUTION_LINES:
        console.say(line)
    console.say(player.describe())
    if session.blind is None:
        for c in session.candidates:
            ways = ", ".join(
                n if n == w else f"{n} ({w})" for w, n in zip(c.ways, c.filter_names, strict=True)
            )
            console.say(f"  {c.label}: {c.name} ({c.design.title}); ways {ways}")
            for warning in c.design.warnings:
                console.say(f"     design warning: {warning}")
        console.say(matching.describe(session.match, [c.label for c in session.candidates]))
    else:
        plan = session.blind.plan
        matched = "off" if session.match.mode == "off" else f"by {session.match.mode}"
        console.say(
            f"blind {plan.kind} trials: {plan.n_trials}; the designs stay hidden until the end "
            f"(level matching {matched}; the offsets are shown at the end)"
        )
    if session.pair_ways:
        routes = ", ".join(
            f"{w} on {routing.channels_of(session.pair_ways, w)}" for w in session.pair_ways
        )
        console.say(f"ways out: {routes}")
        for warning in routing.low_reaching_high_ways(session.candidates):
            console.say(warning)
    safety = session.safety
    console.say(
        f"safety: output starts muted and ramps to {safety.level_db:+.1f} dB over "
        f"{player.options.ramp_s:g} s; ceiling {safety.ceiling_dbfs:g} dBFS"
    )
    if interactive:
        console.say(keys.help_text())


def _check_script_ways(script: Any, named: list[tuple[str, Any]]) -> None:
    """Refuse a script line whose way no design has, before anything is played."""
    from filtertwin.live.candidates import make_candidates

    candidates = make_candidates(named)
    known = {"sum"} | {w for c in candidates for w in (*c.ways, *c.filter_names)}
    for timed in script:
        if timed.command.name in ("solo", "mute") and timed.command.args[0] not in known:
            raise UserInputError(
                f"script line {timed.line}: no design has a way {timed.command.args[0]!r}; "
                f"the ways are {', '.join(sorted(known))}"
            )


def _finish(player: Any, console: Any, reason: str) -> None:
    from filtertwin.live import matching
    from filtertwin.live.blind import describe_score
    from filtertwin.live.status import summary_lines

    session = player.session
    console.say(f"stopped ({reason}); output faded out")
    for line in summary_lines(session, player.played_s()):
        console.say(line)
    blind = session.blind
    if blind is not None:
        blind.end()
        if not blind.finished:
            console.say(
                f"blind trials stopped after {len(blind.answers)} of {blind.plan.n_trials}: "
                + describe_score(blind.plan, blind.score())
            )
        console.say(f"seed of the blind plan: {blind.plan.seed}")
        console.say(matching.describe(session.match, [c.name for c in session.candidates]))


CLOSE_TIMEOUT_S = 3.0
"""Longest wait for PortAudio to stop and close the stream before leaving without it."""
LOST_CLOSE_TIMEOUT_S = 1.0
"""The same once the stream is known to be lost (closing it then usually blocks)."""


def _leave_without_stream(player: Any, console: Any, message: str) -> None:
    """The stream is lost or will not close: say so in one line and exit at once.

    PortAudio may still hold a lock inside the library, and its clean-up at exit could wait
    on it forever, so the process ends with ``os._exit`` after flushing what was said.
    """
    from filtertwin.live.watchdog import EXIT_STREAM_LOST

    blind = player.session.blind
    if blind is not None:
        blind.end()
    console.end()
    sys.stdout.flush()
    print(f"filtertwin: {message}", file=sys.stderr, flush=True)
    os._exit(EXIT_STREAM_LOST)


def cmd_listen(args: argparse.Namespace) -> int:
    """Run a listening session; exit 0 when it ends normally, 130 on Ctrl-C, 3 when the
    audio stream was lost."""
    from filtertwin.live import console as live_console
    from filtertwin.live import keys
    from filtertwin.live.player import prepare
    from filtertwin.live.watchdog import StreamLost, call_within

    options = _options(args)
    script = keys.read_script(args.script) if args.script else ()
    named = _designs(args.designs)
    if script:
        _check_script_ways(script, named)
    console = live_console.Console(sys.stdout)
    player = prepare(named, options, console.say)
    interactive = sys.stdin.isatty() and args.script != "-"
    _introduce(player, console, interactive)
    reason = "interrupted"
    lost: StreamLost | None = None
    with ExitStack() as stack:
        key_source = stack.enter_context(keys.TerminalKeys()) if interactive else None
        if args.window:
            from filtertwin.live.window import open_window

            stack.enter_context(open_window(player, console.say))
        try:
            player.open()
            player.start()
            console.say("playing")
            reason = live_console.run(player, console, script, key_source, args.duration)
        except KeyboardInterrupt:
            reason = "interrupted"
        except StreamLost as error:
            lost = error
        finally:
            console.end()
            if lost is None:
                player.fade_out()
            closed = call_within(player.close, LOST_CLOSE_TIMEOUT_S if lost else CLOSE_TIMEOUT_S)
    # the terminal is restored here (the key reader's context has closed)
    if lost is not None:
        _leave_without_stream(player, console, str(lost))
    if not closed:
        _leave_without_stream(
            player, console,
            f"the audio stream did not close within {CLOSE_TIMEOUT_S:g} s (the audio server "
            "stopped answering); left without it",
        )  # fmt: skip
    _finish(player, console, reason)
    return 130 if reason == "interrupted" else 0
