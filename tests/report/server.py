"""Start the real service in a subprocess on a free loopback port, for end-to-end tests."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class Server:
    """``with Server(tmp_path, env) as url:`` runs the app until the block ends."""

    def __init__(self, workdir: Path, env: dict[str, str]) -> None:
        self.workdir = workdir
        self.env = env

    def __enter__(self) -> str:
        port = free_port()
        root = Path(__file__).resolve().parents[2]
        env = {**os.environ, "PYTHONPATH": str(root), **self.env}
        self.log = open(self.workdir / "server.log", "w+")
        # What `plumbline serve` runs: migrations, then uvicorn on loopback.
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "service.api.server", "--host", "127.0.0.1",
             "--port", str(port)],
            cwd=self.workdir, env=env, stdout=self.log, stderr=subprocess.STDOUT,
        )
        url = f"http://127.0.0.1:{port}"
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                break
            try:
                if httpx.get(f"{url}/healthz", timeout=2).status_code == 200:
                    return url
            except httpx.HTTPError:
                pass
            time.sleep(0.2)
        self.__exit__()
        self.log.seek(0)
        raise RuntimeError("the server did not start:\n" + self.log.read()[-4000:])

    def __exit__(self, *exc: object) -> None:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=15)
        self.log.close()
