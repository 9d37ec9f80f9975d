"""The CSV long-format upload: one row per series and period, parsed into a request.

The standard ``csv`` reader hands over text a cell at a time, so the rows are checked and
grouped by series as they are read (errors name ``line[N].column``). :func:`parse_csv_request`
goes in steps: the query parameters (:func:`check_params`, :func:`read_level`,
:func:`read_csv_envelope`), the header (:func:`read_header`), the rows (:func:`read_rows`),
the series they make (:func:`check_groups`), then the numbers of every series at once
(:func:`csv_columns`) and the last steps shared with the JSON body
(:func:`~service.ingest.assemble.build_request`), so bounds, order and the core's rules are
the same.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from itertools import chain

import numpy as np

from .arrays import check_magnitude, check_timestamps
from .assemble import build_request
from .fields import read_int, read_name, read_policy
from .request import (
    MAX_NAME_LENGTH,
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
CSV_PARAMS = frozenset({"model", "version", "policy", "season_length", "model_params", "level"})

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
    ``model_params`` and ``level`` (the query parameters). Rows of one series keep their order;
    series keep the order of their first row. Empty cells are missing values. Errors name
    ``line[N].column`` (line 1 is the header) or the series' field.
    """
    params = dict(params or {})
    errs = Errors()
    check_params(params, errs)
    reader = csv.reader(io.StringIO(_decode(text)), strict=True)
    cols = read_header(reader, errs)
    level = read_level(params, errs)
    groups = read_rows(reader, cols, errs)
    envelope = read_csv_envelope(params, errs)
    if not groups and not errs.items:
        errs.add("body", "no data rows after the header")
    if max_series is not None and len(groups) > max_series:
        errs.add("series", f"holds {len(groups)} series; the limit is {max_series}")
    errs.check()
    check_groups(groups, cols.timestamp is not None, errs, max_series_length)
    errs.check()
    return build_request(envelope, csv_columns(groups, cols.timestamp is not None, level, errs))


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


@dataclass(frozen=True)
class Columns:
    """Where each column of the upload is (``None``: an optional column left out)."""

    width: int
    series_id: int
    actual: int
    fitted: int
    timestamp: int | None
    part: int | None
    lower: int | None
    upper: int | None


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


class Group:
    """The rows of one series as read: train values and stamps, holdout values and stamps
    (NaN where a cell is empty)."""

    __slots__ = (
        "actuals",
        "fitted",
        "h_actuals",
        "h_forecasts",
        "h_stamps",
        "lower",
        "stamps",
        "upper",
    )

    def __init__(self) -> None:
        self.actuals: list[float] = []
        self.fitted: list[float] = []
        self.stamps: list[str] = []
        self.h_actuals: list[float] = []
        self.h_forecasts: list[float] = []
        self.lower: list[float] = []
        self.upper: list[float] = []
        self.h_stamps: list[str] = []

    def add(self, numbers: tuple[float, float, float, float], stamp: str, *, holdout: bool) -> None:
        """One row's actual, fitted (the forecast on a holdout row), lower, upper, stamp."""
        actual, fitted, lower, upper = numbers
        if holdout:
            self.h_actuals.append(actual)
            self.h_forecasts.append(fitted)
            self.lower.append(lower)
            self.upper.append(upper)
            self.h_stamps.append(stamp)
        else:
            self.actuals.append(actual)
            self.fitted.append(fitted)
            self.stamps.append(stamp)

    @property
    def has_interval(self) -> bool:
        """A bound is given on some holdout row."""
        return any(v == v for v in chain(self.lower, self.upper))


def read_rows(reader: Iterator[list[str]], cols: Columns, errs: Errors) -> dict[str, Group]:
    """Every data row, grouped by series in the order of their first rows."""
    groups: dict[str, Group] = {}
    line = 1
    try:
        for row in reader:
            line += 1
            if _read_row(row, line, cols, groups, errs) and errs.full:
                break
    except csv.Error as exc:
        raise RequestUnparseable(
            [{"loc": f"line[{line + 1}]", "message": f"malformed CSV: {exc}"}]
        ) from None
    return groups


def _read_row(
    row: list[str], line: int, cols: Columns, groups: dict[str, Group], errs: Errors
) -> bool:
    """Add one row to its series. ``True`` when the row was taken or refused for its width:
    the reading stops there once the error list is full."""
    if not row or (len(row) == 1 and not row[0].strip()):
        return False
    if len(row) != cols.width:
        errs.add(f"line[{line}]", f"has {len(row)} cells, the header has {cols.width}")
        return True
    sid = row[cols.series_id].strip()
    if not sid:
        errs.add(f"line[{line}].series_id", "must not be empty")
        return False
    part = row[cols.part].strip() if cols.part is not None else ""
    if part not in ("", "train", "holdout"):
        errs.add(f"line[{line}].part", f"must be train or holdout, got {part[:40]!r}")
        return False
    g = groups.get(sid)
    if g is None:
        if len(sid) > MAX_NAME_LENGTH or "\x00" in sid:
            errs.add(
                f"line[{line}].series_id",
                f"must be at most {MAX_NAME_LENGTH} characters, without NUL",
            )
            return False
        g = groups[sid] = Group()
    numbers = _row_numbers(row, line, cols, errs)
    stamp = row[cols.timestamp].strip() if cols.timestamp is not None else ""
    holdout = part == "holdout"
    if not holdout and (
        (cols.lower is not None and row[cols.lower].strip())
        or (cols.upper is not None and row[cols.upper].strip())
    ):
        errs.add(f"line[{line}].lower", "lower and upper belong on holdout rows only")
    g.add(numbers, stamp, holdout=holdout)
    return True


def _row_numbers(
    row: list[str], line: int, cols: Columns, errs: Errors
) -> tuple[float, float, float, float]:
    """The row's actual, fitted, lower and upper (NaN where empty or refused)."""
    out = []
    for key, k in (
        ("actual", cols.actual),
        ("fitted", cols.fitted),
        ("lower", cols.lower),
        ("upper", cols.upper),
    ):
        cell = row[k].strip() if k is not None else ""
        try:
            out.append(_csv_float(cell))
        except ValueError:
            errs.add(f"line[{line}].{key}", f"must be a finite number or empty, got {cell[:40]!r}")
            out.append(math.nan)
    return out[0], out[1], out[2], out[3]


def _csv_float(text: str) -> float:
    """A CSV cell as a number: empty is missing (NaN); NaN/inf text is refused."""
    if not text:
        return math.nan
    value = float(text)
    if not math.isfinite(value):
        raise ValueError("not finite")
    return value


def check_groups(
    groups: Mapping[str, Group], with_stamps: bool, errs: Errors, max_length: int | None
) -> None:
    """What a series needs as a whole: train rows, the length limit, a timestamp on every
    train row (when the column is there), bounds on the same holdout rows."""
    for i, (sid, g) in enumerate(groups.items()):
        if not g.actuals:
            errs.add(f"series[{i}].actuals", f"series {sid!r} has holdout rows but no train rows")
            continue
        if max_length is not None and max(len(g.actuals), len(g.h_actuals)) > max_length:
            errs.add(f"series[{i}].actuals", f"series {sid!r} has more than {max_length} rows")
            continue
        if with_stamps and not all(g.stamps):
            errs.add(
                f"series[{i}].timestamps",
                f"series {sid!r}: every row needs a timestamp when the column is present",
            )
        if g.has_interval and [v == v for v in g.lower] != [v == v for v in g.upper]:
            errs.add(
                f"series[{i}].holdout.lower",
                f"series {sid!r}: lower and upper must be given on the same holdout rows",
            )


def csv_columns(
    groups: Mapping[str, Group], with_stamps: bool, level: float | None, errs: Errors
) -> SeriesColumns:
    """Every series' numbers as flat arrays, checked at once; raises with every problem."""
    gs = list(groups.values())
    n = len(gs)
    actuals = _flat(gs, "actuals")
    fitted = _flat(gs, "fitted", actuals.lengths)
    check_magnitude(actuals, _locs(n, "actuals"), errs)
    check_magnitude(fitted, _locs(n, "fitted"), errs)
    stamps: list[list[str] | None] = [g.stamps if with_stamps else None for g in gs]
    check_timestamps(stamps, _locs(n, "timestamps"), errs)
    holdout = None
    if any(g.h_actuals for g in gs):
        holdout = _holdout_columns(gs, with_stamps, level, errs)
    errs.check()
    return SeriesColumns(
        ids=list(groups),
        actuals=actuals,
        fitted=fitted,
        timestamps=stamps,
        weights=[None] * n,
        holdout=holdout,
    )


def _holdout_columns(
    gs: list[Group], with_stamps: bool, level: float | None, errs: Errors
) -> HoldoutColumns:
    n = len(gs)
    actuals = _flat(gs, "h_actuals")
    forecasts = _flat(gs, "h_forecasts", actuals.lengths)
    check_magnitude(actuals, _locs(n, "holdout.actuals"), errs)
    check_magnitude(forecasts, _locs(n, "holdout.forecasts"), errs)
    interval = [g.has_interval for g in gs]
    lower = upper = None
    if any(interval):
        chosen = [g if has else None for g, has in zip(gs, interval, strict=True)]
        lower = _flat(chosen, "lower")
        upper = _flat(chosen, "upper", lower.lengths)
        check_magnitude(lower, _locs(n, "holdout.lower"), errs)
        check_magnitude(upper, _locs(n, "holdout.upper"), errs)
    stamps: list[list[str] | None] = [
        g.h_stamps if with_stamps and g.h_actuals and all(g.h_stamps) else None for g in gs
    ]
    check_timestamps(stamps, _locs(n, "holdout.timestamps"), errs)
    return HoldoutColumns(
        actuals=actuals,
        forecasts=forecasts,
        lower=lower,
        upper=upper,
        levels=[level if has else None for has in interval],
        timestamps=stamps,
    )


def _flat(gs: list[Group | None], name: str, lengths: np.ndarray | None = None) -> FlatRows:
    """The attribute ``name`` of every group joined into one array (nothing for ``None``)."""
    rows = [[] if g is None else getattr(g, name) for g in gs]
    if lengths is None:
        lengths = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
    values = np.fromiter(chain.from_iterable(rows), dtype=float, count=int(lengths.sum()))
    return FlatRows(values, lengths)


def _locs(n: int, key: str) -> list[str]:
    return [f"series[{i}].{key}" for i in range(n)]
