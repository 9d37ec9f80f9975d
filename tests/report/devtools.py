"""A small Chrome DevTools protocol driver for the browser test (headless Chromium).

It starts a Chromium binary from the system packages with a fresh profile, talks to the page
over the DevTools websocket on loopback, and records every console error, uncaught exception,
log error (a blocked fetch or a Content-Security-Policy violation shows there) and failed or
4xx/5xx request, and the URL of every request the page made (``Browser.requests``).
"""

from __future__ import annotations

import base64
import json
import os
import re
import select
import shutil
import subprocess
import tempfile
import threading
import time
import urllib.request
from dataclasses import dataclass, field
from typing import Any

CHROMIUM_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-extensions",
    "--remote-debugging-address=127.0.0.1",
    "--remote-debugging-port=0",
)
CANDIDATES = ("chromium", "chromium-browser", "google-chrome")


def find_chromium() -> str | None:
    """Path of a Chromium binary, from ``PLUMBLINE_CHROMIUM`` or the usual names on PATH."""
    given = os.environ.get("PLUMBLINE_CHROMIUM")
    if given:
        return given if os.path.exists(given) else None
    for name in CANDIDATES:
        path = shutil.which(name)
        if path:
            return path
    return None


LOCAL_SCHEMES = frozenset({"data", "blob", "about", "chrome-error"})


def outside_requests(urls: list[str], server: str) -> list[str]:
    """The URLs of ``urls`` aimed anywhere but ``server`` (``http://host:port``); ``data:``,
    ``blob:`` and ``about:`` URLs never leave the page."""
    from urllib.parse import urlsplit

    home = urlsplit(server)
    out = []
    for url in urls:
        parts = urlsplit(url)
        if parts.scheme in LOCAL_SCHEMES:
            continue
        if (parts.scheme, parts.netloc) != (home.scheme, home.netloc):
            out.append(url)
    return out


@dataclass
class PageProblems:
    console_errors: list[str] = field(default_factory=list)
    failed_requests: list[str] = field(default_factory=list)

    def all(self) -> list[str]:
        return self.console_errors + self.failed_requests


class Browser:
    """One headless Chromium with one page; use as a context manager."""

    def __init__(self, binary: str, *, width: int = 1280, height: int = 900) -> None:
        self.binary = binary
        self.width = width
        self.height = height
        self.problems = PageProblems()
        self.requests: list[str] = []
        """Every URL the page asked for, in order (``Network.requestWillBeSent``)."""
        self._events: list[dict[str, Any]] = []
        self._next = 0

    def __enter__(self) -> Browser:
        import websocket  # websocket-client

        self._profile = tempfile.mkdtemp(prefix="plumbline-chromium-")
        self._proc = subprocess.Popen(
            [
                self.binary,
                *CHROMIUM_FLAGS,
                f"--user-data-dir={self._profile}",
                f"--window-size={self.width},{self.height}",
                "about:blank",
            ],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
            text=True,
        )
        port = self._devtools_port()
        page_ws = self._page_socket(port)
        self._ws = websocket.create_connection(page_ws, timeout=30, suppress_origin=True)
        for domain in ("Page", "Runtime", "Log", "Network"):
            self.call(f"{domain}.enable")
        return self

    def __exit__(self, *exc: object) -> None:
        try:
            self._ws.close()
        finally:
            self._proc.terminate()
            try:
                self._proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self._proc.kill()
                self._proc.wait(timeout=10)
            shutil.rmtree(self._profile, ignore_errors=True)

    def _devtools_port(self) -> int:
        deadline = time.monotonic() + 30
        pattern = re.compile(r"DevTools listening on ws://127\.0\.0\.1:(\d+)/")
        assert self._proc.stderr is not None
        seen = []
        while time.monotonic() < deadline:
            ready, _, _ = select.select([self._proc.stderr], [], [], 0.5)
            if not ready:
                if self._proc.poll() is not None:
                    break
                continue
            line = self._proc.stderr.readline()
            if not line:
                break
            seen.append(line)
            m = pattern.search(line)
            if m:
                # Keep reading Chromium's log so a full pipe never stalls it.
                threading.Thread(target=self._drain, daemon=True).start()
                return int(m.group(1))
        raise RuntimeError("Chromium did not open its DevTools port:\n" + "".join(seen[-20:]))

    def _drain(self) -> None:
        assert self._proc.stderr is not None
        for _line in self._proc.stderr:
            pass

    @staticmethod
    def _page_socket(port: int) -> str:
        deadline = time.monotonic() + 15
        while time.monotonic() < deadline:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=5) as r:
                targets = json.load(r)
            pages = [t for t in targets if t.get("type") == "page"]
            if pages:
                return pages[0]["webSocketDebuggerUrl"]
            time.sleep(0.1)
        raise RuntimeError("Chromium opened no page")

    # -- protocol -------------------------------------------------------------------------

    def _record(self, msg: dict[str, Any]) -> None:
        method = msg.get("method")
        p = msg.get("params", {})
        if method == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
            text = " ".join(str(a.get("value", a.get("description", ""))) for a in p["args"])
            self.problems.console_errors.append(f"console.{p['type']}: {text}")
        elif method == "Runtime.exceptionThrown":
            d = p.get("exceptionDetails", {})
            desc = d.get("exception", {}).get("description") or d.get("text")
            self.problems.console_errors.append(f"uncaught exception: {desc}")
        elif method == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
            e = p["entry"]
            self.problems.console_errors.append(
                f"log {e.get('source')}: {e.get('text')} {e.get('url', '')}".strip()
            )
        elif method == "Network.requestWillBeSent":
            self.requests.append(str(p.get("request", {}).get("url", "")))
        elif method == "Network.loadingFailed":
            self.problems.failed_requests.append(
                f"request failed: {p.get('errorText')} ({p.get('blockedReason', '')})"
            )
        elif method == "Network.responseReceived":
            resp = p.get("response", {})
            if int(resp.get("status", 0)) >= 400:
                self.problems.failed_requests.append(f"HTTP {resp['status']} {resp.get('url')}")
        self._events.append(msg)

    def call(self, method: str, **params: Any) -> dict[str, Any]:
        self._next += 1
        ident = self._next
        self._ws.send(json.dumps({"id": ident, "method": method, "params": params}))
        while True:
            msg = json.loads(self._ws.recv())
            if msg.get("id") == ident:
                if "error" in msg:
                    raise RuntimeError(f"{method}: {msg['error']}")
                return msg.get("result", {})
            self._record(msg)

    def wait_for(self, method: str, timeout: float = 30.0) -> dict[str, Any]:
        for i, msg in enumerate(self._events):
            if msg.get("method") == method:
                del self._events[i]
                return msg
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            self._ws.settimeout(max(deadline - time.monotonic(), 0.1))
            msg = json.loads(self._ws.recv())
            self._record(msg)
            if msg.get("method") == method:
                self._events.remove(msg)
                return msg
        raise TimeoutError(f"no {method} within {timeout} s")

    # -- page helpers ---------------------------------------------------------------------

    def open(self, url: str) -> None:
        """Navigate and wait for the load event, then let late requests settle; ``requests``
        starts afresh."""
        self._events.clear()
        self.requests.clear()
        result = self.call("Page.navigate", url=url)
        if result.get("errorText"):
            raise RuntimeError(f"navigation to {url} failed: {result['errorText']}")
        self.wait_for("Page.loadEventFired")
        self.evaluate("new Promise(r => setTimeout(r, 300))", await_promise=True)

    def evaluate(self, expression: str, *, await_promise: bool = False) -> Any:
        out = self.call(
            "Runtime.evaluate",
            expression=expression,
            returnByValue=True,
            awaitPromise=await_promise,
        )
        if "exceptionDetails" in out:
            raise RuntimeError(f"script failed: {out['exceptionDetails']}")
        return out.get("result", {}).get("value")

    def screenshot(self, path: str, selector: str | None = None) -> None:
        """Full-page PNG, or of the element ``selector`` names."""
        if selector is not None:
            box = self.evaluate(
                f"(() => {{ const r = document.querySelector({json.dumps(selector)})"
                ".getBoundingClientRect(); return {x: r.left + window.scrollX, "
                "y: r.top + window.scrollY, width: r.width, height: r.height}; })()"
            )
            data = self.call(
                "Page.captureScreenshot",
                format="png",
                captureBeyondViewport=True,
                clip={**box, "scale": 1},
            )
            with open(path, "wb") as fh:
                fh.write(base64.b64decode(data["data"]))
            return
        height = int(self.evaluate("document.documentElement.scrollHeight") or self.height)
        self.call(
            "Emulation.setDeviceMetricsOverride",
            width=self.width,
            height=min(height, 16000),
            deviceScaleFactor=1,
            mobile=False,
        )
        data = self.call("Page.captureScreenshot", format="png", captureBeyondViewport=True)
        with open(path, "wb") as fh:
            fh.write(base64.b64decode(data["data"]))
        self.call("Emulation.clearDeviceMetricsOverride")
