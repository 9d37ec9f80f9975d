"""The browser driver itself: it must see the problems the report test asserts are absent."""

from __future__ import annotations

import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import pytest

from service.report import CONTENT_SECURITY_POLICY

from .test_browser import _need_browser

pytestmark = pytest.mark.slow

BROKEN = b"""<!DOCTYPE html><html><head><link rel="icon" href="data:,"></head><body>
<p id="p">hello</p>
<img src="/missing.png" alt="">
<script>console.error("planted console error"); undefinedFunction();</script>
</body></html>"""

ELSEWHERE = b"""<!DOCTYPE html><html><head><link rel="icon" href="data:,"></head><body>
<img src="http://127.0.0.2:9/elsewhere.png" alt=""></body></html>"""

LOCKED = b"""<!DOCTYPE html><html><head><link rel="icon" href="data:,"></head><body>
<img src="http://127.0.0.1:9/elsewhere.png" alt=""></body></html>"""


class _Handler(BaseHTTPRequestHandler):
    def do_GET(self) -> None:
        pages = {
            "/broken": (BROKEN, {}),
            "/elsewhere": (ELSEWHERE, {}),
            "/locked": (LOCKED, {"Content-Security-Policy": CONTENT_SECURITY_POLICY}),
        }
        if self.path not in pages:
            self.send_error(404)
            return
        body, headers = pages[self.path]
        self.send_response(200)
        self.send_header("Content-Type", "text/html; charset=utf-8")
        for k, v in headers.items():
            self.send_header(k, v)
        self.end_headers()
        self.wfile.write(body)

    def log_message(self, *args: object) -> None:
        pass


@pytest.fixture(scope="module")
def site():
    server = ThreadingHTTPServer(("127.0.0.1", 0), _Handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_address[1]}"
    server.shutdown()
    server.server_close()


def test_driver_reports_console_errors_exceptions_and_failed_requests(site: str) -> None:
    from .devtools import Browser

    with Browser(_need_browser()) as b:
        b.open(f"{site}/broken")
        assert b.evaluate("document.getElementById('p').textContent") == "hello"
        errors = " | ".join(b.problems.console_errors)
        assert "planted console error" in errors
        assert "undefinedFunction" in errors
        assert any("HTTP 404" in f and "missing.png" in f for f in b.problems.failed_requests)


def test_report_policy_blocks_outside_fetches_and_the_driver_sees_it(site: str) -> None:
    from .devtools import Browser

    with Browser(_need_browser()) as b:
        b.open(f"{site}/locked")
        assert b.problems.all(), "a blocked image must show as a problem"
        assert any(
            "elsewhere.png" in p or "Content Security Policy" in p for p in b.problems.all()
        ), b.problems.all()


def test_driver_lists_every_request_so_outside_ones_can_be_counted(site: str) -> None:
    from .devtools import Browser, outside_requests

    with Browser(_need_browser()) as b:
        b.open(f"{site}/elsewhere")
        assert f"{site}/elsewhere" in b.requests
        assert outside_requests(b.requests, site) == ["http://127.0.0.2:9/elsewhere.png"]
        b.open(f"{site}/broken")
        assert b.requests[0] == f"{site}/broken"  # open() starts a new list
        assert outside_requests(b.requests, site) == []
