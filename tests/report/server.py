"""Start the real service in a subprocess on a free loopback port, for end-to-end tests."""

from __future__ import annotations

from pathlib import Path

from tests.serverproc import HOST, free_port, start_python, stop, wait_until_answers


class Server:
    """``with Server(tmp_path, env) as url:`` runs the app until the block ends."""

    def __init__(self, workdir: Path, env: dict[str, str]) -> None:
        self.workdir = workdir
        self.env = env

    def __enter__(self) -> str:
        port = free_port()
        log = self.workdir / "server.log"
        # What `plumbline serve` runs: migrations, then uvicorn on loopback.
        self.proc = start_python(
            ["-m", "service.api.server", "--host", HOST, "--port", str(port)],
            self.env,
            log,
            cwd=self.workdir,
        )
        url = f"http://{HOST}:{port}"
        try:
            wait_until_answers(f"{url}/healthz", self.proc, log)
        except BaseException:
            self.__exit__()
            raise
        return url

    def __exit__(self, *exc: object) -> None:
        stop(self.proc)
