"""sd_notify: datagrams on a real unix socket, as systemd receives them (sd_notify(3))."""

import os
import socket

import pytest

from rotorwatch.service.notify import Notifier


@pytest.fixture
def notify_socket(tmp_path):
    path = str(tmp_path / "notify.sock")
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    sock.bind(path)
    sock.settimeout(2.0)
    yield path, sock
    sock.close()


def recv(sock):
    return sock.recv(4096).decode()


def test_ready_status_watchdog_stopping(notify_socket):
    path, sock = notify_socket
    n = Notifier(socket_path=path, watchdog_usec="2000000", watchdog_pid=str(os.getpid()))
    assert n.enabled and n.watchdog_interval_s == 2.0
    n.ready("1 updates; ef3: normal")
    assert recv(sock) == "READY=1\nSTATUS=1 updates; ef3: normal"
    n.ready("again")  # READY only once
    n.status("hello")
    assert recv(sock) == "STATUS=hello"
    n.watchdog(now=100.0)
    assert recv(sock) == "WATCHDOG=1"
    n.watchdog(now=100.1)  # rate-limited to a quarter of the interval
    n.watchdog(now=100.6)
    assert recv(sock) == "WATCHDOG=1"
    n.reloading()
    msg = recv(sock)
    assert msg.startswith("RELOADING=1\nMONOTONIC_USEC=")
    n.reloaded("ok")
    assert recv(sock) == "READY=1\nSTATUS=ok"
    n.stopping()
    assert recv(sock) == "STOPPING=1"
    n.close()


def test_abstract_socket_address():
    name = f"rotorwatch-test-{os.getpid()}"
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    sock.bind("\0" + name)
    sock.settimeout(2.0)
    try:
        n = Notifier(socket_path="@" + name, watchdog_usec="")
        n.ready()
        assert recv(sock) == "READY=1"
    finally:
        sock.close()


def test_without_systemd_everything_is_a_no_op(monkeypatch):
    monkeypatch.delenv("NOTIFY_SOCKET", raising=False)
    monkeypatch.delenv("WATCHDOG_USEC", raising=False)
    n = Notifier()
    assert not n.enabled and n.watchdog_interval_s is None
    assert n.send("READY=1") is False
    n.watchdog()


def test_watchdog_for_another_pid_is_ignored(notify_socket):
    path, _ = notify_socket
    n = Notifier(socket_path=path, watchdog_usec="1000000", watchdog_pid="1")
    assert n.watchdog_interval_s is None


def test_socket_gone_is_counted_not_raised(tmp_path):
    n = Notifier(socket_path=str(tmp_path / "missing.sock"))
    assert n.send("READY=1") is False
    assert n.failures == 1
