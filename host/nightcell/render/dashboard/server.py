"""Serve the class set's page: one HTML page, its script and style from this package, the tiles pushed to it as
server-sent events, "sync all", and — only when started with a control token — the board controls.

Owns: the HTTP side (aiohttp): routes, the checks every request passes (Host header, Origin, the page key, the control
token), the event stream. Must never: load anything from the network (every asset is a file beside this module),
put text from a board into HTML (the page's script writes labels with ``textContent``; the page's
Content-Security-Policy allows no inline script), talk to a board itself, or import a task: what it serves is the
object it is given (``tasks.dashboard.ClassSet``: ``snapshot()``, ``version``, ``sync_all()``, ``worker(port)``).

Why aiohttp: one well-kept asyncio package gives the server, streaming responses for server-sent events and static
files, with no separate server program (an ASGI framework would need one) and no template engine (the page is
static; its data arrives as JSON).

Example::

    serve(classset, host="127.0.0.1", port=0, ready=lambda url: print(url))  # classset: tasks.dashboard.ClassSet
"""

from __future__ import annotations

import asyncio
import hmac
import json
import secrets
from importlib import resources
from pathlib import Path
from typing import Any, Callable

from aiohttp import web

from ...errors import InputError, NightcellError

__all__ = ["make_app", "serve", "static_dir", "PUSH_MIN_S", "HEARTBEAT_S"]

PUSH_MIN_S = 0.2
"""Shortest time between two pushes to one page (a class of boards changes several times a second)."""
HEARTBEAT_S = 2.0
"""A page gets the tiles at least this often, so "time since last answer" and "not answering" stay current."""
_STATIC_FILES = {"dashboard.js": "text/javascript", "dashboard.css": "text/css"}
_CSP = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; connect-src 'self'; "
        "base-uri 'none'; form-action 'none'; frame-ancestors 'none'")


def static_dir() -> Path:
    """Where the page and its assets are (inside the installed package)."""
    return Path(str(resources.files("nightcell.render.dashboard") / "static"))


def _json(data: Any, status: int = 200) -> web.Response:
    return web.json_response(data, status=status, dumps=lambda d: json.dumps(d, allow_nan=False, default=str))


def make_app(classset: Any, *, control_token: str | None = None, controls: tuple[str, ...] = (),
             any_host: bool = False) -> web.Application:
    """The aiohttp application over ``classset``.

    ``control_token``: when given, the board controls (``controls``, the worker's verbs) are on, and each control
    request must carry it. ``any_host``:
    accept any Host header (the server was bound to another address with ``--host``); otherwise only the loopback
    names, so a web page elsewhere cannot reach this server by rebinding its own name to 127.0.0.1.
    """
    page_key = secrets.token_urlsafe(24)  # in the page we serve; a page of another origin cannot read it
    folder = static_dir()
    page = (folder / "index.html").read_text(encoding="utf-8").replace("{{page_key}}", page_key)
    page = page.replace("{{control}}", "on" if control_token else "off")

    @web.middleware
    async def guard(request: web.Request, handler: Callable[..., Any]) -> web.StreamResponse:
        host = request.host.rsplit(":", 1)[0] if not request.host.startswith("[") else request.host.split("]")[0] + "]"
        if not any_host and host not in ("127.0.0.1", "localhost", "[::1]"):
            return web.Response(status=421, text="this server answers only to 127.0.0.1 and localhost\n")
        if request.method != "GET":
            origin = request.headers.get("Origin")
            if origin is not None and origin != f"{request.scheme}://{request.host}":
                return web.Response(status=403, text="requests from another site are refused\n")
            if not hmac.compare_digest(request.headers.get("X-Page-Key", ""), page_key):
                return web.Response(status=403, text="reload the page: its key is not this server's\n")
        response = await handler(request)
        if response.prepared:  # the event stream set its own headers before it started
            return response
        response.headers["Content-Security-Policy"] = _CSP
        response.headers["X-Content-Type-Options"] = "nosniff"
        response.headers["Referrer-Policy"] = "no-referrer"
        response.headers["Cache-Control"] = "no-store"
        return response

    async def index(request: web.Request) -> web.Response:
        return web.Response(text=page, content_type="text/html", charset="utf-8")

    async def asset(request: web.Request) -> web.Response:
        name = request.match_info["name"]
        if name not in _STATIC_FILES:  # a fixed list: no path from the request ever reaches the file system
            raise web.HTTPNotFound()
        return web.Response(body=(folder / name).read_bytes(), content_type=_STATIC_FILES[name], charset="utf-8")

    async def state(request: web.Request) -> web.Response:
        return _json(classset.snapshot())

    async def events(request: web.Request) -> web.StreamResponse:
        if not hmac.compare_digest(request.query.get("key", ""), page_key):
            return web.Response(status=403, text="reload the page: its key is not this server's\n")
        response = web.StreamResponse(headers={"Content-Type": "text/event-stream", "Cache-Control": "no-store",
                                               "Content-Security-Policy": _CSP, "X-Content-Type-Options": "nosniff"})
        await response.prepare(request)
        loop = asyncio.get_running_loop()
        sent_version = -1
        sent_at = 0.0
        try:
            while True:
                now = loop.time()
                if classset.version != sent_version or now - sent_at >= HEARTBEAT_S:
                    sent_version = classset.version
                    data = json.dumps(classset.snapshot(), allow_nan=False, default=str)
                    await response.write(f"event: tiles\ndata: {data}\n\n".encode("utf-8"))
                    sent_at = now
                    await asyncio.sleep(PUSH_MIN_S)
                else:
                    await asyncio.sleep(0.05)
        except (ConnectionResetError, asyncio.CancelledError):
            pass
        return response

    async def sync_all(request: web.Request) -> web.Response:
        if classset.sync_running:
            return _json({"error": "a sync of every board is already running"}, 409)
        loop = asyncio.get_running_loop()

        def run() -> None:
            try:
                classset.sync_all()
            except NightcellError:
                pass  # each board's outcome is in the sync state the page shows

        loop.run_in_executor(None, run)
        return _json({"started": True, "db": str(classset.db)}, 202)

    async def control(request: web.Request) -> web.Response:
        if control_token is None:
            return _json({"error": "controls are off: start the server with --control"}, 403)
        if not hmac.compare_digest(request.headers.get("X-Control-Token", ""), control_token):
            return _json({"error": "wrong control token: use the one printed when the server started"}, 403)
        try:
            body = await request.json()
        except ValueError:
            return _json({"error": "the request is not JSON"}, 400)
        if not isinstance(body, dict) or body.get("action") not in controls or not isinstance(body.get("port"), str):
            return _json({"error": f"give port and action ({', '.join(controls)})"}, 400)
        label = body.get("label", "")
        if not isinstance(label, str) or len(label.encode("utf-8")) > 32:
            return _json({"error": "a label is text of at most 32 bytes"}, 400)
        try:
            worker = classset.worker(body["port"])
        except NightcellError as exc:
            return _json({"error": str(exc)}, 404)
        loop = asyncio.get_running_loop()
        reply = await loop.run_in_executor(None, lambda: worker.control(body["action"], label=label))
        return _json(reply, 200 if "error" not in reply else 502)

    app = web.Application(middlewares=[guard], client_max_size=4096)
    app.router.add_get("/", index)
    app.router.add_get("/assets/{name}", asset)
    app.router.add_get("/api/state", state)
    app.router.add_get("/api/events", events)
    app.router.add_post("/api/sync", sync_all)
    app.router.add_post("/api/control", control)
    return app


def serve(classset: Any, *, host: str = "127.0.0.1", port: int = 0, control_token: str | None = None,
          controls: tuple[str, ...] = (), ready: Callable[[str], None] = lambda url: None,
          any_host: bool = False) -> None:
    """Serve until Ctrl-C (or the process is ended); ``ready(url)`` once the socket is listening."""
    async def main() -> None:
        app = make_app(classset, control_token=control_token, controls=controls, any_host=any_host)
        runner = web.AppRunner(app, handle_signals=False, access_log=None, shutdown_timeout=1.0)
        await runner.setup()
        site = web.TCPSite(runner, host, port)
        try:
            await site.start()
        except OSError as exc:
            await runner.cleanup()
            raise InputError(f"cannot listen on {host}:{port} ({exc.strerror or exc}): is another page running "
                             "there? give another --http-port (0 picks a free one)") from exc
        sock = site._server.sockets[0] if site._server and site._server.sockets else None  # type: ignore[union-attr]
        bound = sock.getsockname()[1] if sock is not None else port
        shown = host if ":" not in host else f"[{host}]"
        ready(f"http://{shown}:{bound}/")
        try:
            while True:
                await asyncio.sleep(3600)
        finally:
            await runner.cleanup()

    try:
        asyncio.run(main())
    except KeyboardInterrupt:
        pass
