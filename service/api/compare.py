"""``GET /v1/models/{model}/compare``: version ``b`` against version ``a`` on their stored
holdouts.

Both versions' latest stored assessments are read through the store; ``a``'s holdout is matched
to ``b``'s as a baseline is at submission (:mod:`service.api.baseline`), ``b``'s batch is
rebuilt from its stored inputs and the core assesses it under the policy that decided ``b``:
the ``baseline_accuracy`` check's figures, per series and for the fleet, are the answer.
Nothing is stored.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import orjson

from service.core import SeriesBatch, make_batch
from service.core.gate import assess
from service.core.registry import all_checks
from service.results import AssessmentResult
from service.store.port import Store
from service.store.records import SeriesInput

from . import baseline
from .errors import ApiError
from .policy_lookup import policy_from_document

CHECK = "baseline_accuracy"
PARAMS = ("a", "b")
ROW_COLUMNS = (
    "series_id",
    "weight",
    "matched_periods",
    "unmatched_periods",
    "matched_by",
    "status",
    "statistic",
    "p_value",
    "p_adjusted",
)


def check_def() -> Any:
    """The declaration of the baseline comparison, or ``None`` when no check of that name is
    registered."""
    for c in all_checks():
        if c.name == CHECK:
            return c
    return None


def detail_names() -> tuple[str, ...]:
    """The detail fields the baseline comparison declares, in its order (CSV columns)."""
    c = check_def()
    return () if c is None else tuple(c.details)


def check_params(params: Any) -> tuple[str, str]:
    """``a`` and ``b`` of the query; 422 naming every unknown or missing parameter."""
    errors = [
        {"loc": f"query.{k}", "message": f"unknown query parameter; expected one of {list(PARAMS)}"}
        for k in params
        if k not in PARAMS
    ]
    for k in PARAMS:
        value = params.get(k)
        if value is None or not value.strip():
            errors.append({"loc": f"query.{k}", "message": "is required: a stored version"})
    if errors:
        raise ApiError(422, f"{errors[0]['loc']}: {errors[0]['message']}", errors=errors)
    return params["a"], params["b"]


@dataclass(frozen=True, eq=False)
class Stored:
    """One version's stored inputs as the core's batch, with what matching needs."""

    batch: SeriesBatch
    ids: tuple[str, ...]
    holdout_lengths: np.ndarray
    holdout_timestamps: list[list[str] | None]


def _padded(rows: list[np.ndarray], width: int) -> np.ndarray:
    out = np.full((len(rows), width), np.nan)
    for i, r in enumerate(rows):
        out[i, : r.size] = r
    return out


def stored_batch(inputs: list[SeriesInput], season_length: int, model_params: int) -> Stored:
    """The batch a stored assessment was computed on, rebuilt from its stored inputs."""
    lengths = np.array([s.actuals.size for s in inputs], dtype=np.int64)
    width = int(lengths.max(initial=0))
    empty = np.empty(0)
    fc = [empty if s.holdout_forecasts is None else s.holdout_forecasts for s in inputs]
    h_len = np.array([r.size for r in fc], dtype=np.int64)
    hwidth = int(h_len.max(initial=0))
    kwargs: dict[str, Any] = {}
    if hwidth:
        kwargs["holdout_actuals"] = _padded(
            [empty if s.holdout_actuals is None else s.holdout_actuals for s in inputs], hwidth
        )
        kwargs["holdout_forecasts"] = _padded(fc, hwidth)
        if any(s.holdout_lower is not None for s in inputs):
            kwargs["holdout_lower"] = _padded(
                [empty if s.holdout_lower is None else s.holdout_lower for s in inputs], hwidth
            )
            kwargs["holdout_upper"] = _padded(
                [empty if s.holdout_upper is None else s.holdout_upper for s in inputs], hwidth
            )
            kwargs["level"] = [s.holdout_level for s in inputs]
    batch = make_batch(
        _padded([s.actuals for s in inputs], width),
        _padded([s.fitted for s in inputs], width),
        ids=[s.series_id for s in inputs],
        weights=[s.weight for s in inputs],
        season_length=season_length,
        model_params=model_params,
        lengths=lengths,
        burn_in=[s.burn_in for s in inputs],
        **kwargs,
    )
    return Stored(
        batch=batch,
        ids=batch.ids,
        holdout_lengths=h_len,
        holdout_timestamps=[s.holdout_timestamps for s in inputs],
    )


def compare(store: Store, model: str, a: str, b: str) -> dict[str, Any]:
    """Version ``b`` of ``model`` against version ``a`` (``a`` may be ``latest-pass``: the
    newest other version whose latest verdict passed)."""
    found_b = baseline.find(store, model, b, None, loc="query.b")
    head = store.assessment_head(assessment_id=found_b.id)
    inputs = store.series_inputs(assessment_id=found_b.id)
    if head is None or inputs is None:  # removed meanwhile
        raise ApiError(404, f"no assessment of model {model!r} version {b!r}")
    if not any(s.holdout_forecasts is not None and s.holdout_forecasts.size for s in inputs):
        raise ApiError(
            422,
            f"query.b: version {b!r} of model {model!r} has no holdout to compare",
            errors=[{"loc": "query.b", "message": "has no holdout to compare"}],
        )
    source = baseline.resolve(store, model, a, found_b.version, loc="query.a")
    doc = orjson.loads(head.head)
    stored = stored_batch(inputs, int(doc["season_length"]), int(doc["model_params"]))
    hwidth = stored.batch.holdout.forecasts.shape[1]  # type: ignore[union-attr]
    found = baseline.match(
        source, stored.ids, stored.holdout_lengths, stored.holdout_timestamps, hwidth, loc="query.a"
    )
    batch = baseline.with_baseline(stored.batch, found)
    result = assess(batch, policy_from_document(head.policy_document)).result()
    return answer(model, found, found_b, result)


def _version(summary: Any) -> dict[str, Any]:
    return {
        "version": summary.version,
        "assessment_id": summary.id,
        "created_at": summary.created_at.isoformat(),
        "verdict": summary.verdict,
    }


def _number(value: Any) -> Any:
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value


def answer(model: str, found: baseline.Match, b: Any, result: AssessmentResult) -> dict[str, Any]:
    """The JSON of a comparison: both versions, the matching, the fleet's and every series'
    figures of the baseline comparison."""
    block = found.block()
    matching = {k: v for k, v in block.items() if k not in ("version", "assessment_id")}
    matching.pop("created_at")
    matching.pop("verdict")
    summary = result.check(CHECK)
    data = result.to_dict()
    c = check_def()
    fleet_key = None if c is None or c.fleet is None else c.fleet.key
    rows = []
    for i, s in enumerate(data["series"]):
        entry = next((x for x in s["checks"] if x["name"] == CHECK), None)
        row: dict[str, Any] = {
            "series_id": s["id"],
            "weight": _number(s.get("weight")),
            "matched_periods": int(found.matched[i]),
            "unmatched_periods": int(found.unmatched_periods[i]),
            "matched_by": None
            if found.matched[i] == 0
            else ("timestamp" if found.by_timestamp[i] else "position"),
            "status": None if entry is None else entry["status"],
            "statistic": None if entry is None else entry.get("statistic"),
            "p_value": None if entry is None else entry.get("p_value"),
            "p_adjusted": None if entry is None else entry.get("p_adjusted"),
            "details": {} if entry is None else dict(entry.get("details") or {}),
        }
        rows.append(row)
    return {
        "model": model,
        "a": _version(found.source.summary),
        "b": _version(b),
        "matching": matching,
        "check": None if summary is None else summary.to_dict(),
        "fleet": None if fleet_key is None else data["fleet"].get(fleet_key),
        "reasons": [r.message for r in result.reasons if r.check == CHECK and r.series_id is None],
        "series": rows,
    }


def baseline_of(store: Store, assessment_id: str) -> dict[str, Any] | None:
    """The stored ``baseline`` field of an assessment with its ``baseline_accuracy`` summary
    (``check``) and fleet figures (``fleet``), or ``None`` when it had no baseline."""
    head = store.assessment_head(assessment_id=assessment_id)
    if head is None:
        return None
    doc = orjson.loads(head.head)
    block = doc.get("baseline")
    if not isinstance(block, dict):
        return None
    c = check_def()
    summary = next((x for x in doc.get("checks", ()) if x.get("name") == CHECK), None)
    fleet = None
    if c is not None and c.fleet is not None:
        fleet = (doc.get("fleet") or {}).get(c.fleet.key)
    reasons = [
        r["message"]
        for r in doc.get("reasons", ())
        if r.get("check") == CHECK and r.get("series_id") is None
    ]
    return {**block, "check": summary, "fleet": fleet, "reasons": reasons}


def csv_rows(body: dict[str, Any]) -> tuple[tuple[str, ...], list[list[Any]]]:
    """The comparison as one CSV row per series: the fixed columns, then the check's details."""
    names = detail_names()
    header = ROW_COLUMNS + tuple(names)
    rows = [
        [r[k] for k in ROW_COLUMNS] + [r["details"].get(n) for n in names] for r in body["series"]
    ]
    return header, rows
