"""A TCP relay that can cut a database off and let it back, for the fault tests."""

from __future__ import annotations

import select
import socket
import threading

from tests.serverproc import free_port


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
