"""Human-readable output for a CI log: verdict, reasons, a compact per-check table."""

from __future__ import annotations

from typing import IO, Any

from ..client import AssessmentResult, VerdictResult

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


def _share(value: float | None) -> str:
    return "-" if value is None else f"{100 * value:.1f}%"


def assessment(
    result: AssessmentResult,
    out: IO[str],
    *,
    fail_on: str,
    where: str,
    link: str | None = None,
    max_reasons: int = MAX_REASONS,
) -> None:
    """Print ``result``; the last line says whether the gate passes or blocks."""
    model = " ".join(p for p in (result.model, result.version) if p) or "(no model given)"
    policy = result.policy.name or "?"
    if result.policy.version is not None:
        policy += f" v{result.policy.version}"
    w = out.write
    w(f"verdict: {result.verdict.upper()}   model {model}   policy {policy}\n")
    w(
        f"series:  {result.n_series} assessed, {result.count('fail')} failed, "
        f"{result.count('warn')} warned, {result.count('pass')} passed\n"
    )
    if result.id is not None:
        note = " (stored earlier under the same Idempotency-Key)" if result.replayed else ""
        w(f"stored:  assessment {result.id}{note}\n")
    else:
        w(f"stored:  no ({where})\n")
    if link:
        w(f"report:  {link}\n")

    if result.reasons:
        w("\nreasons (worst first):\n")
        width = max(len(r.check) for r in result.reasons[:max_reasons])
        for r in result.reasons[:max_reasons]:
            target = f"[{r.series_id}] " if r.series_id is not None else ""
            w(f"  {r.status:<4}  {r.check:<{width}}  {target}{r.message}\n")
        more = len(result.reasons) - max_reasons
        if more > 0:
            w(f"  ... and {more} more (--json prints them all)\n")

    if result.checks:
        w("\n")
        _check_table(result, out)

    blocks = result.blocks(fail_on)
    state = "BLOCKS" if blocks else "passes"
    relation = "is at or worse than" if blocks else "is better than"
    w(f"\ngate: {state} (verdict {result.verdict} {relation} --fail-on {fail_on})\n")


def _check_table(result: AssessmentResult, out: IO[str]) -> None:
    header = ("check", "status", "tested", "failed", "warned", "failed%")
    rows = [
        (
            c.name,
            c.status,
            str(c.series_tested),
            str(c.series_failed),
            str(c.series_warned),
            _share(c.failed_share),
        )
        for c in result.checks
    ]
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    for row in [header, *rows]:
        left = f"{row[0]:<{widths[0]}}  {row[1]:<{widths[1]}}"
        right = "  ".join(f"{cell:>{widths[i]}}" for i, cell in enumerate(row) if i >= 2)
        out.write(f"  {left}  {right}\n")


def verdict(result: VerdictResult, out: IO[str], *, require: str) -> None:
    model = result.model + (f" {result.version}" if result.version else "")
    when = f", assessed {result.created_at}" if result.created_at else ""
    ident = f" (assessment {result.assessment_id}{when})" if result.assessment_id else ""
    state = "met" if result.met else "NOT met"
    out.write(f"{model}: latest verdict {result.verdict}{ident}; --require {require} {state}\n")
