"""Screenshot of the preview window (``listen --window``) for the README.

    JACK_DEFAULT_SERVER=NAME python tools/window_screenshot.py docs/images/preview-window.png

Needs a running JACK server of that name (``bash tools/jack_server.sh NAME``) and Debian's
Chromium. Plays the demo programme through the bookshelf crossover and a Butterworth
candidate, steps one capacitor up (so the plot shows the previous version ghosted), waits
for the spectrum to fill (and to show some treble) and saves the page as PNG.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from filtertwin.commands.listen import _designs
from filtertwin.live.player import ListenOptions, prepare
from filtertwin.live.window import open_window

REPO = Path(__file__).resolve().parents[1]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out", type=Path)
    parser.add_argument("--width", type=int, default=1400)
    args = parser.parse_args()
    from playwright.sync_api import sync_playwright

    options = ListenOptions(
        input_path=REPO / "audio_samples" / "program_48k.wav", device="system", level_db=-6.0
    )
    player = prepare(_designs(["bookshelf-2way", "candidate-butterworth"]), options, print)
    player.open()
    player.start()
    try:
        with open_window(player, print, browser=False) as server, sync_playwright() as pw:
            browser = pw.chromium.launch(executable_path="/usr/bin/chromium", args=["--no-sandbox"])
            page = browser.new_page(viewport={"width": args.width, "height": 900})
            page.goto(server.url)
            page.wait_for_selector("[data-step='low-1-C1-up']")
            page.click("[data-step='low-1-C1-up']")
            page.wait_for_selector("[data-part='low-1-C1']:text-is('27n')")
            time.sleep(3.0)
            # the demo programme's treble comes in bursts: take the picture while the
            # spectrum shows one (the output above 5 kHz over -90 dB), or after 10 s anyway
            page.wait_for_function(
                """() => page.live && page.live.spectrum && page.live.spectrum.f_hz.some(
                    (f, i) => f > 5000 && page.live.spectrum.out_db[i] > -90)""",
                timeout=10000,
            )
            page.screenshot(path=str(args.out), full_page=True)
            browser.close()
    finally:
        player.fade_out()
        player.close()
    print(f"written {args.out}")


if __name__ == "__main__":
    main()
