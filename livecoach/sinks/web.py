"""The crew web page: a read-only HTTP + WebSocket server on the live loop.

Served with aiohttp on the same asyncio loop as the pipeline. Everything the
page needs is served from the package (``livecoach/web/static``): no CDN,
no external font or script, charts drawn on a ``<canvas>`` by our own
JavaScript. The page cannot change anything: every route is GET, and what a
browser sends on the WebSocket is ignored.

Routes::

    GET /                 the page
    GET /favicon.ico      its icon (SVG)
    GET /static/<file>    its script, style sheet and icon
    GET /api/plan         the run-up plan: distance_m, speed_mps, power_w arrays (or null)
    GET /api/ride         vehicle, course and rider figures for the header and axes
    GET /api/state        the newest state, chart history and cue log (one-off)
    GET /api/status       server counters (clients, frames sent and merged)
    GET /ws               WebSocket: a "hello" with everything kept, then
                          "update" messages with what is new, at most rate_hz per second

As a sink: ``on_state``/``on_notice`` only hand the record to a
:class:`livecoach.web.feed.CrewFeed` (O(1)). A ticker task wakes the
per-page sender tasks at ``rate_hz``; each page gets what it has not seen
yet from its own cursor. A slow page misses ticks and gets the merged
update when it is ready again (its frames are dropped, never queued), so it
never slows the loop or the other pages; a page that does not take a
message within ``send_timeout_s`` is disconnected.

It binds to 127.0.0.1 unless the ride file's ``[web] host`` says otherwise.
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
from importlib import resources
from typing import Any

from aiohttp import WSMsgType, web

from livecoach.errors import SinkError
from livecoach.pipeline.state import LiveState, Notice
from livecoach.web.feed import CrewFeed, dumps, plan_payload, ride_payload

#: Files served under /static/ with their content types.
STATIC_TYPES = {
    ".html": "text/html; charset=utf-8",
    ".js": "text/javascript; charset=utf-8",
    ".css": "text/css; charset=utf-8",
    ".svg": "image/svg+xml",
}

#: Nothing but our own origin may be loaded or contacted by the page.
CONTENT_SECURITY_POLICY = (
    "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
    "connect-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'"
)


def _static_files() -> dict[str, tuple[bytes, str]]:
    root = resources.files("livecoach.web").joinpath("static")
    out = {}
    for entry in root.iterdir():
        suffix = "." + entry.name.rsplit(".", 1)[-1] if "." in entry.name else ""
        if entry.is_file() and suffix in STATIC_TYPES:
            out[entry.name] = (entry.read_bytes(), STATIC_TYPES[suffix])
    return out


@web.middleware
async def _headers(request: web.Request, handler: Any) -> web.StreamResponse:
    resp = await handler(request)
    resp.headers.setdefault("Content-Security-Policy", CONTENT_SECURITY_POLICY)
    resp.headers.setdefault("X-Content-Type-Options", "nosniff")
    resp.headers.setdefault("Referrer-Policy", "no-referrer")
    resp.headers.setdefault("Cache-Control", "no-store")
    return resp


class _Client:
    __slots__ = ("ws", "request", "cursor", "sent", "merged", "peer")

    def __init__(self, ws: web.WebSocketResponse, request: web.Request, cursor: tuple[int, int],
                 peer: str) -> None:
        self.ws = ws
        self.request = request
        self.cursor = cursor
        self.sent = 0
        self.merged = 0
        self.peer = peer


class CrewWebSink:
    """The crew page server and sink.

    ride: the :class:`RideConfig` (header, trap marks, W' and CdA priors; its
    ``[web]`` section gives the defaults for host, port and rate_hz).
    plan: optional run-up plan with ``distance_m``, ``speed_mps``, ``power_w``
    arrays (see :mod:`livecoach.plan`); replace it during a ride with :meth:`set_plan`.
    port 0 picks a free port (read :attr:`port` or :attr:`url` after :meth:`start`).
    """

    def __init__(
        self,
        ride: Any = None,
        plan: Any = None,
        *,
        host: str | None = None,
        port: int | None = None,
        rate_hz: float | None = None,
        send_timeout_s: float = 5.0,
        feed: CrewFeed | None = None,
    ) -> None:
        cfg = ride.section("web") if ride is not None else None
        self.host = host if host is not None else (cfg.host if cfg else "127.0.0.1")
        self._port = port if port is not None else (cfg.port if cfg else 8470)
        rate = rate_hz if rate_hz is not None else (cfg.rate_hz if cfg else 4.0)
        if not rate > 0:
            raise SinkError(f"crew page rate_hz = {rate}: expected updates per second > 0")
        self.period_s = 1.0 / rate
        self.send_timeout_s = send_timeout_s
        self.ride = ride
        self.feed = feed or CrewFeed()
        self._ride_json = dumps(ride_payload(ride))
        self._plan_json = "null"
        self.plan_version = 0
        self.set_plan(plan)
        self._static = _static_files()
        self._clients: set[_Client] = set()
        self._tick = asyncio.Event()
        self._tick_count = 0
        self._runner: web.AppRunner | None = None
        self._ticker: asyncio.Task | None = None
        self._bound_port: int | None = None
        self.frames_sent = 0
        self.frames_merged = 0
        self.clients_total = 0
        self.clients_dropped = 0

    # ----------------------------------------------------------------- sink
    def on_state(self, state: LiveState) -> None:
        """Keep the state for the next update (O(1); never blocks)."""
        self.feed.add_state(state)

    def on_notice(self, notice: Notice) -> None:
        """Keep the notice for the cue log (O(1); never blocks)."""
        self.feed.add_notice(notice)

    def set_plan(self, plan: Any) -> None:
        """Serve a (new) plan; open pages fetch it again."""
        try:
            self._plan_json = dumps(plan_payload(plan))
        except (TypeError, ValueError, AttributeError) as exc:
            raise SinkError(f"crew page: the plan cannot be served: {exc}") from None
        self.plan_version += 1

    # ------------------------------------------------------------- lifecycle
    @property
    def port(self) -> int:
        return self._bound_port if self._bound_port is not None else self._port

    @property
    def url(self) -> str:
        host = "127.0.0.1" if self.host in ("0.0.0.0", "") else self.host
        if ":" in host:
            host = f"[{host}]"
        return f"http://{host}:{self.port}/"

    def make_app(self) -> web.Application:
        """The aiohttp application (also used directly by tests)."""
        app = web.Application(middlewares=[_headers])
        app.router.add_get("/", self._index)
        app.router.add_get("/favicon.ico", self._icon)
        app.router.add_get("/static/{name}", self._static_file)
        app.router.add_get("/api/plan", self._api_plan)
        app.router.add_get("/api/ride", self._api_ride)
        app.router.add_get("/api/state", self._api_state)
        app.router.add_get("/api/status", self._api_status)
        app.router.add_get("/ws", self._websocket)
        app.on_shutdown.append(self._close_clients)
        return app

    async def start(self) -> None:
        """Listen on host:port and start the update ticker. Raises :class:`SinkError`
        when the address cannot be bound (port in use, unknown host)."""
        if self._runner is not None:
            return
        runner = web.AppRunner(self.make_app(), access_log=None, handle_signals=False)
        await runner.setup()
        site = web.TCPSite(runner, self.host, self._port)
        try:
            await site.start()
        except OSError as exc:
            await runner.cleanup()
            why = "the port is in use" if exc.errno == errno.EADDRINUSE else str(exc)
            raise SinkError(
                f"crew page cannot listen on {self.host}:{self._port}: {why} "
                "(set [web] host/port in the ride file)"
            ) from None
        self._runner = runner
        server = getattr(site, "_server", None)
        sockets = getattr(server, "sockets", None) or []
        if sockets:
            self._bound_port = sockets[0].getsockname()[1]
        self.start_ticker()

    def start_ticker(self) -> None:
        """Start the task that wakes the page senders (``start`` does this)."""
        if self._ticker is None or self._ticker.done():
            self._ticker = asyncio.get_running_loop().create_task(self._tick_loop())

    async def stop(self) -> None:
        """Close every page's connection and stop listening."""
        if self._ticker is not None:
            self._ticker.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._ticker
            self._ticker = None
        if self._runner is not None:
            await self._runner.cleanup()
            self._runner = None

    def stats(self) -> dict[str, Any]:
        return {
            "clients": len(self._clients),
            "clients_total": self.clients_total,
            "clients_dropped": self.clients_dropped,
            "frames_sent": self.frames_sent,
            "frames_merged": self.frames_merged,
            "rate_hz": 1.0 / self.period_s,
            "plan_version": self.plan_version,
        }

    # ------------------------------------------------------------- the ticker
    async def _tick_loop(self) -> None:
        seen = None
        while True:
            await asyncio.sleep(self.period_s)
            mark = (self.feed.version, self.plan_version)
            if mark != seen:
                seen = mark
                self._tick_count += 1
                tick, self._tick = self._tick, asyncio.Event()
                tick.set()

    # ------------------------------------------------------------------ HTTP
    async def _index(self, request: web.Request) -> web.Response:
        return self._serve("index.html")

    async def _icon(self, request: web.Request) -> web.Response:
        return self._serve("icon.svg")

    async def _static_file(self, request: web.Request) -> web.Response:
        return self._serve(request.match_info["name"])

    def _serve(self, name: str) -> web.Response:
        item = self._static.get(name)
        if item is None:
            raise web.HTTPNotFound(text=f"no file named {name!r} on the crew page")
        body, ctype = item
        return web.Response(body=body, headers={"Content-Type": ctype})

    @staticmethod
    def _json(text: str) -> web.Response:
        return web.Response(text=text, content_type="application/json")

    async def _api_plan(self, request: web.Request) -> web.Response:
        return self._json(self._plan_json)

    async def _api_ride(self, request: web.Request) -> web.Response:
        return self._json(self._ride_json)

    async def _api_state(self, request: web.Request) -> web.Response:
        return self._json(self.feed.snapshot_json())

    async def _api_status(self, request: web.Request) -> web.Response:
        return self._json(dumps(self.stats()))

    # ------------------------------------------------------------- WebSocket
    async def _websocket(self, request: web.Request) -> web.WebSocketResponse:
        ws = web.WebSocketResponse(heartbeat=15.0, max_msg_size=4096)
        await ws.prepare(request)
        client = _Client(ws, request, self.feed.cursor, request.remote or "?")
        self._clients.add(client)
        self.clients_total += 1
        hello = self.feed.snapshot_json({"type": "hello", "plan_version": self.plan_version,
                                         "rate_hz": 1.0 / self.period_s})
        sender = asyncio.get_running_loop().create_task(self._sender(client, hello))
        try:
            async for msg in ws:  # read-only: whatever a page sends is ignored
                if msg.type == WSMsgType.ERROR:
                    break
        finally:
            sender.cancel()
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await sender
            self._clients.discard(client)
        return ws

    async def _send(self, client: _Client, text: str) -> bool:
        try:
            await asyncio.wait_for(client.ws.send_str(text), self.send_timeout_s)
        except (asyncio.TimeoutError, ConnectionError, RuntimeError):
            # A page that cannot keep up (or is gone): cut its connection at
            # once; a polite close would wait on the same stalled socket.
            self.clients_dropped += 1
            transport = client.request.transport
            if transport is not None:
                transport.abort()
            return False
        client.sent += 1
        self.frames_sent += 1
        return True

    async def _sender(self, client: _Client, hello: str) -> None:
        if not await self._send(client, hello):
            return
        cache: dict[tuple, str] = {}
        cache_mark = None
        last_tick = self._tick_count
        while not client.ws.closed:
            await self._tick.wait()
            # ticks that fired while this page's last message was going out are
            # merged into this one (dropped frames, never a queue)
            skipped = self._tick_count - last_tick - 1
            if skipped > 0:
                client.merged += skipped
                self.frames_merged += skipped
            last_tick = self._tick_count
            mark = (self.feed.version, self.plan_version)
            if mark != cache_mark:
                cache, cache_mark = {}, mark
            key = client.cursor
            text = cache.get(key)
            if text is None:
                text, _ = self.feed.delta_json(
                    client.cursor, {"type": "update", "plan_version": self.plan_version})
                cache[key] = text
            client.cursor = self.feed.cursor
            if not await self._send(client, text):
                return

    async def _close_clients(self, app: web.Application) -> None:
        for client in list(self._clients):
            with contextlib.suppress(Exception):
                await asyncio.wait_for(client.ws.close(code=1001, message=b"livecoach stopped"), 2.0)
