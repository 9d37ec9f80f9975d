"""Invented fleets for the baseline tests: one reality (actuals), several model versions.

Every series is a weekly level ``100 + 10 sin(2 pi t / 52)`` plus N(0, 1) noise (seeded per
series, so every version sees the same actuals). A version forecasts the level plus extra
N(0, ``extra_sd``) errors of its own (seeded per version): ``extra_sd=0`` is the sound model,
a larger one a less accurate challenger.
"""

from __future__ import annotations

from datetime import date, timedelta
from typing import Any

import numpy as np

TRAIN = 104
START = date(2024, 1, 1)


def week(t: int) -> str:
    return (START + timedelta(weeks=t)).isoformat()


def series(
    sid: str,
    seed: int,
    *,
    extra_sd: float = 0.0,
    version_seed: int = 0,
    holdout: int = 12,
    shift: int = 0,
    stamps: bool = True,
    interval: bool = True,
) -> dict[str, Any]:
    """One series; the holdout is ``holdout`` weeks starting ``shift`` weeks after training."""
    total = TRAIN + shift + holdout
    t = np.arange(total)
    level = 100.0 + 10.0 * np.sin(t * 2 * np.pi / 52)
    actual = level + np.random.default_rng(seed).normal(0.0, 1.0, total)
    extra = np.random.default_rng(1000 + 97 * version_seed + seed).normal(0.0, 1.0, holdout)
    hold = slice(TRAIN + shift, total)
    forecast = level[hold] + extra_sd * extra
    out: dict[str, Any] = {
        "id": sid,
        "actuals": [round(float(v), 4) for v in actual[:TRAIN]],
        "fitted": [round(float(v), 4) for v in level[:TRAIN]],
        "holdout": {
            "actuals": [round(float(v), 4) for v in actual[hold]],
            "forecasts": [round(float(v), 4) for v in forecast],
        },
    }
    if interval:
        width = 1.96 * float(np.sqrt(1.0 + extra_sd**2))
        out["holdout"]["lower"] = [round(float(v) - width, 4) for v in forecast]
        out["holdout"]["upper"] = [round(float(v) + width, 4) for v in forecast]
        out["holdout"]["level"] = 0.95
    if stamps:
        out["timestamps"] = [week(k) for k in range(TRAIN)]
        out["holdout"]["timestamps"] = [week(k) for k in range(TRAIN + shift, total)]
    return out


def fleet(
    version: str,
    *,
    model: str = "crumb-counts",
    ids: list[str] | None = None,
    baseline: str | None = None,
    **kw: Any,
) -> dict[str, Any]:
    """A request body: series ``ids`` (default ``dock-00`` to ``dock-29``)."""
    names = ids if ids is not None else [f"dock-{i:02d}" for i in range(30)]
    body: dict[str, Any] = {
        "model": model,
        "version": version,
        "series": [series(sid, int(sid.rsplit("-", 1)[-1]), **kw) for sid in names],
    }
    if baseline is not None:
        body["baseline"] = {"version": baseline}
    return body
