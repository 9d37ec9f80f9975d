"""A spinner on stderr while the command waits or computes, only on an interactive terminal;
a progress bar in its place once the work reports how far it is (a background job's series
done of total)."""

from __future__ import annotations

import sys
import threading
import time
from typing import IO

_FRAMES = "|/-\\"
BAR_WIDTH = 24


def bar(done: int, total: int, width: int = BAR_WIDTH) -> str:
    """``[#######.................]  1,234/4,000`` for ``done`` of ``total``."""
    filled = 0 if total <= 0 else min(width, int(width * done / total))
    return f"[{'#' * filled}{'.' * (width - filled)}] {done:,}/{total:,}"


def interactive(stdout: IO[str] | None = None, stderr: IO[str] | None = None) -> bool:
    """True when both stdout and stderr are terminals (not a CI log, pipe or file)."""
    out = stdout if stdout is not None else sys.stdout
    err = stderr if stderr is not None else sys.stderr
    return _isatty(out) and _isatty(err)


def _isatty(stream: IO[str]) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


class Spinner:
    """Context manager: after ``delay`` seconds, redraw ``message`` with a spinner and the time
    spent, ten times a second, on ``stream``; wipe the line on exit. Does nothing when disabled.
    """

    def __init__(
        self,
        message: str,
        *,
        enabled: bool,
        stream: IO[str] | None = None,
        delay: float = 0.3,
        interval: float = 0.1,
    ) -> None:
        self.message = message
        self.enabled = enabled
        self._stream = stream if stream is not None else sys.stderr
        self._delay = delay
        self._interval = interval
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._drawn = False
        self._bar: str | None = None

    def update(self, message: str) -> None:
        self.message = message

    def progress(self, done: int, total: int, what: str = "series") -> None:
        """Draw a bar of ``done`` of ``total`` (then ``what``) after the message from now on."""
        self._bar = f"{bar(done, total)} {what}"

    def __enter__(self) -> Spinner:
        if self.enabled:
            self._thread = threading.Thread(target=self._run, daemon=True)
            self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        if self._thread is None:
            return
        self._stop.set()
        self._thread.join()
        if self._drawn:
            self._stream.write("\r\033[K")
            self._stream.flush()

    def _run(self) -> None:
        start = time.monotonic()
        if self._stop.wait(self._delay):
            return
        frame = 0
        while not self._stop.is_set():
            elapsed = time.monotonic() - start
            shown = self.message if self._bar is None else f"{self.message} {self._bar}"
            self._stream.write(f"\r\033[K{_FRAMES[frame % 4]} {shown} {elapsed:.1f}s")
            self._stream.flush()
            self._drawn = True
            frame += 1
            self._stop.wait(self._interval)
