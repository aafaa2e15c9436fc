"""The preview window's local web server: the page, its files and one WebSocket.

Runs an aiohttp application on its own thread and event loop, on the loopback address only,
on a free port. Every request must carry the session's random token as the first part of
its path (``http://127.0.0.1:PORT/TOKEN/``): the page, its scripts and the WebSocket alike.
Anything else gets 403 Forbidden, and so does a request whose ``Host`` is not the loopback
address (a page elsewhere cannot reach the server through a name that points at it).

Over the WebSocket the server sends JSON messages:

* ``state``: the whole page state (:func:`~filtertwin.live.window.views.session_state`),
  after every change, whoever made it (page, terminal or script);
* ``live``: meters, and the input and output spectra, ``LIVE_RATE_HZ`` times a second
  (in blind trials only what identifies nothing: the trial and the level);
* ``said``: the session's messages; ``envelope``: a tolerance envelope asked for;
* ``ended``: the session stopped.

The page sends ``{"cmd": WORD, "args": [...]}``: any command a script can give, and
``undo``, ``redo``, ``save_as``, ``envelope``. Commands run on a worker thread, one at a
time, through :class:`~filtertwin.live.window.link.SessionLink`.
"""

from __future__ import annotations

import asyncio
import json
import math
import secrets
import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from importlib import resources
from typing import Any

from aiohttp import WSMsgType, web

from filtertwin.errors import UserInputError
from filtertwin.live.window import views
from filtertwin.live.window.link import SessionLink

LOOPBACK = "127.0.0.1"
LIVE_RATE_HZ = 25.0
STATIC_FILES = {
    "index.html": "text/html",
    "app.js": "text/javascript",
    "plot.js": "text/javascript",
    "style.css": "text/css",
    "LICENSE.txt": "text/plain",
}
START_TIMEOUT_S = 10.0


def _static(name: str) -> bytes:
    return resources.files("filtertwin.live.window").joinpath("static", name).read_bytes()


def _json(data: Any) -> str:
    return json.dumps(data, allow_nan=False, default=_plain, separators=(",", ":"))


def _plain(value: Any) -> Any:
    if isinstance(value, float):
        return None
    if hasattr(value, "tolist"):
        return value.tolist()
    raise TypeError(f"{type(value).__name__} is not JSON")


def _finite(data: Any) -> Any:
    """Non-finite floats as None (JSON has no infinity)."""
    if isinstance(data, float):
        return data if math.isfinite(data) else None
    if isinstance(data, dict):
        return {k: _finite(v) for k, v in data.items()}
    if isinstance(data, list | tuple):
        return [_finite(v) for v in data]
    return data


class WindowServer:
    """Serve the preview window of one listening session.

    Parameters
    ----------
    link : SessionLink
        The session.
    port : int
        0 for a free port (the default).
    say : callable
        Where the server's own lines go (the address, problems).
    """

    def __init__(self, link: SessionLink, port: int = 0, say: Callable[[str], None] = print):
        self.link = link
        self.token = secrets.token_urlsafe(24)
        self.port = port
        self.say = say
        self._loop: asyncio.AbstractEventLoop | None = None
        self._thread: threading.Thread | None = None
        self._runner: web.AppRunner | None = None
        self._started = threading.Event()
        self._error: BaseException | None = None
        self._sockets: set[web.WebSocketResponse] = set()
        self._worker = ThreadPoolExecutor(1, thread_name_prefix="filtertwin-window-cmd")
        self._state_text = ""
        self._state_version = -1
        self._message_seen = 0
        self._ended = False

    @property
    def url(self) -> str:
        """The page's address, with the token."""
        return f"http://{LOOPBACK}:{self.port}/{self.token}/"

    # --- the application ------------------------------------------------------------------

    def _allowed(self, request: web.Request) -> bool:
        host = request.host.rsplit(":", 1)[0] if request.host else ""
        if host not in (LOOPBACK, "localhost"):
            return False
        first = request.path.lstrip("/").split("/", 1)[0]
        return secrets.compare_digest(first.encode(), self.token.encode())

    @web.middleware
    async def _guard(self, request: web.Request, handler: Any) -> web.StreamResponse:
        if not self._allowed(request):
            return web.Response(status=403, text="forbidden: this address needs its token\n")
        return await handler(request)

    async def _page(self, request: web.Request) -> web.StreamResponse:
        name = request.match_info.get("name") or "index.html"
        if name not in STATIC_FILES:
            raise web.HTTPNotFound()
        return web.Response(
            body=_static(name),
            content_type=STATIC_FILES[name],
            headers={"Cache-Control": "no-store", "X-Content-Type-Options": "nosniff"},
        )

    async def _socket(self, request: web.Request) -> web.StreamResponse:
        ws = web.WebSocketResponse(heartbeat=10.0)
        await ws.prepare(request)
        self._sockets.add(ws)
        try:
            await ws.send_str(self._state_message(force=True))
            async for msg in ws:
                if msg.type == WSMsgType.TEXT:
                    await self._on_message(ws, msg.data)
        finally:
            self._sockets.discard(ws)
        return ws

    def _app(self) -> web.Application:
        app = web.Application(middlewares=[self._guard])
        app.router.add_get("/{token}/", self._page)
        app.router.add_get("/{token}/ws", self._socket)
        app.router.add_get("/{token}/{name}", self._page)
        return app

    # --- messages ------------------------------------------------------------------------

    def _state_message(self, force: bool = False) -> str:
        view = self.link.view()
        if force or view.version != self._state_version or not self._state_text:
            state = views.session_state(view, self.link.originals, *self.link.flags())
            self._state_text = _json({"type": "state", **_finite(state)})
            self._state_version = view.version
        return self._state_text

    def _live_message(self) -> str:
        view = self.link.view()
        blind = view.blind is not None and not view.blind["finished"]
        if blind:
            return _json({"type": "live", "blind": True, "level_db": view.level_db})
        meters = self.link.meters()
        dry, out, rate_hz = self.link.latest_signals(views.SPECTRUM_FRAMES)
        spectrum = {
            "f_hz": views.spectrum_centres_hz(views.SPECTRUM_FRAMES, rate_hz),
            "in_db": views.spectrum_db(dry, rate_hz),
            "out_db": views.spectrum_db(out, rate_hz),
        }
        return _json({"type": "live", "meters": _finite(meters), "spectrum": spectrum})

    async def _broadcast(self, text: str) -> None:
        for ws in list(self._sockets):
            if not ws.closed:
                try:
                    await ws.send_str(text)
                except ConnectionError:
                    self._sockets.discard(ws)

    async def _pump(self) -> None:
        """Send live data at a steady rate, and state and messages when they change."""
        period = 1.0 / LIVE_RATE_HZ
        loop = asyncio.get_running_loop()
        next_at = loop.time()
        while True:
            next_at += period
            if self._sockets:
                if self.link.version != self._state_version:
                    await self._broadcast(self._state_message())
                await self._send_messages()
                await self._broadcast(self._live_message())
            await asyncio.sleep(max(0.0, next_at - loop.time()))
            if loop.time() - next_at > 1.0:
                next_at = loop.time()

    async def _send_messages(self) -> None:
        fresh = [text for n, text in list(self.link.messages) if n > self._message_seen]
        if self.link.messages:
            self._message_seen = self.link.messages[-1][0]
        for text in fresh:
            await self._broadcast(_json({"type": "said", "text": text}))

    async def _on_message(self, ws: web.WebSocketResponse, data: str) -> None:
        try:
            message = json.loads(data)
            name = str(message["cmd"])
            args = tuple(str(a) for a in message.get("args", ()))
        except (ValueError, KeyError, TypeError):
            await ws.send_str(_json({"type": "said", "text": "window: a message was not read"}))
            return
        loop = asyncio.get_running_loop()
        try:
            reply = await loop.run_in_executor(self._worker, self._carry_out, name, args)
        except UserInputError as error:
            reply = {"type": "said", "text": f"{name}: {error}"}
        if reply is not None:
            await ws.send_str(_json(_finite(reply)))
        await self._broadcast(self._state_message())
        await self._send_messages()

    def _carry_out(self, name: str, args: tuple[str, ...]) -> dict[str, Any] | None:
        if name == "save_as":
            if len(args) != 1:
                raise UserInputError("give one file name, e.g. my-build.toml")
            self.link.save_as(args[0])
            return None
        if name == "envelope":
            view = self.link.view()
            if view.selected is None or (view.blind is not None and not view.blind["finished"]):
                raise UserInputError("select a candidate first (not during blind trials)")
            c = view.candidates[view.selected]
            f_hz = views.plot_grid_hz(view.processing_rate_hz)
            curves = views.tolerance_envelope(c.ways, c.design, f_hz)
            return {"type": "envelope", "version": view.version, "ways": curves}
        self.link.run(name, args)
        return None

    # --- running ---------------------------------------------------------------------------

    def _serve(self) -> None:
        loop = asyncio.new_event_loop()
        self._loop = loop
        asyncio.set_event_loop(loop)
        try:
            runner = web.AppRunner(self._app(), access_log=None)
            loop.run_until_complete(runner.setup())
            site = web.TCPSite(runner, LOOPBACK, self.port)
            loop.run_until_complete(site.start())
            self._runner = runner
            self.port = int(runner.addresses[0][1])
            pump = loop.create_task(self._pump())
        except BaseException as error:
            self._error = error
            self._started.set()
            loop.close()
            return
        self._started.set()
        try:
            loop.run_forever()
        finally:
            pump.cancel()
            loop.run_until_complete(asyncio.gather(pump, return_exceptions=True))
            loop.run_until_complete(runner.cleanup())
            loop.close()

    def start(self) -> str:
        """Start serving; return the address.

        Raises
        ------
        UserInputError
            If the server cannot listen on the loopback address.
        """
        self._thread = threading.Thread(target=self._serve, name="filtertwin-window", daemon=True)
        self._thread.start()
        self._started.wait(START_TIMEOUT_S)
        if self._error is not None or not self._started.is_set():
            raise UserInputError(
                f"the preview window's server could not start on {LOOPBACK}: {self._error}; "
                "listen without --window"
            )
        return self.url

    async def _say_ended(self, reason: str) -> None:
        await self._broadcast(self._state_message(force=True))
        await self._send_messages()
        await self._broadcast(_json({"type": "ended", "reason": reason}))
        for ws in list(self._sockets):
            await ws.close()

    def stop(self, reason: str = "stopped") -> None:
        """Tell the pages the session ended and stop serving (safe to call twice)."""
        loop, thread = self._loop, self._thread
        if loop is None or thread is None or not thread.is_alive():
            return
        if not self._ended:
            self._ended = True
            future = asyncio.run_coroutine_threadsafe(self._say_ended(reason), loop)
            try:
                future.result(timeout=2.0)
            except Exception:  # the pages may be gone; stopping matters more
                pass
        loop.call_soon_threadsafe(loop.stop)
        thread.join(timeout=5.0)
        self._worker.shutdown(wait=False, cancel_futures=True)
