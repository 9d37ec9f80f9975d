"""The CSV long-format upload: one row per series and period, parsed into a request.

:func:`parse_csv_request` goes in steps: the query parameters (:func:`check_params`,
:func:`read_level`, :func:`read_csv_envelope`), the header (:func:`read_header`), the rows
grouped by series (:func:`~service.ingest.csv_rows.read_rows`, errors naming
``line[N].column``), the series as wholes (:func:`check_series`), then the numbers of every
series at once (:func:`csv_columns`) and the last steps shared with the JSON body
(:func:`~service.ingest.assemble.build_request`), so bounds, order and the core's rules are
the same.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterator, Mapping

import numpy as np

from .arrays import check_magnitude, check_timestamps
from .assemble import build_request
from .csv_rows import Columns, ReadSeries, read_rows
from .fields import read_baseline_version, read_int, read_name, read_policy
from .request import (
    AssessmentRequest,
    Envelope,
    Errors,
    FlatRows,
    HoldoutColumns,
    RequestUnparseable,
    SeriesColumns,
)
from .shape import ENVELOPE, HOLDOUT, spec

CSV_REQUIRED = ("series_id", "actual", "fitted")
CSV_OPTIONAL = ("timestamp", "part", "lower", "upper")
CSV_PARAMS = frozenset(
    {"model", "version", "policy", "season_length", "model_params", "level", "baseline"}
)

_SEASON_LENGTH = spec(ENVELOPE, "season_length")
_MODEL_PARAMS = spec(ENVELOPE, "model_params")
_LEVEL = spec(HOLDOUT, "level")


def parse_csv_request(
    text: str | bytes,
    params: Mapping[str, str] | None = None,
    *,
    max_series: int | None = None,
    max_series_length: int | None = None,
) -> AssessmentRequest:
    """Parse a CSV long-format upload: one row per series and period.

    Columns ``series_id``, ``actual``, ``fitted`` (required), ``timestamp``, ``part`` (``train``
    by default, or ``holdout``; holdout rows carry the forecast in ``fitted``), ``lower``,
    ``upper``. ``params`` holds ``model``, ``version``, ``policy``, ``season_length``,
    ``model_params``, ``level`` and ``baseline`` (the query parameters). Rows of one series
    keep their order; series keep the order of their first row. Empty cells are missing
    values. Errors name ``line[N].column`` (line 1 is the header) or the series' field.
    """
    params = dict(params or {})
    errs = Errors()
    check_params(params, errs)
    reader = csv.reader(io.StringIO(_decode(text)), strict=True)
    cols = read_header(reader, errs)
    level = read_level(params, errs)
    series = read_rows(reader, cols, errs)
    envelope = read_csv_envelope(params, errs)
    if not series.ids and not errs.items:
        errs.add("body", "no data rows after the header")
    if max_series is not None and len(series.ids) > max_series:
        errs.add("series", f"holds {len(series.ids)} series; the limit is {max_series}")
    errs.check()
    check_series(series, errs, max_series_length)
    errs.check()
    return build_request(envelope, csv_columns(series, level, errs))


def check_params(params: Mapping[str, str], errs: Errors) -> None:
    """Report query parameters the CSV upload does not read (``store`` belongs to the API)."""
    for key in params:
        if key not in CSV_PARAMS and key not in ("store",):
            errs.add(key, f"unknown query parameter; expected one of {sorted(CSV_PARAMS)}")


def _decode(text: str | bytes) -> str:
    if isinstance(text, (bytes, bytearray)):
        try:
            return text.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise RequestUnparseable(
                [{"loc": "body", "message": f"not UTF-8 text: {exc.reason} at byte {exc.start}"}]
            ) from None
    return text[1:] if text.startswith("\ufeff") else text


def read_header(reader: Iterator[list[str]], errs: Errors) -> Columns:
    """The header row; raises with every problem found so far when a column is missing,
    unknown or repeated."""
    try:
        header = next(reader)
    except StopIteration:
        raise RequestUnparseable([{"loc": "body", "message": "empty CSV: no header row"}]) from None
    except csv.Error as exc:
        raise RequestUnparseable([{"loc": "line[1]", "message": f"malformed CSV: {exc}"}]) from None
    header = [h.strip() for h in header]
    col = {name: k for k, name in enumerate(header)}
    for name in CSV_REQUIRED:
        if name not in col:
            errs.add(
                f"header.{name}",
                f"required column {name!r} is missing (columns: {', '.join(header)})",
            )
    for name in header:
        if name not in CSV_REQUIRED and name not in CSV_OPTIONAL:
            errs.add(
                f"header.{name}",
                f"unknown column; expected {', '.join(CSV_REQUIRED + CSV_OPTIONAL)}",
            )
    if len(col) != len(header):
        errs.add("header", "a column name appears twice")
    errs.check()
    return Columns(
        width=len(header),
        series_id=col["series_id"],
        actual=col["actual"],
        fitted=col["fitted"],
        timestamp=col.get("timestamp"),
        part=col.get("part"),
        lower=col.get("lower"),
        upper=col.get("upper"),
    )


def read_level(params: Mapping[str, str], errs: Errors) -> float | None:
    """The ``level`` parameter: the nominal level of every series' interval."""
    raw = params.get("level")
    if raw is None or raw == "":
        return None
    try:
        level = float(raw)
    except ValueError:
        errs.add("level", f"must be a number, got {raw[:40]!r}")
        return None
    low, high = _LEVEL.above, _LEVEL.below
    if not low < level < high:  # type: ignore[operator]
        errs.add("level", f"must lie strictly between {low:g} and {high:g}, got {raw}")
        return None
    return level


def read_csv_envelope(params: Mapping[str, str], errs: Errors) -> Envelope:
    """The request's own fields, from the query parameters (a CSV upload has no labels)."""
    return Envelope(
        model=read_name(params, "model", errs, required=True),
        version=read_name(params, "version", errs, required=True),
        policy=read_policy(params.get("policy") or None, errs),
        season_length=_param_int(params, "season_length", errs, _SEASON_LENGTH.default, 1),
        model_params=_param_int(params, "model_params", errs, _MODEL_PARAMS.default, 0),
        labels={},
        baseline=None
        if params.get("baseline") is None
        else read_baseline_version(params["baseline"], "baseline.version", errs),
    )


def _param_int(
    params: Mapping[str, str], key: str, errs: Errors, default: int, minimum: int
) -> int:
    raw = params.get(key)
    if raw is None or raw == "":
        return default
    try:
        value = int(raw)
    except ValueError:
        errs.add(key, f"must be an integer, got {raw[:40]!r}")
        return default
    return read_int(value, key, errs, default=default, minimum=minimum)


def check_series(rs: ReadSeries, errs: Errors, max_length: int | None) -> None:
    """What a series needs as a whole: train rows, the length limit, a timestamp on every
    train row (when the column is there), bounds on the same holdout rows."""
    too_long = np.zeros(len(rs.ids), dtype=bool)
    if max_length is not None:
        too_long = np.maximum(rs.t_lengths, rs.h_lengths) > max_length
    for i, sid in enumerate(rs.ids):
        if not rs.t_lengths[i]:
            errs.add(f"series[{i}].actuals", f"series {sid!r} has holdout rows but no train rows")
            continue
        if too_long[i]:
            errs.add(f"series[{i}].actuals", f"series {sid!r} has more than {max_length} rows")
            continue
        if rs.t_stamps is not None and not all(rs.t_stamps[i]):
            errs.add(
                f"series[{i}].timestamps",
                f"series {sid!r}: every row needs a timestamp when the column is present",
            )
        if rs.interval[i] and rs.uneven_bounds[i]:
            errs.add(
                f"series[{i}].holdout.lower",
                f"series {sid!r}: lower and upper must be given on the same holdout rows",
            )


def csv_columns(rs: ReadSeries, level: float | None, errs: Errors) -> SeriesColumns:
    """Every series' numbers as flat arrays, checked at once; raises with every problem."""
    n = len(rs.ids)
    actuals = FlatRows(rs.actual, rs.t_lengths)
    fitted = FlatRows(rs.fitted, rs.t_lengths)
    check_magnitude(actuals, _locs(n, "actuals"), errs)
    check_magnitude(fitted, _locs(n, "fitted"), errs)
    stamps: list[list[str] | None] = [None] * n if rs.t_stamps is None else list(rs.t_stamps)
    check_timestamps(stamps, _locs(n, "timestamps"), errs)
    holdout = _holdout_columns(rs, level, errs) if rs.h_lengths.any() else None
    errs.check()
    return SeriesColumns(
        ids=rs.ids,
        actuals=actuals,
        fitted=fitted,
        timestamps=stamps,
        weights=[None] * n,
        holdout=holdout,
    )


def _holdout_columns(rs: ReadSeries, level: float | None, errs: Errors) -> HoldoutColumns:
    n = len(rs.ids)
    actuals = FlatRows(rs.h_actual, rs.h_lengths)
    forecasts = FlatRows(rs.h_forecast, rs.h_lengths)
    check_magnitude(actuals, _locs(n, "holdout.actuals"), errs)
    check_magnitude(forecasts, _locs(n, "holdout.forecasts"), errs)
    interval = rs.interval
    lower = upper = None
    if interval.any():
        rows = interval[rs.h_series]
        lengths = np.where(interval, rs.h_lengths, 0)
        lower = FlatRows(rs.lower[rows], lengths)
        upper = FlatRows(rs.upper[rows], lengths)
        check_magnitude(lower, _locs(n, "holdout.lower"), errs)
        check_magnitude(upper, _locs(n, "holdout.upper"), errs)
    stamps: list[list[str] | None] = [None] * n
    if rs.h_stamps is not None:
        stamps = [s if s and all(s) else None for s in rs.h_stamps]
    check_timestamps(stamps, _locs(n, "holdout.timestamps"), errs)
    return HoldoutColumns(
        actuals=actuals,
        forecasts=forecasts,
        lower=lower,
        upper=upper,
        levels=[level if has else None for has in interval.tolist()],
        timestamps=stamps,
    )


def _locs(n: int, key: str) -> list[str]:
    return [f"series[{i}].{key}" for i in range(n)]
