"""StatusServer routes over a real socket (127.0.0.1, port 0): pages, JSON, health, actions, refusals."""

from __future__ import annotations

import http.client
import json
import socket

import pytest

from rotorwatch.errors import ConfigError, RotorwatchError
from rotorwatch.web.board import StatusBoard
from rotorwatch.web.server import StatusServer

from . import helpers

TOKEN = "s3cret-token-for-tests-0123456789"


@pytest.fixture()
def board():
    config = helpers.demo_config()
    b = StatusBoard(config)
    update, raw = helpers.machine_update(config, 1000.0, fault=0.8)
    b.publish(update, raw)
    return b


@pytest.fixture()
def server(board):
    srv = StatusServer(board, "127.0.0.1", 0).start()
    yield srv
    srv.stop()


def request(srv: StatusServer, method: str, path: str, body: bytes | None = None, headers: dict | None = None):
    conn = http.client.HTTPConnection("127.0.0.1", srv.port, timeout=10)
    try:
        conn.request(method, path, body=body, headers=headers or {})
        resp = conn.getresponse()
        return resp.status, dict(resp.getheaders()), resp.read()
    finally:
        conn.close()


def get_json(srv, path, headers=None):
    status, hdrs, body = request(srv, "GET", path, headers=headers)
    return status, hdrs, (json.loads(body) if body else None)


def test_port_zero_gives_an_ephemeral_loopback_port(server):
    assert server.port > 0
    assert server.url == f"http://127.0.0.1:{server.port}/"


def test_index_and_static_files(server):
    status, hdrs, body = request(server, "GET", "/")
    assert status == 200 and hdrs["Content-Type"].startswith("text/html")
    assert b"/static/app.js" in body and b"/static/style.css" in body
    assert "default-src 'self'" in hdrs["Content-Security-Policy"]
    for name, ctype in (("app.js", "text/javascript"), ("style.css", "text/css"), ("favicon.svg", "image/svg+xml")):
        status, hdrs, body = request(server, "GET", f"/static/{name}")
        assert status == 200 and hdrs["Content-Type"].startswith(ctype) and len(body) > 100
    # nothing outside the static folder, however the path is spelled
    for path in ("/static/../server.py", "/static/%2e%2e%2fserver.py", "/static/board.py", "/static/"):
        assert request(server, "GET", path)[0] == 404


def test_the_page_uses_no_outside_resources(server):
    for path in ("/", "/static/app.js", "/static/style.css"):
        body = request(server, "GET", path)[2].decode()
        assert "http://" not in body and "https://" not in body, path


def test_api_overview_point_and_trend(server):
    status, hdrs, ov = get_json(server, "/api/overview")
    assert status == 200 and hdrs["Content-Type"] == "application/json"
    assert ov["machines"][0]["state"] == "alarm" and ov["actions"] == []
    status, _, pv = get_json(server, "/api/point/ef3/de-h")
    assert status == 200 and pv["point"] == "de-h" and pv["spectra"]["envelope"]["unit"] == "m/s^2"
    status, _, tr = get_json(server, "/api/trend/ef3/nde-h")
    assert status == 200 and tr["length"] == 1


def test_unknown_paths_and_points_are_404_json(server):
    for path in ("/api/point/ef3/nope", "/api/trend/nope/de-h", "/api/nothing", "/metrics"):
        status, hdrs, body = get_json(server, path)
        assert status == 404 and "error" in body, path


def test_etag_lets_the_browser_skip_unchanged_spectra(server, board):
    status, hdrs, _ = request(server, "GET", "/api/point/ef3/de-h")
    etag = hdrs["ETag"]
    assert request(server, "GET", "/api/point/ef3/de-h", headers={"If-None-Match": etag})[0] == 304
    update, raw = helpers.machine_update(board._config, 1060.0, fault=0.9)
    board.publish(update, raw)
    status, hdrs2, _ = request(server, "GET", "/api/point/ef3/de-h", headers={"If-None-Match": etag})
    assert status == 200 and hdrs2["ETag"] != etag


def test_healthz_follows_the_board():
    config = helpers.demo_config()
    board = StatusBoard(config)
    with StatusServer(board, "127.0.0.1", 0) as srv:
        status, _, body = get_json(srv, "/healthz")
        assert status == 503 and body["reason"] == "waiting for the first update of ef3"
        board.publish(helpers.machine_update(config, 1000.0, 0.0)[0])
        status, _, body = get_json(srv, "/healthz")
        assert status == 200 and body["status"] == "ok"


def test_foreign_host_header_is_refused_on_loopback(server):
    # DNS rebinding: a page on evil.example resolving to 127.0.0.1 must not read the API
    status, _, body = get_json(server, "/api/overview", headers={"Host": "evil.example:8717"})
    assert status == 421 and "loopback" in body["error"]
    for host in ("localhost:8717", "127.0.0.1", "[::1]:8717"):
        assert get_json(server, "/api/overview", headers={"Host": host})[0] == 200, host


def test_read_only_without_token(server):
    status, _, body = get_json(server, "/healthz")
    assert status == 200
    status, _, raw = request(server, "POST", "/api/acknowledge/ef3", b"{}", {"Content-Type": "application/json"})
    assert status == 403 and b"token_file" in raw
    assert request(server, "PUT", "/api/overview", b"")[0] == 405


@pytest.fixture()
def token_file(tmp_path):
    path = tmp_path / "status-token"
    path.write_text(TOKEN + "\n")
    return path


def test_actions_need_the_token(board, token_file):
    calls = []

    def ack(machine, point, value):
        if machine != "ef3":
            raise KeyError(machine)
        calls.append(("ack", machine, point, value))
        return "acknowledged 1 latched value"

    def snap(machine, point):
        calls.append(("snap", machine, point))
        return "var/rotorwatch/snapshots/ef3-1000.npz"

    with StatusServer(board, "127.0.0.1", 0, token_file=token_file, on_acknowledge=ack, on_snapshot=snap) as srv:
        assert get_json(srv, "/api/overview")[2]["actions"] == ["acknowledge", "snapshot"]
        body = json.dumps({"point": "de-h", "value": "de-outer-race"}).encode()
        status, hdrs, _ = request(srv, "POST", "/api/acknowledge/ef3", body)
        assert status == 401 and hdrs["WWW-Authenticate"].startswith("Bearer")
        assert request(srv, "POST", "/api/acknowledge/ef3", body, {"Authorization": "Bearer wrong"})[0] == 401
        assert request(srv, "POST", "/api/acknowledge/ef3", body, {"Authorization": TOKEN})[0] == 401
        assert calls == []
        auth = {"Authorization": f"Bearer {TOKEN}"}
        status, _, raw = request(srv, "POST", "/api/acknowledge/ef3", body, auth)
        assert status == 200 and json.loads(raw)["detail"] == "acknowledged 1 latched value"
        status, _, raw = request(srv, "POST", "/api/snapshot/ef3", b"", auth)
        assert status == 200 and json.loads(raw)["detail"].endswith(".npz")
        assert calls == [("ack", "ef3", "de-h", "de-outer-race"), ("snap", "ef3", None)]
        # bad bodies and unknown machines: clear answers, no callback run
        assert request(srv, "POST", "/api/acknowledge/ef3", b"{not json", auth)[0] == 400
        assert request(srv, "POST", "/api/acknowledge/ef3", b'["x"]', auth)[0] == 400
        assert request(srv, "POST", "/api/acknowledge/ef3", b'{"point": 3}', auth)[0] == 400
        assert request(srv, "POST", "/api/acknowledge/ef3", b"x" * 5000, auth)[0] == 413
        assert request(srv, "POST", "/api/acknowledge/zz", b"{}", auth)[0] == 404
        assert request(srv, "POST", "/api/reboot/ef3", b"{}", auth)[0] == 404
        assert len(calls) == 2


def test_token_configured_but_no_callback_keeps_the_action_off(board, token_file):
    with StatusServer(board, "127.0.0.1", 0, token_file=token_file) as srv:
        status, _, _ = request(srv, "POST", "/api/snapshot/ef3", b"{}", {"Authorization": f"Bearer {TOKEN}"})
        assert status == 403


def test_callback_errors_become_one_line_answers(board, token_file):
    def ack(machine, point, value):
        raise RotorwatchError("nothing to acknowledge on ef3/de-h")

    with StatusServer(board, "127.0.0.1", 0, token_file=token_file, on_acknowledge=ack) as srv:
        status, _, raw = request(srv, "POST", "/api/acknowledge/ef3", b"{}", {"Authorization": f"Bearer {TOKEN}"})
        assert status == 400 and json.loads(raw)["error"] == "nothing to acknowledge on ef3/de-h"


def test_bad_token_files_are_one_line_errors(board, tmp_path):
    with pytest.raises(ConfigError) as missing:
        StatusServer(board, token_file=tmp_path / "absent")
    assert "\n" not in str(missing.value) and "cannot read it" in str(missing.value)
    short = tmp_path / "short"
    short.write_text("abc\n")
    with pytest.raises(ConfigError, match="at least 16 characters"):
        StatusServer(board, token_file=short)


def test_port_in_use_is_a_one_line_error(board):
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen(1)
        srv = StatusServer(board, "127.0.0.1", taken.getsockname()[1])
        with pytest.raises(RotorwatchError, match=r"status_page: cannot listen on 127\.0\.0\.1:\d+"):
            srv.start()


def test_stop_closes_the_port(board):
    srv = StatusServer(board, "127.0.0.1", 0).start()
    port = srv.port
    assert get_json(srv, "/healthz")[0] == 200
    srv.stop(timeout_s=5)
    with pytest.raises(OSError):
        socket.create_connection(("127.0.0.1", port), timeout=1).close()
    srv.stop()  # a second stop is harmless


def test_stop_also_ends_keep_alive_connections(board):
    # a browser keeps its connection open between polls; after stop() it must not be answered any more
    srv = StatusServer(board, "127.0.0.1", 0).start()
    conn = http.client.HTTPConnection("127.0.0.1", srv.port, timeout=5)
    conn.request("GET", "/healthz")
    resp = conn.getresponse()
    resp.read()
    assert resp.status == 200 and resp.getheader("Connection") != "close"
    srv.stop(timeout_s=5)
    with pytest.raises((http.client.HTTPException, OSError)):
        conn.request("GET", "/healthz")
        conn.getresponse().read()
    conn.close()
