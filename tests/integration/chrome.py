"""A real headless Chromium driven through chromedriver's W3C WebDriver HTTP API (stdlib only).

chromedriver (Debian ``chromium-driver``) is started on a free loopback port by its PID and stopped the
same way; each session gets its own throw-away profile directory. The flags are the shared recipes'
headless set. Browser console messages are read back through chromedriver's log endpoint
(``goog:loggingPrefs``), and screenshots through the DevTools protocol bridge (full page).
"""

from __future__ import annotations

import base64
import json
import time
import urllib.error
import urllib.request
from pathlib import Path

import pytest

from components import find_binary, free_port, spawn, stop_process, tail, wait_until

CHROMIUM_FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--disable-dev-shm-usage", "--hide-scrollbars", "--force-device-scale-factor=1",
]


class Chrome:
    def __init__(self, workdir: Path, window: tuple[int, int] = (1366, 900), timeout_s: float = 20.0) -> None:
        self.workdir = Path(workdir)
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.timeout_s = timeout_s
        driver = find_binary("chromedriver", "chromium-driver", "chromedriver (headless browser tests)")
        self.binary = find_binary("chromium", "chromium", "Chromium (headless browser tests)")
        self.port = free_port()
        self.log_path = self.workdir / "chromedriver.log"
        self.proc = spawn([driver, f"--port={self.port}", f"--log-path={self.log_path}"],
                          self.workdir / "chromedriver.out")
        self.base = f"http://127.0.0.1:{self.port}"
        if not wait_until(lambda: self.proc.poll() is not None or self._status_ok(), 15.0, 0.05) or self.proc.poll() is not None:
            rc = stop_process(self.proc)
            pytest.fail(f"chromedriver did not start (rc={rc}): {tail(self.workdir / 'chromedriver.out')}", pytrace=False)
        profile = self.workdir / "profile"
        profile.mkdir(exist_ok=True)
        caps = {"capabilities": {"alwaysMatch": {
            "browserName": "chrome",
            "goog:chromeOptions": {"binary": self.binary,
                                   "args": CHROMIUM_FLAGS + [f"--user-data-dir={profile}",
                                                             f"--window-size={window[0]},{window[1]}"]},
            "goog:loggingPrefs": {"browser": "ALL"},
        }}}
        try:
            self.session = self._call("POST", "/session", caps, timeout_s=60.0)["sessionId"]
        except Exception:
            stop_process(self.proc)
            raise

    # -- transport --------------------------------------------------------------------------------
    def _status_ok(self) -> bool:
        try:
            with urllib.request.urlopen(self.base + "/status", timeout=1.0) as r:
                return bool(json.loads(r.read())["value"].get("ready"))
        except (OSError, ValueError, KeyError):
            return False

    def _call(self, method: str, path: str, body: dict | None = None, timeout_s: float | None = None):
        data = json.dumps(body).encode() if body is not None else None
        req = urllib.request.Request(self.base + path, data=data, method=method,
                                     headers={"Content-Type": "application/json"})
        try:
            with urllib.request.urlopen(req, timeout=timeout_s or self.timeout_s) as r:
                return json.loads(r.read())["value"]
        except urllib.error.HTTPError as exc:
            detail = exc.read().decode(errors="replace")[:500]
            raise RuntimeError(f"webdriver {method} {path}: HTTP {exc.code}: {detail}") from None

    def _s(self, path: str) -> str:
        return f"/session/{self.session}{path}"

    # -- commands ---------------------------------------------------------------------------------
    def get(self, url: str) -> None:
        self._call("POST", self._s("/url"), {"url": url}, timeout_s=30.0)

    def js(self, script: str, *args):
        """Run ``script`` (a function body; ``arguments`` holds ``args``) and return its value."""
        return self._call("POST", self._s("/execute/sync"), {"script": script, "args": list(args)})

    def wait_js(self, script: str, timeout_s: float = 15.0, interval_s: float = 0.1):
        """Poll ``script`` until it returns something truthy (bounded); returns the last value."""
        return wait_until(lambda: self.js(script), timeout_s, interval_s)

    def click(self, css: str) -> None:
        self.js("document.querySelector(arguments[0]).click()", css)

    def console(self) -> list[dict]:
        """Browser console entries since the last call (level, message)."""
        return self._call("POST", self._s("/se/log"), {"type": "browser"})

    def screenshot(self, path: Path, full_page: bool = True) -> Path:
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        if full_page:
            size = self.js("return [document.documentElement.scrollWidth, document.documentElement.scrollHeight]")
            shot = self._call("POST", self._s("/goog/cdp/execute"), {"cmd": "Page.captureScreenshot", "params": {
                "format": "png", "captureBeyondViewport": True,
                "clip": {"x": 0, "y": 0, "width": size[0], "height": size[1], "scale": 1}}})["data"]
        else:
            shot = self._call("GET", self._s("/screenshot"))
        path.write_bytes(base64.b64decode(shot))
        return path

    def close(self) -> None:
        try:
            self._call("DELETE", self._s(""), timeout_s=15.0)
        except Exception:
            pass
        stop_process(self.proc)

    def __enter__(self) -> Chrome:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def console_errors(entries: list[dict]) -> list[str]:
    """Console entries at SEVERE level (JS errors, failed loads, CSP violations)."""
    return [e.get("message", "") for e in entries if e.get("level") == "SEVERE"]


def settle(seconds: float) -> None:
    time.sleep(seconds)
