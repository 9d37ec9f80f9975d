"""Shared test data for the HTTP tests."""

from __future__ import annotations

from typing import Any

import numpy as np

ADMIN_TOKEN = "test-admin-token-0123456789"
ADMIN = {"Authorization": f"Bearer {ADMIN_TOKEN}"}


def white_noise_series(
    sid: str, n: int = 156, seed: int = 0, bias: float = 0.0, phi: float = 0.0, holdout: int = 0
) -> dict[str, Any]:
    """A series whose residuals are N(bias, 1) (AR(1) with coefficient ``phi``)."""
    rng = np.random.default_rng(seed)
    level = 100.0 + 10.0 * np.sin(np.arange(n + holdout) * 2 * np.pi / 52)
    e = rng.normal(0.0, 1.0, n + holdout)
    for t in range(1, e.size):
        e[t] += phi * e[t - 1]
    actual = level + e + bias
    fitted = level.copy()
    out: dict[str, Any] = {
        "id": sid,
        "actuals": [round(float(v), 4) for v in actual[:n]],
        "fitted": [round(float(v), 4) for v in fitted[:n]],
    }
    if holdout:
        out["holdout"] = {
            "actuals": [round(float(v), 4) for v in actual[n:]],
            "forecasts": [round(float(v), 4) for v in fitted[n:]],
            "lower": [round(float(v) - 1.96, 4) for v in fitted[n:]],
            "upper": [round(float(v) + 1.96, 4) for v in fitted[n:]],
            "level": 0.95,
        }
    return out
