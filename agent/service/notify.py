"""The systemd notification protocol (sd_notify(3)), small enough to read in one go.

systemd passes ``$NOTIFY_SOCKET``: a unix datagram socket path, or an abstract one starting with ``@``.
Each notification is one datagram of ``KEY=VALUE`` lines. The daemon sends ``READY=1`` after its
first good update, ``WATCHDOG=1`` from the analysis loop (at least every half of ``$WATCHDOG_USEC``),
``STATUS=...`` lines a person sees in ``systemctl status``, ``RELOADING=1`` and ``STOPPING=1``.
Without ``$NOTIFY_SOCKET`` (not run by systemd) every call does nothing.
"""

from __future__ import annotations

import logging
import os
import socket
import time

log = logging.getLogger(__name__)


class Notifier:
    def __init__(self, socket_path: str | None = None, watchdog_usec: str | None = None,
                 watchdog_pid: str | None = None):
        if socket_path is None:
            socket_path = os.environ.get("NOTIFY_SOCKET")
        self._address: str | bytes | None = None
        if socket_path:
            self._address = ("\0" + socket_path[1:]) if socket_path.startswith("@") else socket_path
        self.watchdog_interval_s: float | None = None
        usec = watchdog_usec if watchdog_usec is not None else os.environ.get("WATCHDOG_USEC")
        pid = watchdog_pid if watchdog_pid is not None else os.environ.get("WATCHDOG_PID")
        if usec and (not pid or pid == str(os.getpid())):
            try:
                value = int(usec)
            except ValueError:
                value = 0
            if value > 0:
                self.watchdog_interval_s = value / 1e6
        self._sock: socket.socket | None = None
        self._last_watchdog = 0.0
        self.ready_sent = False
        self.failures = 0

    @property
    def enabled(self) -> bool:
        return self._address is not None

    def send(self, *lines: str) -> bool:
        """Send one datagram; never raises (a notification failure must not stop monitoring)."""
        if self._address is None:
            return False
        try:
            if self._sock is None:
                self._sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM | socket.SOCK_CLOEXEC)
            self._sock.sendto("\n".join(lines).encode("utf-8"), self._address)
            return True
        except OSError as e:
            self.failures += 1
            if self.failures == 1:
                log.warning("cannot notify systemd: %s", e.strerror or e)
            return False

    def ready(self, status: str | None = None) -> None:
        if not self.ready_sent:
            self.ready_sent = True
            self.send("READY=1", *([f"STATUS={status}"] if status else []))

    def status(self, text: str) -> None:
        self.send(f"STATUS={text}")

    def watchdog(self, now: float | None = None) -> None:
        """Ping the watchdog, at most four times per watchdog interval (cheap to call every loop)."""
        if self.watchdog_interval_s is None:
            return
        now = time.monotonic() if now is None else now
        if now - self._last_watchdog >= self.watchdog_interval_s / 4.0:
            self._last_watchdog = now
            self.send("WATCHDOG=1")

    def reloading(self) -> None:
        # MONOTONIC_USEC lets systemd's Type=notify-reload (v253+) match the reload; older ones ignore it.
        self.send("RELOADING=1", f"MONOTONIC_USEC={time.clock_gettime_ns(time.CLOCK_MONOTONIC) // 1000}")

    def reloaded(self, status: str | None = None) -> None:
        """End a reload: systemd expects READY=1 again after RELOADING=1."""
        self.send("READY=1", *([f"STATUS={status}"] if status else []))

    def stopping(self) -> None:
        self.send("STOPPING=1")

    def close(self) -> None:
        if self._sock is not None:
            self._sock.close()
            self._sock = None
