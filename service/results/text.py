"""The plain text of a result, as the CLI prints it (shared with library users)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .records import AssessmentDocument, AssessmentResult


def _share(value: float | None) -> str:
    return "-" if value is None else f"{100 * value:.1f}%"


def _baseline_line(b: Mapping[str, Any]) -> str:
    """What the holdout was compared with, and what of it matched."""
    asked = b.get("requested")
    how = "" if asked in (None, b.get("version")) else f" ({asked})"
    line = (
        f"against: version {b.get('version')}{how}, assessment {b.get('assessment_id')}; "
        f"{b.get('matched_series')} series, {b.get('matched_periods')} holdout periods matched"
    )
    missed = [
        f"{b.get(k)} {what}"
        for k, what in (
            ("unmatched_series", "series without a baseline"),
            ("baseline_only_series", "baseline series not in this version"),
            ("unmatched_periods", "periods unmatched"),
        )
        if b.get(k)
    ]
    return line + ("; " + ", ".join(missed) if missed else "") + "\n"


def _summary(
    result: AssessmentResult,
    doc: AssessmentDocument | None,
    *,
    fail_on: str | None = None,
    where: str | None = None,
    link: str | None = None,
    max_reasons: int = 15,
    more: str | None = None,
) -> str:
    lines: list[str] = []
    w = lines.append
    parts = () if doc is None else (doc.model, doc.version)
    model = " ".join(p for p in parts if p) or "(no model given)"
    policy = result.policy.name or "?"
    if result.policy.version is not None:
        policy += f" v{result.policy.version}"
    w(f"verdict: {result.verdict.upper()}   model {model}   policy {policy}\n")
    w(
        f"series:  {result.n_series} assessed, {result.count('fail')} failed, "
        f"{result.count('warn')} warned, {result.count('pass')} passed\n"
    )
    if doc is not None and doc.id is not None:
        note = " (stored earlier under the same Idempotency-Key)" if doc.replayed else ""
        w(f"stored:  assessment {doc.id}{note}\n")
    else:
        w(f"stored:  no ({where})\n" if where else "stored:  no\n")
    if link:
        w(f"report:  {link}\n")
    baseline = None if doc is None else doc.extra.get("baseline")
    if isinstance(baseline, Mapping):
        w(_baseline_line(baseline))

    if result.reasons:
        w("\nreasons (worst first):\n")
        shown = result.reasons[:max_reasons]
        width = max(len(r.check) for r in shown) if shown else 0
        for r in shown:
            target = f"[{r.series_id}] " if r.series_id is not None else ""
            w(f"  {r.status:<4}  {r.check:<{width}}  {target}{r.message}\n")
        left = len(result.reasons) - max_reasons
        if left > 0:
            w(f"  ... and {left} more" + (f" ({more})\n" if more else "\n"))

    if result.checks:
        w("\n")
        # "untested": series the check could not run on (an essential check's keep them from
        # passing; each has its reason above).
        header = ("check", "status", "tested", "failed", "warned", "untested", "failed%")
        rows = [
            (
                c.name,
                str(c.status),
                str(c.series_tested),
                str(c.series_failed),
                str(c.series_warned),
                str(c.series_skipped),
                _share(c.failed_share),
            )
            for c in result.checks
        ]
        widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
        for row in [header, *rows]:
            left_cells = f"{row[0]:<{widths[0]}}  {row[1]:<{widths[1]}}"
            right = "  ".join(f"{cell:>{widths[i]}}" for i, cell in enumerate(row) if i >= 2)
            w(f"  {left_cells}  {right}\n")

    if fail_on is not None:
        blocks = result.blocks(fail_on)
        state = "BLOCKS" if blocks else "passes"
        relation = "is at or worse than" if blocks else "is better than"
        w(f"\ngate: {state} (verdict {result.verdict} {relation} --fail-on {fail_on})\n")
    return "".join(lines)
