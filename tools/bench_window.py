"""How soon the preview window shows a part edit: click to card and plot redrawn.

    JACK_DEFAULT_SERVER=NAME python tools/bench_window.py [--repeats 10]

Needs a running JACK server of that name (``bash tools/jack_server.sh NAME``) and Debian's
Chromium. Plays the demo programme through the bookshelf crossover with the window open in
Chromium, then times, inside the page (``performance.now``), from a click to the page
showing its result:

* a capacitor step (rebuild, twin, chain swap, new cards and curves, plot redrawn; the
  edited candidate's loudness is measured again in the background); target: within 100 ms;
* the same step with the level match measured again inside the edit, every candidate and
  the dry input (as the session did before), steps of both kinds taken in turn so that
  both see the same machine load;
* for reference, in the same run: a solo button (one crossfade request and a new page state).

Prints the medians and their ratios; machines are shared and noisy, so compare medians.
"""

from __future__ import annotations

import argparse
import datetime
import os
import statistics
import time
from pathlib import Path

from filtertwin.commands.listen import _designs
from filtertwin.live import matching
from filtertwin.live.player import ListenOptions, prepare
from filtertwin.live.window import open_window

REPO = Path(__file__).resolve().parents[1]
TIMED_CLICK = """([sel, watch, attribute]) => new Promise(done => {
    const before = document.querySelector(watch).getAttribute(attribute);
    const t0 = performance.now();
    document.querySelector(sel).click();
    const poll = () => document.querySelector(watch).getAttribute(attribute) !== before
        ? done(performance.now() - t0) : requestAnimationFrame(poll);
    poll();
})"""


def measure_all_in_the_edit(session) -> None:  # type: ignore[no-untyped-def]
    """The level match as the session found it again before: inside the edit, measuring
    every candidate and the dry input."""
    session.match = matching.match_by_loudness(
        session.program, session.processing_rate_hz, session.twins
    )
    session._matched_again()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=10)
    args = parser.parse_args()
    from playwright.sync_api import sync_playwright

    print(f"date: {datetime.datetime.now().astimezone().isoformat(timespec='seconds')}")
    options = ListenOptions(input_path=REPO / "audio_samples" / "program_48k.wav", device="system")
    player = prepare(_designs(["bookshelf-2way"]), options, lambda line: None)
    player.open()
    player.start()
    edits, inline_edits, solos = [], [], []
    try:
        with (
            open_window(player, lambda line: None, browser=False) as server,
            sync_playwright() as pw,
        ):
            browser = pw.chromium.launch(executable_path="/usr/bin/chromium", args=["--no-sandbox"])
            page = browser.new_page(viewport={"width": 1400, "height": 900})
            page.goto(server.url)
            page.wait_for_selector("[data-step='low-1-C1-up']")
            time.sleep(1.0)
            session = player.session
            background = session._rematch
            for n in range(2 * args.repeats):
                step = "up" if n % 2 == 0 else "down"
                inline = n % 4 in (1, 2)  # up and down steps of both kinds
                session._rematch = (  # type: ignore[method-assign]
                    (lambda index: measure_all_in_the_edit(session)) if inline else background
                )
                (inline_edits if inline else edits).append(page.evaluate(
                    TIMED_CLICK, [f"[data-step='low-1-C1-{step}']", "#response", "data-drawn"]
                ))  # fmt: skip
                session.finish_edits()
                time.sleep(0.3)
                way = "low" if n % 2 == 0 else "sum"
                solos.append(page.evaluate(
                    TIMED_CLICK, [f"[data-solo='{way}']", f"[data-solo='{way}']", "class"]
                ))  # fmt: skip
                time.sleep(0.3)
            browser.close()
    finally:
        player.fade_out()
        player.close()
    edit_ms, solo_ms = statistics.median(edits), statistics.median(solos)
    inline_ms = statistics.median(inline_edits)
    print(f"load average (1 min) at the end: {os.getloadavg()[0]:.2f}")
    print(f"capacitor step, click to card and plot redrawn: median {edit_ms:.0f} ms "
          f"(max {max(edits):.0f} ms) over {len(edits)}; target 100 ms: "
          f"{'met' if edit_ms <= 100 else 'MISSED'}")  # fmt: skip
    print(f"the same step, level match measured inside the edit (as before): median "
          f"{inline_ms:.0f} ms (max {max(inline_edits):.0f} ms); "
          f"before / now = {inline_ms / edit_ms:.1f}")  # fmt: skip
    print(f"solo button, click to the page showing it: median {solo_ms:.0f} ms; "
          f"edit / solo = {edit_ms / solo_ms:.1f}")  # fmt: skip


if __name__ == "__main__":
    main()
