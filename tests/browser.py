"""Headless Chromium for tests, driven over the Chrome DevTools Protocol (a WebSocket).

The ``chromium`` binary (Debian package ``chromium``) starts with a profile directory of its
own and ``--remote-debugging-port=0``; it writes the port it picked to
``DevToolsActivePort`` in that directory. One page target is driven: navigate, evaluate
JavaScript, take a PNG screenshot. Every uncaught script exception, console error and
browser log error is collected, so a test can assert that a page ran cleanly.

Without the binary the tests that need it skip, naming the package; with
``STREAM_MINER_REQUIRE_CHROMIUM=1`` (set by .ci/run) they fail instead. Every wait has a
deadline.
"""

from __future__ import annotations

import base64
import json
import os
import shutil
import subprocess
import time
import urllib.request
from pathlib import Path
from typing import Any

import pytest

from processes import wait_until

REQUIRE = "STREAM_MINER_REQUIRE_CHROMIUM"
SCREENSHOTS = "STREAM_MINER_SCREENSHOTS"  # a directory: keep the tests' screenshots there
WIDTH, HEIGHT = 1280, 900


def chromium_binary() -> str:
    """The path of Debian's ``chromium``; skip without it, or fail when it is required."""
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path is not None:
            return path
    reason = "needs a headless browser: install the Debian package chromium (apt-get install chromium)"
    if os.environ.get(REQUIRE) == "1":
        pytest.fail(f"{REQUIRE}=1 but {reason}")
    pytest.skip(reason)


def screenshot_path(tmp_path: Path, name: str) -> Path:
    """Where a test keeps screenshot ``name``: ``$STREAM_MINER_SCREENSHOTS/name`` when set
    (how docs/images is made), else the test's own temporary directory."""
    directory = os.environ.get(SCREENSHOTS)
    return Path(directory) / name if directory else tmp_path / name


class Browser:
    """One headless Chromium and one page in it."""

    def __init__(self, profile: Path) -> None:
        import websocket  # websocket-client, a test dependency

        profile.mkdir(parents=True, exist_ok=True)
        self.process = subprocess.Popen(
            [
                chromium_binary(),
                "--headless",
                "--no-sandbox",  # tests may run as root (CI machines do)
                "--disable-gpu",
                "--disable-dev-shm-usage",
                "--no-first-run",
                "--no-default-browser-check",
                "--disable-extensions",
                "--disable-background-networking",
                "--hide-scrollbars",
                f"--window-size={WIDTH},{HEIGHT}",
                f"--user-data-dir={profile}",
                "--remote-debugging-address=127.0.0.1",
                "--remote-debugging-port=0",
                "about:blank",
            ],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        port_file = profile / "DevToolsActivePort"
        port = wait_until(lambda: self._port(port_file), timeout=60, what="Chromium's DevTools port")
        targets = wait_until(lambda: self._pages(port), timeout=30, what="Chromium's first page")
        self._socket = websocket.create_connection(
            targets[0]["webSocketDebuggerUrl"], timeout=30, suppress_origin=True
        )
        self._next_id = 0
        self._events: list[dict[str, Any]] = []
        self.errors: list[str] = []
        for domain in ("Page", "Runtime", "Log"):
            self.call(f"{domain}.enable")
        self.call(
            "Emulation.setDeviceMetricsOverride",
            width=WIDTH,
            height=HEIGHT,
            deviceScaleFactor=1,
            mobile=False,
        )

    def _port(self, port_file: Path) -> int | None:
        if self.process.poll() is not None:
            pytest.fail(f"chromium exited with status {self.process.returncode} before it listened")
        try:
            first = port_file.read_text().split("\n", 1)[0]
        except FileNotFoundError:
            return None
        return int(first) if first.isdigit() else None

    @staticmethod
    def _pages(port: int) -> list[dict[str, Any]]:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=10) as answer:
            return [t for t in json.loads(answer.read()) if t.get("type") == "page"]

    # ------------------------------------------------------------------ the protocol
    def call(self, method: str, **params: Any) -> dict[str, Any]:
        """Send one command and return its result (fails the test on a protocol error)."""
        self._next_id += 1
        wanted = self._next_id
        self._socket.send(json.dumps({"id": wanted, "method": method, "params": params}))
        while True:
            message = self._receive(30)
            if message.get("id") == wanted:
                if "error" in message:
                    pytest.fail(f"chromium: {method}: {message['error']}")
                return message.get("result", {})

    def _receive(self, timeout: float) -> dict[str, Any]:
        self._socket.settimeout(timeout)
        message = json.loads(self._socket.recv())
        if "method" in message:
            self._note(message)
            self._events.append(message)
        return message

    def _note(self, event: dict[str, Any]) -> None:
        method, params = event["method"], event.get("params", {})
        if method == "Runtime.exceptionThrown":
            details = params.get("exceptionDetails", {})
            description = details.get("exception", {}).get("description") or details.get("text", "")
            self.errors.append(f"uncaught: {description}")
        elif method == "Runtime.consoleAPICalled" and params.get("type") in ("error", "assert"):
            self.errors.append(
                "console: " + " ".join(str(a.get("value", a.get("description"))) for a in params["args"])
            )
        elif method == "Log.entryAdded" and params.get("entry", {}).get("level") == "error":
            entry = params["entry"]
            self.errors.append(f"log: {entry.get('text')} {entry.get('url', '')}".rstrip())

    def wait_for_event(self, method: str, timeout: float = 30) -> dict[str, Any]:
        """The first event ``method`` received since the last call that consumed one."""
        deadline = time.monotonic() + timeout
        while True:
            for index, event in enumerate(self._events):
                if event["method"] == method:
                    del self._events[: index + 1]
                    return event
            left = deadline - time.monotonic()
            if left <= 0:
                pytest.fail(f"chromium: no {method} within {timeout} s")
            self._events.clear()
            try:
                self._receive(left)
            except TimeoutError:
                continue

    # ------------------------------------------------------------------ what tests use
    def open(self, url: str) -> None:
        """Navigate to ``url`` and wait until it has loaded."""
        self._events.clear()
        answer = self.call("Page.navigate", url=url)
        if answer.get("errorText"):
            pytest.fail(f"chromium cannot open {url}: {answer['errorText']}")
        self.wait_for_event("Page.loadEventFired")

    def evaluate(self, expression: str) -> Any:
        """The value of a JavaScript expression in the page (promises awaited)."""
        answer = self.call("Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=True)
        if "exceptionDetails" in answer:
            pytest.fail(f"chromium: {expression!r} threw {answer['exceptionDetails'].get('text')}")
        return answer["result"].get("value")

    def screenshot(self, path: Path) -> bytes:
        """A PNG of the whole page (not only the viewport), kept at ``path``."""
        width, height = self.evaluate(
            "[document.documentElement.scrollWidth, document.documentElement.scrollHeight]"
        )
        clip = {"x": 0, "y": 0, "width": max(width, WIDTH), "height": max(height, 1), "scale": 1}
        png = base64.b64decode(
            self.call("Page.captureScreenshot", format="png", clip=clip, captureBeyondViewport=True)["data"]
        )
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(png)
        return png

    def close(self) -> None:
        try:
            self._socket.close()
        finally:
            self.process.terminate()
            try:
                self.process.wait(timeout=20)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait()
