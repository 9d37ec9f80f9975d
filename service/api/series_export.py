"""``GET /v1/assessments/{id}/series``: the per-series results, one row per series and check.

As JSON (the default) a page of rows, ``limit`` at a time, with a ``next`` link; as CSV
(``Accept: text/csv``), an Arrow IPC stream (``application/vnd.apache.arrow.stream``) or
Parquet (``application/vnd.apache.parquet``) a download of every row asked for, with flat
columns: the row's own (``series_id``, ``check``, ``status``, ``statistic``, ``p_value``,
``p_adjusted``...) and the common details (:data:`DETAIL_COLUMNS`: mean error, lags, degrees
of freedom, the largest autocorrelation...), empty where the row's check has no such figure,
instead of one cell of packed JSON. The rows are built column by column from the stored
series table; pyarrow is imported only for the columnar formats.

Query parameters, each checked (a 422 names an unknown one and any value off): ``check``
(a registered check's name), ``status`` (pass, warn, fail or skipped), ``limit`` and
``cursor`` (JSON pages; a page holds at most ``PLUMBLINE_PAGE_LIMIT_MAX`` rows, the
default).
"""

from __future__ import annotations

import base64
import io
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any
from urllib.parse import urlencode

import numpy as np
import orjson

from service.core.registry import all_checks
from service.results import SeriesTable

from .csvout import accept_items, to_csv
from .errors import ApiError

JSON = "application/json"
CSV = "text/csv"
ARROW = "application/vnd.apache.arrow.stream"
PARQUET = "application/vnd.apache.parquet"
MEDIA_TYPES = (JSON, CSV, ARROW, PARQUET)

ROW_COLUMNS = (
    "assessment_id",
    "series_id",
    "series_verdict",
    "n_obs",
    "check",
    "status",
    "statistic",
    "p_value",
    "p_adjusted",
    "message",
)
"""Every row's own columns, in order (the JSON rows add ``details``, the whole object)."""

DETAIL_COLUMNS: dict[str, str] = {
    "mean_error": "float",
    "std_error": "float",
    "percent_bias": "float",
    "residual_sd": "float",
    "lags": "int",
    "df": "float",
    "peak_lag_1": "int",
    "peak_acf_1": "float",
    "skewness": "float",
    "excess_kurtosis": "float",
    "window": "int",
    "sum_error": "float",
    "n_missing": "int",
    "horizon": "int",
    "mae": "float",
    "rmse": "float",
    "scale": "float",
    "skill": "float",
    "best_benchmark": "text",
    "coverage": "float",
    "level": "float",
    "misses": "int",
    "method": "text",
}
"""The details the downloads give a column of their own (by key, with the column's type):
the figures that say how large a flaw is and what was tested, under the names the checks give
them; a row whose check has no such detail leaves it empty."""

STATUSES = ("pass", "warn", "fail", "skipped")
PARAMETERS = frozenset({"check", "status", "limit", "cursor"})
_CURSOR_PREFIX = "row:"

_ROW_TYPES = {
    "assessment_id": "text",
    "series_id": "text",
    "series_verdict": "text",
    "n_obs": "int",
    "check": "text",
    "status": "text",
    "statistic": "float",
    "p_value": "float",
    "p_adjusted": "float",
    "message": "text",
}


def _bad(loc: str, message: str) -> ApiError:
    return ApiError(422, f"{loc}: {message}", errors=[{"loc": f"query.{loc}", "message": message}])


@dataclass(frozen=True)
class Query:
    """The endpoint's query, checked."""

    check: str | None
    status: str | None
    limit: int
    offset: int


def read_query(params: Sequence[tuple[str, str]], limit_max: int) -> Query:
    """The checked query; a 422 naming each unknown parameter, a repeated one, or a value
    that is off."""
    seen: dict[str, str] = {}
    for key, value in params:
        if key not in PARAMETERS:
            raise _bad(key[:60], f"unknown query parameter; expected one of {sorted(PARAMETERS)}")
        if key in seen:
            raise _bad(key, "given twice")
        seen[key] = value
    check = seen.get("check")
    names = [c.name for c in all_checks()]
    if check is not None and check not in names:
        raise _bad("check", f"must be a registered check ({', '.join(names)}), got {check[:40]!r}")
    status = seen.get("status")
    if status is not None and status not in STATUSES:
        raise _bad("status", f"must be one of {', '.join(STATUSES)}, got {status[:40]!r}")
    limit = limit_max
    if "limit" in seen:
        raw = seen["limit"]
        if not raw.isdigit() or not 1 <= int(raw) <= limit_max:
            raise _bad("limit", f"must be a whole number from 1 to {limit_max}, got {raw[:40]!r}")
        limit = int(raw)
    offset = 0 if "cursor" not in seen else _decode_cursor(seen["cursor"])
    return Query(check=check, status=status, limit=limit, offset=offset)


def encode_cursor(offset: int) -> str:
    return base64.urlsafe_b64encode(f"{_CURSOR_PREFIX}{offset}".encode()).decode().rstrip("=")


def _decode_cursor(cursor: str) -> int:
    try:
        raw = base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4)).decode()
    except (ValueError, UnicodeDecodeError):
        raw = ""
    number = raw.removeprefix(_CURSOR_PREFIX)
    if not raw.startswith(_CURSOR_PREFIX) or not number.isdigit() or len(number) > 12:
        raise _bad("cursor", "not a cursor this service gave out")
    return int(number)


def negotiate(accept: str | None) -> str:
    """The media type to answer among :data:`MEDIA_TYPES` (by ``Accept``, q-values and
    order; JSON when nothing listed is offered)."""
    if not accept:
        return JSON
    best: tuple[float, int, str] | None = None
    for q, position, kind in accept_items(accept):
        if kind in ("*/*", "application/*"):
            kind = JSON
        elif kind == "text/*":
            kind = CSV
        if kind in MEDIA_TYPES and q > 0 and (best is None or (q, -position) > best[:2]):
            best = (q, -position, kind)
    return JSON if best is None else best[2]


# ------------------------------------------------------------------------------ the rows


@dataclass(frozen=True)
class Rows:
    """The rows asked for, column by column (series by series, each series' checks in
    catalogue order); :meth:`details` makes one row's details object (for the JSON rows)."""

    columns: dict[str, list[Any]]
    picked: list[int]
    checks: list[Any]
    n_series: int

    def __len__(self) -> int:
        return len(self.picked)

    def details(self, i: int) -> dict[str, Any]:
        """The details object of the ``i``-th row asked for."""
        row = self.picked[i]
        c = self.checks[row // self.n_series]
        return {key: values[row % self.n_series] for key, values in c.details.items()}


def rows_of(assessment_id: str, table: SeriesTable, query: Query) -> Rows:
    """Every row of ``table`` that passes the query's filters (paging not applied)."""
    checks = [c for c in table.columns.checks if query.check is None or c.name == query.check]
    n, k = len(table), len(checks)
    # Check by check, then into series order: row (series i, check j) is at j * n + i.
    order = np.arange(n * k).reshape(k, n).T.ravel()
    status = [s for c in checks for s in c.status]
    if query.status is not None:
        order = order[np.asarray(status, dtype=object)[order] == query.status]
    picked = order.tolist()

    def column(values: list[Any]) -> list[Any]:
        return [values[i] for i in picked]

    ids, verdicts, n_obs = (list(table.column(name)) for name in ("id", "verdict", "n_obs"))
    columns: dict[str, list[Any]] = {
        "assessment_id": [assessment_id] * len(picked),
        "series_id": column(ids * k),
        "series_verdict": column(verdicts * k),
        "n_obs": column(n_obs * k),
        "check": column([c.name for c in checks for _ in range(n)]),
        "status": column(status),
    }
    for name in ("statistic", "p_value", "p_adjusted", "message"):
        columns[name] = column([v for c in checks for v in getattr(c, name)])
    missing = (None,) * n
    for key in DETAIL_COLUMNS:
        columns[key] = column([v for c in checks for v in c.details.get(key, missing)])
    return Rows(columns=columns, picked=picked, checks=checks, n_series=n)


def page_body(assessment_id: str, rows: Rows, query: Query, path: str) -> tuple[bytes, str | None]:
    """The JSON page (``items``, ``next_cursor``, ``next``) and its next link, if any."""
    start, stop = query.offset, query.offset + query.limit
    items = [
        {
            **{name: rows.columns[name][i] for name in ROW_COLUMNS},
            "details": rows.details(i),
        }
        for i in range(start, min(stop, len(rows)))
    ]
    next_link = None
    cursor = None
    if stop < len(rows):
        cursor = encode_cursor(stop)
        params = {
            k: v for k, v in (("check", query.check), ("status", query.status)) if v is not None
        }
        params |= {"limit": str(query.limit), "cursor": cursor}
        next_link = f"{path}?{urlencode(params)}"
    body = orjson.dumps(
        {
            "assessment_id": assessment_id,
            "items": items,
            "next_cursor": cursor,
            "next": next_link,
        }
    )
    return body, next_link


def download(rows: Rows, media_type: str) -> bytes:
    """Every row as CSV, an Arrow IPC stream or Parquet, with the flat columns."""
    names = [*ROW_COLUMNS, *DETAIL_COLUMNS]
    if media_type == CSV:
        width = len(rows)
        cols = [rows.columns[name] for name in names]
        return to_csv(names, ([c[i] for c in cols] for i in range(width)))
    import pyarrow as pa

    types = {"text": pa.string(), "int": pa.int64(), "float": pa.float64()}
    kinds = {**_ROW_TYPES, **DETAIL_COLUMNS}
    table = pa.table(
        {
            name: pa.array(_typed(rows.columns[name], kinds[name]), type=types[kinds[name]])
            for name in names
        }
    )
    sink = io.BytesIO()
    if media_type == ARROW:
        with pa.ipc.new_stream(sink, table.schema) as writer:
            writer.write_table(table)
    else:
        import pyarrow.parquet as pq

        pq.write_table(table, sink)
    return sink.getvalue()


def _typed(values: list[Any], kind: str) -> list[Any]:
    """Values for a typed column: a whole number kept where the column holds integers,
    anything else that is not of the column's kind left empty."""
    if kind == "text":
        return [v if isinstance(v, str) else None for v in values]
    if kind == "int":
        return [v if isinstance(v, int) and not isinstance(v, bool) else None for v in values]
    return [
        float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else None
        for v in values
    ]
