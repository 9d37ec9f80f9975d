"""Request bodies above a few MiB kept in a temporary file rather than in memory.

:class:`Spool` takes a body's chunks as they arrive: up to :data:`SPOOL_BYTES` in memory, the
rest (and what came before) in an anonymous temporary file. The limits middleware reads every
body into one (:mod:`service.api.limits`) and, for a spooled one, leaves the file in the
request's scope under :data:`SCOPE_KEY`, so the endpoint that can work from a file (a big
Parquet upload submitted as a job) reads it there and never holds the body whole; other
endpoints are handed the body from the file in pieces, as from the network. The file is closed
(and so removed) when the request ends.
"""

from __future__ import annotations

import tempfile
from typing import IO, Any

MIB = 1024 * 1024

SPOOL_BYTES = 8 * MIB
"""Bodies larger than this go to a temporary file."""

PIECE_BYTES = 1 * MIB
"""Bytes per message when a spooled body is handed on, and per read when it is hashed."""

SCOPE_KEY = "plumbline.body_file"
"""Where the limits middleware leaves a spooled body's file in the ASGI scope."""


class Spool:
    """A body taken chunk by chunk: in memory while small, in a temporary file beyond
    ``threshold`` bytes."""

    def __init__(self, threshold: int | None = None) -> None:
        self.threshold = SPOOL_BYTES if threshold is None else threshold
        self.size = 0
        self._chunks: list[bytes] = []
        self.file: IO[bytes] | None = None

    def add(self, chunk: bytes) -> None:
        self.size += len(chunk)
        if self.file is None and self.size > self.threshold:
            self.file = tempfile.TemporaryFile(prefix="plumbline-body-")
            for held in self._chunks:
                self.file.write(held)
            self._chunks = []
        if self.file is not None:
            self.file.write(chunk)
        else:
            self._chunks.append(chunk)

    def done(self) -> bytes | IO[bytes]:
        """The body: its bytes, or its file (at its start) when spooled."""
        if self.file is None:
            return b"".join(self._chunks)
        self.file.flush()
        self.file.seek(0)
        return self.file

    def close(self) -> None:
        if self.file is not None:
            self.file.close()
            self.file = None
        self._chunks = []


def read_all(body: bytes | IO[bytes]) -> bytes:
    """The whole body as bytes (a spooled body read back from its file)."""
    if isinstance(body, bytes):
        return body
    body.seek(0)
    data = body.read()
    body.seek(0)
    return data


def update_hash(h: Any, body: bytes | IO[bytes]) -> None:
    """Feed ``body`` to the hash ``h`` (a spooled one piece by piece)."""
    if isinstance(body, bytes):
        h.update(body)
        return
    body.seek(0)
    while piece := body.read(PIECE_BYTES):
        h.update(piece)
    body.seek(0)
