"""`filtertwin demo`: the whole job on the packaged examples and invented demo recordings.

The demo runs the same sub-commands a user would type (design, render, crossover,
tolerance, alias) on material that ships with the package, so what it shows is exactly
what those commands do. It writes everything under one folder and ends by saying what to
open and what to listen to.
"""

from __future__ import annotations

import argparse
import shutil
import time
from pathlib import Path
from typing import Any

CROSSOVER_EXAMPLE = "bookshelf-2way"
ANTIALIAS_EXAMPLE = "vibration-antialias"
LOGGER_ADC_RATE_HZ = "8000"
LOGGER_BITS = "16"
TOLERANCE_BUILDS = "1000"
LISTENING_CAUTIONS = (
    "caution, hearing: start playback quiet and raise it slowly; loud levels, in headphones "
    "above all, harm hearing for good.",
    "caution, tweeters: play before.wav, woofer.wav and sum.wav only on full-range speakers "
    "or headphones, never straight into a tweeter: full-range and low-frequency signal "
    "destroys it.",
    "caution, mains: a mains-powered build follows your local electrical codes; leave mains "
    "wiring to people licensed for it.",
)


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "demo",
        help="run the whole job on the packaged examples and demo recordings",
        description=(
            "Design the packaged examples, render the invented demo music through the 2-way "
            "crossover (before/after files, spectra, HTML report), check the crossover and "
            "its tolerance builds, and run the anti-alias check on the invented vibration "
            "recording. Everything is written under --out."
        ),
    )
    p.add_argument(
        "--out", default="filtertwin-demo", help="folder for everything (default ./filtertwin-demo)"
    )
    p.set_defaults(func=run)


def _heading(text: str) -> None:
    print(f"\n=== {text} " + "=" * max(0, 72 - len(text)))


def _run(argv: list[str]) -> int:
    """Run one sub-command exactly as typed on the command line; its exit status."""
    from filtertwin.cli import build_parser

    print(f"$ filtertwin {' '.join(argv)}")
    args = build_parser().parse_args(argv)
    return int(args.func(args))


def _design_overview() -> None:
    from filtertwin import examples
    from filtertwin.circuit.design import load

    for name, summary in examples.listing():
        design = load(name)
        stages = sum(len(f.stages) for f in design.filters)
        warned = f", {len(design.warnings)} warning(s)" if design.warnings else ""
        size = f"{len(design.filters)} filter(s), {stages} stage(s)"
        print(f"  {name:<24s} {size}{warned}: {summary}")


def _audio_device_present() -> bool:
    try:
        from filtertwin.live.devices import list_devices

        return any(d.output_channels > 0 for d in list_devices())
    except Exception:  # no PortAudio, no audio server: the live comparison just isn't offered
        return False


def run(args: argparse.Namespace) -> int:
    from filtertwin.files.outputs import prepare_folder

    out = Path(args.out)
    made = prepare_folder(out, "--out")  # one line, exit 2, when it cannot be written
    try:
        return _run_demo(out)
    except BaseException:  # a failure or Ctrl-C: remove what this run created
        if made:
            shutil.rmtree(made[-1], ignore_errors=True)
        raise


def _run_demo(out: Path) -> int:
    from filtertwin.files import samples

    start = time.perf_counter()
    inputs = out / "inputs"
    print(
        f"filtertwin demo: invented example designs and invented recordings -> {out}/\n"
        "(every scenario here is made up; the numbers are what the tool computes for them)"
    )

    _heading("the invented recordings")
    inputs.mkdir(parents=True, exist_ok=True)
    program = samples.write_program(inputs / "program_48k.wav")
    vibration, _, _ = samples.write_vibration(inputs)
    print(f"  {program}: 15 s of synthesised music (bass, chords, drums), 48 kHz stereo")
    print(f"  {vibration}: invented pump-motor vibration at 51.2 kHz with supply spurs")

    _heading("1. the example designs")
    _design_overview()
    print()
    _run(["design", CROSSOVER_EXAMPLE, "--rate", "48000", "--oversample", "auto"])

    _heading("2. the crossover, heard and checked")
    crossover_dir = out / "crossover"
    render_status = _run(["render", CROSSOVER_EXAMPLE, str(program), "--out", str(crossover_dir)])
    if render_status == 1:
        print(
            "  (Each check above says PASS or FAIL with its figures. A twin-fidelity FAIL is\n"
            "   about the twin, not the crossover: its fidelity line says where the twin misses\n"
            "   the tolerance, how far down the response that is, and what the difference\n"
            "   amounts to against the peak. The files are written either way.)"
        )
    print()
    _run(["crossover", CROSSOVER_EXAMPLE])

    _heading("3. what the part tolerances do")
    _run(
        ["tolerance", CROSSOVER_EXAMPLE, "--builds", TOLERANCE_BUILDS, "--seed", "1",
         "--out", str(out / "tolerance")]
    )  # fmt: skip

    _heading("4. the anti-alias filter in front of an 8 kHz, 16-bit logger")
    _run(["design", ANTIALIAS_EXAMPLE])
    print()
    alias_dir = out / "antialias"
    alias_status = _run(
        ["alias", ANTIALIAS_EXAMPLE, str(vibration), "--adc-rate", LOGGER_ADC_RATE_HZ,
         "--bits", LOGGER_BITS, "--out", str(alias_dir)]
    )  # fmt: skip
    if alias_status == 1:
        print(
            "  (FAIL is the finding here: this filter does not reach the 16-bit converter's\n"
            "   full dynamic range at (ADC rate - band); the table shows how far each spur is\n"
            "   pushed down. Run the ADC faster, or steepen the filter, and check again;\n"
            "   add --suggest to the alias command to see designs that would pass.)"
        )

    _heading("what to open and what to listen to")
    print(f"  open   {crossover_dir / 'report.html'} in a browser (plots, stage tables, checks)")
    print(f"  listen {crossover_dir}/before.wav, woofer.wav, tweeter.wav and sum.wav")
    print(f"  look   {out / 'tolerance'}/ and {alias_dir}/ (figures and the ADC captures)")
    if _audio_device_present():
        print(
            "  live   filtertwin listen candidate-butterworth candidate-bessel "
            f"--input {program}  (keys: 1/2 choose, 0 bypass, t blind trials, q quit)"
        )
    else:
        print("  live   no audio device found; with one, `filtertwin listen` compares designs live")
    for line in LISTENING_CAUTIONS:
        print(f"  {line}")
    print(f"\ndemo finished in {time.perf_counter() - start:.1f} s")
    return 0
