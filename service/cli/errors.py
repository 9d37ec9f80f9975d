"""Exit codes of the ``plumbline`` command and the error that carries one."""

from __future__ import annotations

from enum import IntEnum


class Exit(IntEnum):
    """Exit codes, as the interface contract fixes them."""

    PASSES = 0
    """The gate passes (or the command did its job)."""
    BLOCKS = 1
    """The gate blocks: verdict at or worse than ``--fail-on``; or a ``--require`` not met."""
    USAGE = 2
    """Bad input or usage: missing file, unreadable JSON/CSV, unknown option, refused request."""
    UNREACHABLE = 3
    """Server unreachable, or a server error (5xx) after every retry."""


class CliError(Exception):
    """A problem to report on one stderr line, then exit with ``code``."""

    def __init__(self, message: str, code: Exit = Exit.USAGE) -> None:
        self.message = message
        self.code = code
        super().__init__(message)
