"""Human-readable output for a CI log: verdict, reasons, a compact per-check table."""

from __future__ import annotations

from typing import IO, Any

from ..client import AssessmentDocument, VerdictResult

MAX_REASONS = 15


def silence_stdout() -> None:
    """After a reader closed the pipe (``plumbline ... | head``): send further output nowhere,
    so the exit code, not a broken-pipe error, is what the caller gets."""
    import os
    import sys

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):  # stdout without a file descriptor (e.g. captured)
        pass


def dump_json(data: Any, out: IO[str]) -> None:
    """``data`` (plain JSON types; a top-level mapping view is fine) indented, one trailing
    newline. orjson: the stdlib encoder falls back to pure Python when indenting."""
    import orjson

    if not isinstance(data, dict) and hasattr(data, "items"):
        data = dict(data)
    out.write(orjson.dumps(data, option=orjson.OPT_INDENT_2).decode() + "\n")


def assessment(
    result: AssessmentDocument,
    out: IO[str],
    *,
    fail_on: str,
    where: str,
    link: str | None = None,
    max_reasons: int = MAX_REASONS,
) -> None:
    """Print ``result``; the last line says whether the gate passes or blocks."""
    out.write(
        result.summary(
            fail_on=fail_on,
            where=where,
            link=link,
            max_reasons=max_reasons,
            more="--json prints them all",
        )
    )


def verdict(result: VerdictResult, out: IO[str], *, require: str) -> None:
    model = result.model + (f" {result.version}" if result.version else "")
    when = f", assessed {result.created_at}" if result.created_at else ""
    ident = f" (assessment {result.assessment_id}{when})" if result.assessment_id else ""
    state = "met" if result.met else "NOT met"
    out.write(f"{model}: latest verdict {result.verdict}{ident}; --require {require} {state}\n")
