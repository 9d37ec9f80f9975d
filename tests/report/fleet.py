"""An invented fleet for the report tests.

Invented scenario (not real data): weekly litres of oat milk delivered to the cafes of a
made-up chain, "Larkspur Coffee", 2024-2025. A forecasting model's fitted values are simulated
around each series with residual problems planted on purpose: white noise (should pass),
autocorrelated errors (Ljung-Box), a constant offset (bias), errors that grow with the level
(ARCH / funnel), and a holdout whose forecasts drift away.
"""

from __future__ import annotations

from datetime import date, timedelta
from typing import Any

import numpy as np

from service.core import make_batch
from service.core.gate import assess
from service.core.policy import default_policy
from service.results import AssessmentDocument

KINDS = ("clean", "autocorrelated", "biased", "funnel", "drifting")


def _series(rng: np.random.Generator, sid: str, kind: str, t: int, h: int) -> dict[str, Any]:
    weeks = np.arange(t + h)
    level = 400 + 60 * np.sin(2 * np.pi * weeks / 52) + 0.8 * weeks
    noise = rng.normal(0.0, 12.0, t + h)
    if kind == "autocorrelated":
        e = np.zeros(t + h)
        for i in range(1, t + h):
            e[i] = 0.75 * e[i - 1] + noise[i]
        noise = e
    elif kind == "biased":
        noise = noise + 14.0
    elif kind == "funnel":
        noise = noise * (0.2 + 2.5 * (weeks / (t + h)) ** 2)
    actual = level + noise
    fitted = level.copy()
    forecast = level[t:].copy()
    if kind == "drifting":
        forecast = forecast - 6.0 * np.arange(1, h + 1)
    start = date(2024, 1, 1)
    stamps = [(start + timedelta(weeks=int(i))).isoformat() for i in range(t)]
    fit = [round(float(v), 3) for v in fitted[:t]]
    fit[0] = None  # a one-step fit has no value for the first week
    half = 1.96 * 12.0 * np.sqrt(np.arange(1, h + 1) ** 0.5)
    return {
        "id": sid,
        "actuals": [round(float(v), 3) for v in actual[:t]],
        "fitted": fit,
        "timestamps": stamps,
        "holdout": {
            "actuals": [round(float(v), 3) for v in actual[t:]],
            "forecasts": [round(float(v), 3) for v in forecast],
            "lower": [round(float(v), 3) for v in forecast - half],
            "upper": [round(float(v), 3) for v in forecast + half],
            "level": 0.95,
        },
    }


def invented_body(n_series: int = 10, *, t: int = 104, h: int = 12, seed: int = 7) -> dict:
    """A request body in the API's shape; series cycle through :data:`KINDS`."""
    rng = np.random.default_rng(seed)
    series = [
        _series(
            rng, f"cafe-{i + 1:02d}/oat-milk-{KINDS[i % len(KINDS)]}", KINDS[i % len(KINDS)], t, h
        )
        for i in range(n_series)
    ]
    return {
        "model": "larkspur-oat-milk",
        "version": "2026.12.01",
        "policy": "default",
        "season_length": 52,
        "model_params": 2,
        "labels": {"scenario": "invented"},
        "series": series,
    }


def assessment_of(body: dict) -> dict:
    """Run the gate on ``body`` and return the dict the API would store."""
    s = body["series"]
    batch = make_batch(
        [x["actuals"] for x in s],
        [x["fitted"] for x in s],
        ids=[x["id"] for x in s],
        season_length=body.get("season_length", 1),
        model_params=body.get("model_params", 0),
        holdout_actuals=[x["holdout"]["actuals"] for x in s],
        holdout_forecasts=[x["holdout"]["forecasts"] for x in s],
        holdout_lower=[x["holdout"]["lower"] for x in s],
        holdout_upper=[x["holdout"]["upper"] for x in s],
        level=[x["holdout"]["level"] for x in s],
    )
    result = assess(batch, default_policy()).to_dict()
    return {
        "id": "7b1c0d2e-invented",
        "created_at": "2026-12-01T22:00:00Z",
        "model": body["model"],
        "version": body["version"],
        "stored": True,
        "labels": body.get("labels", {}),
        "season_length": body.get("season_length", 1),
        "model_params": body.get("model_params", 0),
        **result,
    }


def document_of(body: dict) -> AssessmentDocument:
    """:func:`assessment_of` read back as the typed document the report renders."""
    return AssessmentDocument.from_dict(assessment_of(body))
