"""The preview window of ``filtertwin listen --window``: a local page in the web browser.

The listen process serves the page itself (:mod:`~filtertwin.live.window.server`, aiohttp on
127.0.0.1 with a random token in the address); the page (``static/``: HTML, CSS and our own
small scripts, no network needed) shows the heard candidate's stages as cards whose parts
step through their E-series, the response as built with the twin overlaid, the live input
and output spectra, meters, candidate buttons and the blind trials. It drives the same
session as the terminal keys, through :mod:`~filtertwin.live.window.link`; what the page
sees is read on the control side, never inside the audio callback.

Modules: ``link`` (the session, commands, undo, redo, save as), ``views`` (cards, curves and
spectra as plain data), ``savefile`` (the edited design as a new design file), ``server``.
"""

from __future__ import annotations

import webbrowser
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from filtertwin.live.player import Player
    from filtertwin.live.window.server import WindowServer


@contextmanager
def open_window(
    player: Player, say: Callable[[str], None] = print, browser: bool = True
) -> Iterator[WindowServer]:
    """Serve the preview window of a prepared session while the block runs.

    Prints the address; with ``browser`` opens it in the system's web browser (when there
    is none, the address is all, and the page is served all the same).
    """
    from filtertwin.live.window.link import SessionLink
    from filtertwin.live.window.server import WindowServer

    link = SessionLink(player)
    server = WindowServer(link, say=say)
    url = server.start()
    say(f"preview window: {url} (local only; the address holds its key, keep it private)")
    if browser:
        try:
            opened = webbrowser.open(url, new=1)
        except webbrowser.Error:
            opened = False
        if not opened:
            say("no web browser found here: open the address above in one")
    try:
        yield server
    finally:
        server.stop()
        link.close()
