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
import warnings
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import replace
from typing import overload

import numpy as np

from .arrays import check_magnitude, check_timestamps
from .assemble import build_request
from .csv_dialect import detect_delimiter, header_summary
from .csv_rows import Columns, ReadSeries, read_rows
from .fields import read_baseline_version, read_int, read_name, read_policy
from .request import (
    QUOTE_LIMIT,
    AssessmentRequest,
    Envelope,
    Errors,
    FlatRows,
    HoldoutColumns,
    RequestUnparseable,
    SeriesColumns,
    quote,
)
from .shape import ENVELOPE, HOLDOUT, spec

CSV_REQUIRED = ("series_id", "actual", "fitted")
CSV_OPTIONAL = ("timestamp", "part", "lower", "upper")
CSV_PARAMS = frozenset(
    {"model", "version", "policy", "season_length", "model_params", "level", "baseline", "burn_in"}
)
_KNOWN_COLUMNS = frozenset(CSV_REQUIRED + CSV_OPTIONAL)
_UNKNOWN_SHOWN = 5
"""Unknown columns named one by one; the rest are counted."""

_SEASON_LENGTH = spec(ENVELOPE, "season_length")
_MODEL_PARAMS = spec(ENVELOPE, "model_params")
_BURN_IN = spec(ENVELOPE, "burn_in")
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
    decoded = _decode(text)
    delimiter = detect_delimiter(decoded, _KNOWN_COLUMNS)
    reader = csv.reader(io.StringIO(decoded), delimiter=delimiter, strict=True)
    cols = read_header(reader, errs, delimiter)
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


def read_header(reader: Iterator[list[str]], errs: Errors, delimiter: str = ",") -> Columns:
    """The header row (names in any case); raises with every problem found so far when a
    column is missing, unknown or repeated. Errors quote at most a short prefix of a cell."""
    try:
        header = next(reader)
    except StopIteration:
        raise RequestUnparseable([{"loc": "body", "message": "empty CSV: no header row"}]) from None
    except csv.Error as exc:
        raise RequestUnparseable([{"loc": "line[1]", "message": f"malformed CSV: {exc}"}]) from None
    shown = [h.strip() for h in header]
    header = [h.lower() for h in shown]
    col = {name: k for k, name in enumerate(header)}
    missing = [name for name in CSV_REQUIRED if name not in col]
    if missing:
        seen = header_summary(shown, delimiter)
        for name in missing:
            errs.add(f"header.{name}", f"required column {name!r} is missing ({seen})")
            seen = "see above"
    expected = ", ".join(CSV_REQUIRED + CSV_OPTIONAL)
    unknown = [k for k, name in enumerate(header) if name not in _KNOWN_COLUMNS]
    for k in unknown[:_UNKNOWN_SHOWN]:
        errs.add(
            f"header.{shown[k][:QUOTE_LIMIT]}",
            f"unknown column {quote(shown[k])}; expected {expected} (in any case)",
        )
    if len(unknown) > _UNKNOWN_SHOWN:
        errs.add("header", f"{len(unknown) - _UNKNOWN_SHOWN:,} more unknown columns")
    if len(col) != len(header):
        twice = sorted({n for n in header if header.count(n) > 1})
        errs.add(
            "header",
            "a column name appears twice (names are read in any case): "
            + ", ".join(quote(n) for n in twice[:5]),
        )
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
        burn_in=_param_int(params, "burn_in", errs, _BURN_IN.default, 0),
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
    # The series with a problem, found with array operations; the sentences one by one.
    flagged = (rs.t_lengths == 0) | too_long | (rs.interval & rs.uneven_bounds)
    if rs.t_stamps is not None:
        flagged |= np.array([not all(s) for s in rs.t_stamps], dtype=bool)
    for i in np.flatnonzero(flagged).tolist():
        sid = rs.ids[i]
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


def in_time_order(rs: ReadSeries, errs: Errors) -> ReadSeries:
    """The rows of each series sorted by timestamp (train rows and holdout rows apart), when
    the upload has a timestamp column whose every stamp parses; two rows of one series at the
    same time are reported. Without timestamps (or with one that does not parse, which
    :func:`~service.ingest.arrays.check_timestamps` reports) the file order stays."""
    if rs.t_stamps is None:
        return rs
    train = _time_order(rs.t_stamps, rs.ids, "timestamps", errs)
    hold = _time_order(rs.h_stamps or [], rs.ids, "holdout.timestamps", errs)
    if train is None and hold is None:
        return rs
    changes: dict[str, object] = {}
    if train is not None:
        changes.update(
            actual=rs.actual[train],
            fitted=rs.fitted[train],
            t_stamps=_reordered(rs.t_stamps, train),
        )
    if hold is not None and rs.h_stamps is not None:
        changes.update(
            h_actual=rs.h_actual[hold],
            h_forecast=rs.h_forecast[hold],
            lower=rs.lower[hold],
            upper=rs.upper[hold],
            h_stamps=_reordered(rs.h_stamps, hold),
        )
    return replace(rs, **changes)  # type: ignore[arg-type]


def _time_order(
    stamps: list[list[str]], ids: list[str], field: str, errs: Errors
) -> np.ndarray | None:
    """The permutation of the flat rows that sorts each series' rows by time (stable), or
    ``None`` when they are in order already or a stamp does not parse."""
    flat = [t for row in stamps for t in row]
    if len(flat) < 2 or not all(flat):
        return None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            times = np.array(flat, dtype="datetime64[us]").astype(np.int64)
    except (ValueError, OverflowError):
        return None
    lengths = np.fromiter(map(len, stamps), dtype=np.int64, count=len(stamps))
    series = np.repeat(np.arange(len(stamps)), lengths)
    order = np.lexsort((times, series))
    sorted_times = times[order]
    same = (np.diff(sorted_times) == 0) & (np.diff(series[order]) == 0)
    reported: set[int] = set()
    for pos in np.flatnonzero(same):
        i = int(series[order][pos])
        if i in reported:
            continue
        reported.add(i)
        errs.add(
            f"series[{i}].{field}",
            f"series {quote(ids[i])} has two rows at {quote(flat[int(order[pos])])}: one row "
            "per series and period",
        )
    if (order == np.arange(order.size)).all():
        return None
    return order


def _reordered(stamps: list[list[str]], order: np.ndarray) -> list[list[str]]:
    flat = [t for row in stamps for t in row]
    moved = [flat[k] for k in order.tolist()]
    out, start = [], 0
    for row in stamps:
        out.append(moved[start : start + len(row)])
        start += len(row)
    return out


def csv_columns(rs: ReadSeries, level: float | None, errs: Errors) -> SeriesColumns:
    """Every series' numbers as flat arrays, checked at once; raises with every problem.
    Each series' rows are first put in time order (:func:`in_time_order`)."""
    rs = in_time_order(rs, errs)
    errs.check()
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


class _Locs(Sequence[str]):
    """``series[i].{key}`` for ``i < n``, each made when asked for (most are never read)."""

    def __init__(self, n: int, key: str) -> None:
        self._n, self._key = n, key

    def __len__(self) -> int:
        return self._n

    @overload
    def __getitem__(self, i: int) -> str: ...

    @overload
    def __getitem__(self, i: slice) -> list[str]: ...

    def __getitem__(self, i: int | slice) -> str | list[str]:
        if isinstance(i, slice):
            return [self[k] for k in range(*i.indices(self._n))]
        if not -self._n <= i < self._n:
            raise IndexError(i)
        return f"series[{i % self._n}].{self._key}"


def _locs(n: int, key: str) -> Sequence[str]:
    return _Locs(n, key)
