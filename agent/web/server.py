"""The built-in status page: a small read-only HTTP server over a :class:`StatusBoard`.

Routes (all GET unless noted; JSON is UTF-8, numbers rounded to 4-6 significant digits):

``/``                              the page (``static/index.html``)
``/static/<file>``                 the page's script and style sheet (no CDN, no build step)
``/api/overview``                  machines, points, states with reasons, speed, overall velocity + zone
``/api/point/<machine>/<point>``   latest spectra (acceleration, velocity, envelope), band regions,
                                   defect-frequency markers, waveform, values with levels
``/api/trend/<machine>/<point>``   the last updates' band values with warning and alarm levels
``/healthz``                       200 when every machine published recently, else 503 (JSON reason)
``POST /api/acknowledge/<machine>`` and ``POST /api/snapshot/<machine>``
                                   only when a token file is configured *and* the daemon injected the
                                   callback; the request must carry ``Authorization: Bearer <token>``
                                   (compared with :func:`hmac.compare_digest`). Body (optional JSON):
                                   ``{"point": "...", "value": "..."}``.

The server runs :class:`http.server.ThreadingHTTPServer` in one background thread; ``start()`` binds
(port 0 picks a free port, see :attr:`StatusServer.port`) and ``stop()`` returns within its timeout.
Bound to a loopback address (the default), it answers only requests whose ``Host`` names a loopback
host, so a web page elsewhere cannot reach it through DNS rebinding.
"""

from __future__ import annotations

import hmac
import ipaddress
import json
import logging
import socket
import sys
import threading
from collections.abc import Callable
from http import HTTPStatus
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from urllib.parse import unquote, urlsplit

from ..errors import ConfigError, RotorwatchError
from .board import StatusBoard

log = logging.getLogger(__name__)

STATIC_DIR = Path(__file__).resolve().parent / "static"
CONTENT_TYPES = {
    ".html": "text/html; charset=utf-8",
    ".js": "text/javascript; charset=utf-8",
    ".css": "text/css; charset=utf-8",
    ".png": "image/png",
    ".svg": "image/svg+xml",
}
MAX_BODY_BYTES = 4096
LOOPBACK_NAMES = {"localhost", "localhost.localdomain", "ip6-localhost"}
#: Sent with every reply (the status page's and the metrics endpoint's).
SECURITY_HEADERS = {
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Content-Security-Policy": "default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'; "
                               "connect-src 'self'; frame-ancestors 'none'",
}

#: Acknowledge callback: (machine_id, point_id or None, value name or None) -> a short message.
AckCallback = Callable[[str, "str | None", "str | None"], str]
#: Snapshot callback: (machine_id, point_id or None) -> a short message (e.g. the snapshot's path).
SnapshotCallback = Callable[[str, "str | None"], str]


def read_token(path: str | Path) -> str:
    """The shared secret in ``path`` (surrounding whitespace removed); one-line error when unusable."""
    try:
        token = Path(path).read_text(encoding="utf-8").strip()
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError([f"status_page.token_file = {str(path)!r}: cannot read it: {getattr(exc, 'strerror', None) or exc}"]) from exc
    if len(token) < 16:
        raise ConfigError([f"status_page.token_file = {str(path)!r}: the token must be at least 16 characters "
                           f"(got {len(token)}); e.g. python3 -c 'import secrets; print(secrets.token_urlsafe(32))'"])
    return token


def is_loopback(host: str) -> bool:
    if host in LOOPBACK_NAMES:
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def host_of(header: str) -> str:
    header = header.strip().lower()
    if header.startswith("["):
        return header[1:header.find("]")] if "]" in header else header
    return header.rsplit(":", 1)[0] if header.count(":") == 1 else header


class _Server(ThreadingHTTPServer):
    """ThreadingHTTPServer that remembers its open connections, so stopping also ends keep-alive ones
    (a browser polling every few seconds would otherwise go on talking to a stopped server)."""

    daemon_threads = True

    def __init__(self, *args, **kwargs) -> None:
        self._conns: set[socket.socket] = set()
        self._conns_lock = threading.Lock()
        super().__init__(*args, **kwargs)

    def get_request(self):
        conn, addr = super().get_request()
        with self._conns_lock:
            self._conns.add(conn)
        return conn, addr

    def shutdown_request(self, request) -> None:
        with self._conns_lock:
            self._conns.discard(request)
        super().shutdown_request(request)

    def handle_error(self, request, client_address) -> None:
        """A client that went away (or a connection ended by stop()) is routine: log it, never print it."""
        exc = sys.exc_info()[1]
        if isinstance(exc, (ConnectionError, TimeoutError, OSError)):
            log.debug("status page: connection from %s ended: %s", client_address[0], exc)
        else:
            log.exception("status page: error handling a request from %s", client_address[0])

    def close_connections(self) -> None:
        with self._conns_lock:
            conns, self._conns = list(self._conns), set()
        for conn in conns:
            try:
                conn.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass


class _Server6(_Server):
    address_family = socket.AF_INET6


class StatusServer:
    """Serve ``board`` on ``bind``:``port`` in a background thread."""

    def __init__(
        self,
        board: StatusBoard,
        bind: str = "127.0.0.1",
        port: int = 8717,
        *,
        token_file: str | Path | None = None,
        on_acknowledge: AckCallback | None = None,
        on_snapshot: SnapshotCallback | None = None,
        poll_interval_s: float = 3.0,
    ) -> None:
        self.board = board
        self.bind = bind
        self.requested_port = int(port)
        self.poll_interval_s = float(poll_interval_s)
        self._token = read_token(token_file) if token_file is not None else None
        self._actions: dict[str, Callable] = {}
        if self._token is not None:
            if on_acknowledge is not None:
                self._actions["acknowledge"] = on_acknowledge
            if on_snapshot is not None:
                self._actions["snapshot"] = on_snapshot
        self._static = {p.name: p for p in STATIC_DIR.iterdir() if p.is_file() and p.suffix in CONTENT_TYPES}
        self._httpd: _Server | None = None
        self._thread: threading.Thread | None = None

    @property
    def actions(self) -> list[str]:
        return sorted(self._actions)

    @property
    def port(self) -> int:
        """The bound port (the ephemeral one when started with port 0)."""
        if self._httpd is None:
            raise RuntimeError("StatusServer is not started")
        return self._httpd.server_address[1]

    @property
    def url(self) -> str:
        host = self.bind if ":" not in self.bind else f"[{self.bind}]"
        return f"http://{host}:{self.port}/"

    def start(self) -> StatusServer:
        if self._httpd is not None:
            return self
        handler = type("BoundStatusHandler", (_Handler,), {"app": self})
        server_cls = _Server6 if ":" in self.bind else _Server
        try:
            httpd = server_cls((self.bind, self.requested_port), handler)
        except OSError as exc:
            raise RotorwatchError(
                f"status_page: cannot listen on {self.bind}:{self.requested_port}: {exc.strerror or exc}"
            ) from exc
        self._loopback_only = is_loopback(self.bind)
        self._httpd = httpd
        self._thread = threading.Thread(target=httpd.serve_forever, kwargs={"poll_interval": 0.2},
                                        name="status-page", daemon=True)
        self._thread.start()
        log.info("status page listening url=%s actions=%s", self.url, ",".join(self.actions) or "none")
        return self

    def stop(self, timeout_s: float = 5.0) -> None:
        httpd, thread = self._httpd, self._thread
        self._httpd = self._thread = None
        if httpd is None:
            return
        done = threading.Event()

        def _shutdown() -> None:
            httpd.shutdown()
            done.set()

        threading.Thread(target=_shutdown, daemon=True).start()
        if not done.wait(timeout_s):
            log.warning("status page did not stop within %.1f s", timeout_s)
        httpd.close_connections()
        httpd.server_close()
        if thread is not None:
            thread.join(timeout=max(0.1, timeout_s))

    def __enter__(self) -> StatusServer:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()

    # --------------------------------------------------------------------------- request logic
    def authorised(self, header: str | None) -> bool:
        if self._token is None or not header or not header.startswith("Bearer "):
            return False
        return hmac.compare_digest(header[len("Bearer "):].strip().encode(), self._token.encode())


class _Handler(BaseHTTPRequestHandler):
    app: StatusServer  # set on the bound subclass
    server_version = "rotorwatch-status"
    sys_version = ""
    protocol_version = "HTTP/1.1"
    timeout = 10  # seconds a client may take per request before its thread gives up

    def log_message(self, fmt: str, *args) -> None:  # route http.server's lines to logging
        log.debug("status page %s " + fmt, self.address_string(), *args)

    # -- replies --------------------------------------------------------------------------------
    def _send(self, status: int, body: bytes, content_type: str, extra: dict | None = None) -> None:
        self.send_response(status)
        self.send_header("Content-Type", content_type)
        self.send_header("Content-Length", str(len(body)))
        for k, v in {**SECURITY_HEADERS, **(extra or {})}.items():
            self.send_header(k, v)
        self.end_headers()
        if self.command != "HEAD":
            self.wfile.write(body)

    def _json(self, status: int, payload, etag: str | None = None) -> None:
        extra = {"Cache-Control": "no-cache"}
        if etag is not None:
            extra["ETag"] = etag
        body = json.dumps(payload, separators=(",", ":"), allow_nan=False).encode()
        self._send(status, body, "application/json", extra)

    def _error(self, status: int, message: str) -> None:
        self._json(status, {"error": message})

    def _host_ok(self) -> bool:
        if not getattr(self.app, "_loopback_only", True):
            return True
        host = host_of(self.headers.get("Host", ""))
        if is_loopback(host):
            return True
        self._error(HTTPStatus.MISDIRECTED_REQUEST, f"host {host!r} not served: this page answers on loopback only")
        return False

    # -- GET --------------------------------------------------------------------------------------
    def do_HEAD(self) -> None:
        self.do_GET()

    def do_GET(self) -> None:
        if not self._host_ok():
            return
        path = urlsplit(self.path).path
        parts = [unquote(p) for p in path.split("/") if p]
        board = self.app.board
        try:
            if not parts:
                self._static_file("index.html")
            elif parts[0] == "static" and len(parts) == 2:
                self._static_file(parts[1])
            elif parts == ["healthz"]:
                ok, reason = board.health()
                self._json(HTTPStatus.OK if ok else HTTPStatus.SERVICE_UNAVAILABLE,
                           {"status": "ok" if ok else "degraded", "reason": reason})
            elif parts == ["api", "overview"]:
                view = board.overview()
                view["actions"] = self.app.actions
                view["poll_interval_s"] = self.app.poll_interval_s
                self._json(HTTPStatus.OK, view)
            elif len(parts) == 4 and parts[:2] in (["api", "point"], ["api", "trend"]):
                self._machine_view(parts[1], parts[2], parts[3])
            else:
                self._error(HTTPStatus.NOT_FOUND, f"no such page: {path!r}")
        except Exception:  # a bug in a view must not take the server down; the daemon carries on
            log.exception("status page: error serving %r", path)
            self._error(HTTPStatus.INTERNAL_SERVER_ERROR, "internal error (see the daemon log)")

    def _machine_view(self, kind: str, machine_id: str, point_id: str) -> None:
        board = self.app.board
        etag = f'"{kind}-{board.revision(machine_id)}"'
        if etag != '"' + kind + '--1"' and self.headers.get("If-None-Match") == etag:
            self.send_response(HTTPStatus.NOT_MODIFIED)
            self.send_header("ETag", etag)
            self.send_header("Content-Length", "0")
            self.end_headers()
            return
        try:
            view = board.point(machine_id, point_id) if kind == "point" else board.trend(machine_id, point_id)
        except KeyError as exc:
            self._error(HTTPStatus.NOT_FOUND, str(exc.args[0]) if exc.args else "not found")
            return
        # ETag from the revision the view was built from (it may be newer than the one checked above)
        self._json(HTTPStatus.OK, view, etag=f'"{kind}-{view["revision"]}"')

    def _static_file(self, name: str) -> None:
        path = self.app._static.get(name)
        if path is None:
            self._error(HTTPStatus.NOT_FOUND, f"no such file: {name!r}")
            return
        self._send(HTTPStatus.OK, path.read_bytes(), CONTENT_TYPES[path.suffix], {"Cache-Control": "no-cache"})

    # -- POST -------------------------------------------------------------------------------------
    def do_POST(self) -> None:
        if not self._host_ok():
            return
        parts = [unquote(p) for p in urlsplit(self.path).path.split("/") if p]
        body = self._read_body()
        if body is None:
            return
        if len(parts) != 3 or parts[0] != "api" or parts[1] not in ("acknowledge", "snapshot"):
            self._error(HTTPStatus.NOT_FOUND, f"no such action: {self.path!r}")
            return
        action, machine_id = parts[1], parts[2]
        callback = self.app._actions.get(action)
        if callback is None:
            self._error(HTTPStatus.FORBIDDEN,
                        f"{action} is off: the daemon has no status_page.token_file configured for it")
            return
        if not self.app.authorised(self.headers.get("Authorization")):
            self._send(HTTPStatus.UNAUTHORIZED, b'{"error":"missing or wrong token"}', "application/json",
                       {"WWW-Authenticate": 'Bearer realm="rotorwatch"'})
            return
        point = body.get("point")
        value = body.get("value")
        if not all(x is None or isinstance(x, str) for x in (point, value)):
            self._error(HTTPStatus.BAD_REQUEST, "body fields point and value must be strings")
            return
        try:
            if action == "acknowledge":
                detail = callback(machine_id, point, value)
            else:
                detail = callback(machine_id, point)
        except KeyError as exc:
            self._error(HTTPStatus.NOT_FOUND, f"unknown machine or point: {exc.args[0] if exc.args else machine_id}")
            return
        except RotorwatchError as exc:
            self._error(HTTPStatus.BAD_REQUEST, str(exc))
            return
        except Exception:
            log.exception("status page: %s callback failed for %r", action, machine_id)
            self._error(HTTPStatus.INTERNAL_SERVER_ERROR, f"{action} failed (see the daemon log)")
            return
        log.info("status page: %s machine=%s point=%s value=%s", action, machine_id, point, value)
        self._json(HTTPStatus.OK, {"ok": True, "action": action, "machine": machine_id, "detail": str(detail or "")})

    def _read_body(self) -> dict | None:
        try:
            length = int(self.headers.get("Content-Length", "0"))
        except ValueError:
            self._error(HTTPStatus.BAD_REQUEST, "Content-Length is not a number")
            return None
        if length < 0 or length > MAX_BODY_BYTES:
            self._error(HTTPStatus.REQUEST_ENTITY_TOO_LARGE, f"body of {length} bytes: at most {MAX_BODY_BYTES}")
            return None
        raw = self.rfile.read(length) if length else b""
        if not raw.strip():
            return {}
        try:
            body = json.loads(raw)
        except (ValueError, UnicodeDecodeError) as exc:
            self._error(HTTPStatus.BAD_REQUEST, f"body is not JSON: {exc}")
            return None
        if not isinstance(body, dict):
            self._error(HTTPStatus.BAD_REQUEST, "body must be a JSON object")
            return None
        return body

    def do_PUT(self) -> None:
        self._error(HTTPStatus.METHOD_NOT_ALLOWED, "read-only: GET (and POST for actions) only")

    do_DELETE = do_PATCH = do_PUT
