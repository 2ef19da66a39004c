"""The metrics endpoint: ``/metrics`` (prometheus_client's WSGI app) and ``/healthz`` on one server.

It runs whenever ``[metrics]`` is configured, with or without the status page, so a health check
never depends on the page. ``/healthz`` answers 200 ``{"status": "ok"}`` while every machine updates,
else 503 with the reason (the rule of :mod:`rotorwatch.web.health`, the status page's too). Every
other path serves the exposition, as prometheus_client's own server does.

Replies carry the status page's security headers; bound to a loopback address, the server answers
only requests whose ``Host`` names a loopback host (no DNS rebinding from a browser elsewhere). With
``tls_cert_file`` and ``tls_key_file`` it speaks HTTPS. One background thread serves; ``stop()`` is
bounded.
"""

from __future__ import annotations

import json
import logging
import socket
import ssl
import threading
from collections.abc import Callable, Iterable
from pathlib import Path
from socketserver import ThreadingMixIn
from typing import Any
from wsgiref.simple_server import WSGIRequestHandler, WSGIServer, make_server

from prometheus_client import CollectorRegistry, make_wsgi_app

from ...errors import RotorwatchError
from ...logs import fields
from ...settings.service import MetricsSettings
from ...web.server import SECURITY_HEADERS, host_of, is_loopback

log = logging.getLogger(__name__)

#: () -> (healthy, reason)
Health = Callable[[], "tuple[bool, str]"]
StartResponse = Callable[..., Any]


class _Server(ThreadingMixIn, WSGIServer):
    daemon_threads = True


class _Server6(_Server):
    address_family = socket.AF_INET6


class _QuietHandler(WSGIRequestHandler):
    def log_message(self, format: str, *args: Any) -> None:  # noqa: A002 - the base class's name
        log.debug("metrics endpoint %s " + format, self.address_string(), *args)


def metrics_app(registry: CollectorRegistry, health: Health, loopback_only: bool) -> Callable:
    """The WSGI app: Host check, ``/healthz``, else the exposition; security headers on every reply."""
    exposition = make_wsgi_app(registry)

    def app(environ: dict[str, Any], start_response: StartResponse) -> Iterable[bytes]:
        def respond(status: str, headers: list[tuple[str, str]], exc_info: Any = None) -> Any:
            return start_response(status, headers + list(SECURITY_HEADERS.items()), exc_info)

        host = host_of(environ.get("HTTP_HOST", ""))
        if loopback_only and not is_loopback(host):
            return _json(respond, "421 Misdirected Request",
                         {"error": f"host {host!r} not served: this endpoint answers on loopback only"})
        if environ.get("PATH_INFO", "") == "/healthz":
            ok, reason = health()
            return _json(respond, "200 OK" if ok else "503 Service Unavailable",
                         {"status": "ok" if ok else "degraded", "reason": reason})
        return exposition(environ, respond)

    return app


def _json(respond: StartResponse, status: str, payload: dict[str, Any]) -> list[bytes]:
    body = json.dumps(payload, separators=(",", ":")).encode()
    respond(status, [("Content-Type", "application/json"), ("Content-Length", str(len(body))),
                     ("Cache-Control", "no-cache")])
    return [body]


class MetricsServer:
    """Serve ``registry`` and ``health`` on ``settings.bind``:``settings.port`` (0 picks a free port)."""

    def __init__(self, settings: MetricsSettings, registry: CollectorRegistry, base_dir: Path,
                 health: Health = lambda: (True, "ok")):
        self.settings = settings
        self.registry = registry
        self.base_dir = base_dir
        self.health = health
        self._server: _Server | None = None
        self._thread: threading.Thread | None = None
        self.port: int | None = None

    def _path(self, name: str | None) -> str | None:
        if name is None:
            return None
        p = Path(name)
        return str(p if p.is_absolute() else self.base_dir / p)

    def start(self) -> int:
        s = self.settings
        cert, key = self._path(s.tls_cert_file), self._path(s.tls_key_file)
        app = metrics_app(self.registry, self.health, is_loopback(s.bind))
        try:
            server = make_server(s.bind, s.port, app, _Server6 if ":" in s.bind else _Server, _QuietHandler)
            if cert:
                ctx = ssl.create_default_context(ssl.Purpose.CLIENT_AUTH)
                try:
                    ctx.load_cert_chain(cert, key)
                except (OSError, ssl.SSLError):
                    server.server_close()
                    raise
                server.socket = ctx.wrap_socket(server.socket, server_side=True)
        except (OSError, ssl.SSLError) as e:
            what = f"TLS cert {cert} / key {key}" if cert else f"{s.bind}:{s.port}"
            raise RotorwatchError(f"metrics.bind/port: cannot serve /metrics on {s.bind}:{s.port} ({what}): "
                                  f"{getattr(e, 'strerror', None) or e}") from None
        self._server = server
        self._thread = threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.2},
                                        name="rotorwatch-metrics", daemon=True)
        self._thread.start()
        self.port = int(server.server_address[1])
        log.info("metrics endpoint listening", extra=fields(addr=s.bind, port=self.port,
                                                           scheme="https" if cert else "http"))
        return self.port

    def stop(self) -> None:
        if self._server is not None:
            self._server.shutdown()
            self._server.server_close()
            if self._thread is not None:
                self._thread.join(timeout=5.0)
            self._server = None
