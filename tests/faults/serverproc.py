"""The real server as a child process (``service.api.server.run``), and a TCP relay that can
cut a database off and let it back, for the fault tests."""

from __future__ import annotations

import os
import select
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import httpx

ROOT = Path(__file__).resolve().parents[2]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Server:
    """``plumbline serve`` in a new process group (so SIGKILL reaches every worker)."""

    def __init__(self, database_url: str, log: Path, *, workers: int = 1,
                 env: dict[str, str] | None = None) -> None:
        self.database_url = database_url
        self.log = log
        self.workers = workers
        self.extra_env = dict(env or {})
        self.port = free_port()
        self.proc: subprocess.Popen | None = None

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def start(self, timeout: float = 60.0) -> Server:
        env = {k: v for k, v in os.environ.items() if not k.startswith("PLUMBLINE_")}
        env.update({"PLUMBLINE_DATABASE_URL": self.database_url, "PYTHONPATH": str(ROOT),
                    "PYTHONUNBUFFERED": "1", **self.extra_env})
        code = ("from service.api.server import run; "
                f"run(host='127.0.0.1', port={self.port}, workers={self.workers})")
        with self.log.open("ab") as out:
            self.proc = subprocess.Popen([sys.executable, "-c", code], cwd=ROOT, env=env,
                                         stdout=out, stderr=subprocess.STDOUT,
                                         start_new_session=True)
        self._wait_ready(timeout)
        return self

    def _wait_ready(self, timeout: float) -> None:
        assert self.proc is not None
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise AssertionError(f"server exited with {self.proc.returncode}:\n"
                                     + self.log.read_text()[-3000:])
            try:
                if httpx.get(self.url + "/readyz", timeout=1.0).status_code == 200:
                    return
            except httpx.HTTPError:
                pass
            time.sleep(0.05)
        raise AssertionError("server did not become ready:\n" + self.log.read_text()[-3000:])

    def kill(self, sig: int = signal.SIGKILL) -> None:
        if self.proc is not None and self.proc.poll() is None:
            os.killpg(self.proc.pid, sig)
            self.proc.wait(timeout=30)
        if self.proc is not None:
            try:  # workers of a killed parent: none may outlive it
                os.killpg(self.proc.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass

    def __enter__(self) -> Server:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.kill(signal.SIGTERM)


class Relay:
    """A loopback TCP relay to ``target``; :meth:`cut` drops every connection and refuses new
    ones (as a stopped server does), :meth:`restore` lets them through again."""

    def __init__(self, target: tuple[str, int]) -> None:
        self.target = target
        self.port = free_port()
        self._listener: socket.socket | None = None
        self._pairs: list[tuple[socket.socket, socket.socket]] = []
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def restore(self) -> None:
        listener = socket.socket()
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        listener.bind(("127.0.0.1", self.port))
        listener.listen(64)
        listener.settimeout(0.1)
        self._listener = listener
        self._stop.clear()
        self._thread = threading.Thread(target=self._accept, daemon=True)
        self._thread.start()

    def cut(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        if self._listener is not None:
            self._listener.close()
            self._listener = None
        with self._lock:
            for a, b in self._pairs:
                for s in (a, b):
                    try:
                        s.shutdown(socket.SHUT_RDWR)
                    except OSError:
                        pass
                    s.close()
            self._pairs.clear()

    def _accept(self) -> None:
        assert self._listener is not None
        while not self._stop.is_set():
            try:
                client, _ = self._listener.accept()
            except (TimeoutError, OSError):
                continue
            try:
                upstream = socket.create_connection(self.target, timeout=5)
            except OSError:
                client.close()
                continue
            with self._lock:
                self._pairs.append((client, upstream))
            threading.Thread(target=self._pump, args=(client, upstream), daemon=True).start()

    @staticmethod
    def _pump(a: socket.socket, b: socket.socket) -> None:
        try:
            while True:
                ready, _, _ = select.select([a, b], [], [], 0.5)
                for s in ready:
                    data = s.recv(65536)
                    if not data:
                        return
                    (b if s is a else a).sendall(data)
        except (OSError, ValueError):
            return
