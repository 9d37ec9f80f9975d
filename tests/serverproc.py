"""The real server (or another Python server) as a child process on a free loopback port.

:func:`start_python` runs it in a process group of its own with a clean ``PLUMBLINE_*``
environment and its output in a log file, :func:`wait_until_answers` waits for a URL to answer
200 (failing with the log's tail when the process exits first), :func:`stop` signals the whole
group (SIGTERM, then SIGKILL after a timeout). :class:`Server` puts them together for
``service.api.server.run``.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Mapping
from pathlib import Path

import httpx

ROOT = Path(__file__).resolve().parents[1]
HOST = "127.0.0.1"


class ServerDidNotStart(RuntimeError):
    """The process exited, or its URL did not answer in time."""


def free_port() -> int:
    """A loopback port nothing listens on (bound, then released)."""
    with socket.socket() as s:
        s.bind((HOST, 0))
        return int(s.getsockname()[1])


def run_args(port: int, workers: int = 1) -> list[str]:
    """Python arguments for ``service.api.server.run`` on loopback."""
    return [
        "-c",
        f"from service.api.server import run; run(host='{HOST}', port={port}, workers={workers})",
    ]


def start_python(
    args: list[str], env: Mapping[str, str], log: Path, *, cwd: Path = ROOT
) -> subprocess.Popen:
    """``python *args`` in a new process group (so a signal reaches every worker), with
    ``env`` over this environment less its ``PLUMBLINE_*`` variables; output appended to
    ``log``."""
    full = {k: v for k, v in os.environ.items() if not k.startswith("PLUMBLINE_")}
    full.update({"PYTHONPATH": str(ROOT), "PYTHONUNBUFFERED": "1", **env})
    with log.open("ab") as out:
        return subprocess.Popen(
            [sys.executable, *args],
            cwd=cwd,
            env=full,
            stdout=out,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )


def log_tail(log: Path, chars: int = 3000) -> str:
    return log.read_text(errors="replace")[-chars:] if log.exists() else ""


def wait_until_answers(url: str, proc: subprocess.Popen, log: Path, timeout: float = 60.0) -> None:
    """Until ``url`` answers 200; :class:`ServerDidNotStart` (with the log's tail) if the
    process exits first or the timeout passes."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise ServerDidNotStart(f"server exited with {proc.returncode}:\n" + log_tail(log))
        try:
            if httpx.get(url, timeout=1.0).status_code == 200:
                return
        except httpx.HTTPError:
            pass
        time.sleep(0.05)
    raise ServerDidNotStart(f"{url} did not answer in {timeout:g} s:\n" + log_tail(log))


def stop(proc: subprocess.Popen, sig: int = signal.SIGTERM, timeout: float = 30.0) -> None:
    """Send ``sig`` to the process group, SIGKILL it if it has not exited after ``timeout``
    seconds, then SIGKILL whatever of the group is left (workers of a killed parent)."""
    if proc.poll() is None:
        os.killpg(proc.pid, sig)
        try:
            proc.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except ProcessLookupError:
        pass


class Server:
    """``service.api.server.run`` on a free loopback port (the same one on every
    :meth:`start`), ready once ``/readyz`` answers 200."""

    def __init__(
        self,
        database_url: str,
        log: Path,
        *,
        workers: int = 1,
        env: Mapping[str, str] | None = None,
    ) -> None:
        self.log = log
        self.workers = workers
        self.env = {"PLUMBLINE_DATABASE_URL": database_url, **(env or {})}
        self.port = free_port()
        self.proc: subprocess.Popen | None = None

    @property
    def url(self) -> str:
        return f"http://{HOST}:{self.port}"

    def start(self, timeout: float = 60.0) -> Server:
        self.proc = start_python(run_args(self.port, self.workers), self.env, self.log)
        try:
            wait_until_answers(self.url + "/readyz", self.proc, self.log, timeout)
        except BaseException:
            stop(self.proc, signal.SIGKILL)
            raise
        return self

    def kill(self, sig: int = signal.SIGKILL) -> None:
        if self.proc is not None:
            stop(self.proc, sig)

    def __enter__(self) -> Server:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.kill(signal.SIGTERM)
