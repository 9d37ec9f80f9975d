"""A CSV upload turned into the JSON request body, for what the CSV query has no room for.

The CSV upload's query parameters carry names and numbers only; an inline policy
(``--policy FILE``) or ``--label`` values need the JSON body. The file is parsed by
``service.ingest`` (the service's own parser, so the rules are the same) and written back as
the body, value for value.
"""

from __future__ import annotations

import math
from typing import Any

from .errors import CliError
from .inputs import AssessInput


def parse_csv(inp: AssessInput) -> Any:
    """``service.ingest.parse_csv_request`` on ``inp`` (``parse_columnar_request`` for an
    Arrow or Parquet file); bad content becomes a one-line error."""
    from .. import ingest
    from ..core import InputError

    try:
        if inp.kind in ("arrow", "parquet"):
            from ..ingest.columnar import parse_columnar_request

            return parse_columnar_request(inp.data or b"", inp.kind, dict(inp.params))
        return ingest.parse_csv_request(inp.text or "", dict(inp.params))
    except ingest.RequestInvalid as exc:
        raise CliError(f"{inp.name}: invalid request: {errors_line(exc.errors)}") from None
    except InputError as exc:
        raise CliError(f"{inp.name}: invalid request: {exc}") from None


def errors_line(errors: Any, limit: int = 3) -> str:
    """The first ``limit`` ``{loc, message}`` problems on one line."""
    errors = list(errors)
    parts = []
    for e in errors[:limit]:
        loc, message = e.get("loc"), e.get("message", "invalid")
        text = " ".join((f"{loc}: {message}" if loc else str(message)).split())
        parts.append(text if len(text) <= 200 else text[:197] + "...")
    more = len(errors) - limit
    return "; ".join(parts) + (f" (and {more} more)" if more > 0 else "")


def _values(row: Any, n: int) -> list[float | None]:
    return [None if math.isnan(v) else float(v) for v in row[:n].tolist()]


def request_body(request: Any) -> dict[str, Any]:
    """The JSON body of a parsed ``service.ingest.AssessmentRequest``."""
    batch = request.batch
    h = batch.holdout
    series = []
    for i, sid in enumerate(request.ids):
        n = int(request.train_lengths[i])
        item: dict[str, Any] = {
            "id": sid,
            "actuals": _values(batch.actuals[i], n),
            "fitted": _values(request.fitted_sent(i), n),
        }
        if i < len(request.burn_in_given) and request.burn_in_given[i] is not None:
            item["burn_in"] = int(request.burn_in_given[i])
        if request.timestamps[i] is not None:
            item["timestamps"] = list(request.timestamps[i])
        if i < len(request.weights_given) and request.weights_given[i] is not None:
            item["weight"] = float(request.weights_given[i])
        m = int(request.holdout_lengths[i])
        if h is not None and m > 0:
            hold: dict[str, Any] = {
                "actuals": _values(h.actuals[i], m),
                "forecasts": _values(h.forecasts[i], m),
            }
            for key, matrix in (("lower", h.lower), ("upper", h.upper)):
                if matrix is not None and not all(math.isnan(v) for v in matrix[i, :m]):
                    hold[key] = _values(matrix[i], m)
            if h.level is not None and not math.isnan(h.level[i]) and "lower" in hold:
                hold["level"] = float(h.level[i])
            if request.holdout_timestamps[i] is not None:
                hold["timestamps"] = list(request.holdout_timestamps[i])
            item["holdout"] = hold
        series.append(item)
    body = {
        "model": request.model,
        "version": request.version,
        "policy": request.policy,
        "season_length": request.season_length,
        "model_params": request.model_params,
        "burn_in": request.request_burn_in,
        "labels": dict(request.labels),
        "series": series,
    }
    if getattr(request, "baseline", None) is not None:
        body["baseline"] = {"version": request.baseline}
    return body


def csv_as_body(inp: AssessInput) -> dict[str, Any]:
    """``inp`` (CSV, Arrow or Parquet) as a JSON body with its inline policy and labels."""
    body = request_body(parse_csv(inp))
    if inp.inline_policy is not None:
        body["policy"] = inp.inline_policy
    if inp.labels:
        body["labels"] = {**body["labels"], **inp.labels}
    return body
