"""Parse an assessment request (JSON body or CSV long format) into arrays for the core.

Framework-free: the REST service and the CLI's offline mode both use it. Every problem found is
reported with the field it concerns (``series[3].fitted``, ``series[0].holdout.level``), as many
as :data:`MAX_ERRORS` at a time, by raising :class:`RequestInvalid`; a body that is not JSON or
CSV at all raises its subclass :class:`RequestUnparseable`.

Numbers are checked per array, not per value in Python: a series' values are joined into one
flat list whose element types are collected in one pass, converted by numpy in one call, and
checked (non-finite values, lengths, interval bounds, timestamp order) with array operations.
"""

from __future__ import annotations

import csv
import io
import json
import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from itertools import chain
from typing import Any

import numpy as np
import orjson

from service.core import InputError, SeriesBatch, make_batch
from service.core.batch import MAX_MAGNITUDE

__all__ = [
    "MAX_ERRORS",
    "AssessmentRequest",
    "RequestInvalid",
    "RequestUnparseable",
    "load_json",
    "parse_csv_request",
    "parse_json_request",
]

MAX_ERRORS = 50
"""At most this many problems are reported for one request."""

MAX_NAME_LENGTH = 200
NUL_MESSAGE = "must not contain NUL characters"
MAX_ABS_VALUE = MAX_MAGNITUDE
"""Largest magnitude accepted for a number: the core's limit (sums over a long series must stay
finite), checked here so the error names the field and the position."""
TOP_LEVEL_FIELDS = frozenset(
    {"model", "version", "policy", "season_length", "model_params", "labels", "series"}
)
SERIES_FIELDS = frozenset({"id", "actuals", "fitted", "timestamps", "weight", "holdout"})
HOLDOUT_FIELDS = frozenset({"actuals", "forecasts", "lower", "upper", "level", "timestamps"})
CSV_REQUIRED = ("series_id", "actual", "fitted")
CSV_OPTIONAL = ("timestamp", "part", "lower", "upper")
CSV_PARAMS = frozenset({"model", "version", "policy", "season_length", "model_params", "level"})

# Where each make_batch argument lives in the request body.
_CORE_LOCS = {
    "actuals": "actuals",
    "fitted": "fitted",
    "ids": "id",
    "weights": "weight",
    "holdout_actuals": "holdout.actuals",
    "holdout_forecasts": "holdout.forecasts",
    "holdout_lower": "holdout.lower",
    "holdout_upper": "holdout.upper",
    "level": "holdout.level",
}


class RequestInvalid(ValueError):
    """The request is well-formed but its content is invalid.

    ``errors`` is a list of ``{"loc": "series[3].fitted", "message": "..."}``.
    """

    def __init__(self, errors: Sequence[Mapping[str, str]], detail: str | None = None) -> None:
        self.errors = [{"loc": str(e["loc"]), "message": str(e["message"])} for e in errors]
        if detail is None:
            first = self.errors[0] if self.errors else {"loc": "body", "message": "invalid"}
            more = len(self.errors) - 1
            detail = f"{first['loc']}: {first['message']}" + (
                f" (and {more} more problem{'s' if more > 1 else ''})" if more > 0 else ""
            )
        self.detail = detail
        super().__init__(detail)


class RequestUnparseable(RequestInvalid):
    """The body is not valid JSON (or CSV) at all."""


@dataclass(frozen=True, eq=False)
class AssessmentRequest:
    """A parsed, validated assessment request.

    ``policy`` is a stored policy's name or an inline policy document (a dict, validated by the
    gate). ``timestamps`` and ``holdout_timestamps`` hold one list of ISO 8601 strings per series
    (``None`` where a series has none). ``train_lengths`` / ``holdout_lengths`` are the lengths
    of the arrays as sent and ``weights_given`` the weights as sent (``None``: the default), so
    stored inputs can be given back exactly.
    """

    model: str
    version: str
    policy: str | dict[str, Any]
    season_length: int
    model_params: int
    labels: dict[str, str]
    ids: tuple[str, ...]
    batch: SeriesBatch
    timestamps: tuple[list[str] | None, ...]
    holdout_timestamps: tuple[list[str] | None, ...]
    train_lengths: np.ndarray
    holdout_lengths: np.ndarray
    weights_given: tuple[float | None, ...]

    @property
    def n_series(self) -> int:
        return len(self.ids)


class _Errors:
    """Collects problems; raises once at a checkpoint."""

    def __init__(self) -> None:
        self.items: list[dict[str, str]] = []

    def add(self, loc: str, message: str) -> None:
        if len(self.items) < MAX_ERRORS:
            self.items.append({"loc": loc, "message": message})

    @property
    def full(self) -> bool:
        return len(self.items) >= MAX_ERRORS

    def check(self) -> None:
        if self.items:
            raise RequestInvalid(self.items)


class _NonFinite:
    """Placeholder for a ``NaN``/``Infinity`` literal or an overflowing number in the body."""

    __slots__ = ("text",)

    def __init__(self, text: str) -> None:
        self.text = text

    def describe(self) -> str:
        if self.text in ("NaN", "Infinity", "-Infinity"):
            return f"{self.text} is not a JSON number: send null for a missing value"
        return f"the number {self.text[:40]} overflows a 64-bit float"


def _strict_float(text: str) -> float | _NonFinite:
    value = float(text)
    return value if math.isfinite(value) else _NonFinite(text)


def load_json(body: bytes | bytearray | memoryview | str) -> Any:
    """Decode JSON; ``NaN``/``Infinity`` literals and overflowing numbers become markers that
    validation reports with their field, anything else that is not JSON raises
    :class:`RequestUnparseable`."""
    if isinstance(body, memoryview):
        body = body.tobytes()
    try:
        return orjson.loads(body)
    except orjson.JSONDecodeError as fast_error:
        reason = str(fast_error)
    # Slow path only for bodies orjson refuses: tell non-finite numbers from broken syntax.
    try:
        text = body.decode("utf-8") if isinstance(body, (bytes, bytearray)) else body
    except UnicodeDecodeError as exc:
        raise RequestUnparseable(
            [{"loc": "body", "message": f"not UTF-8 text: {exc.reason} at byte {exc.start}"}]
        ) from None
    try:
        doc = json.loads(text, parse_constant=_NonFinite, parse_float=_strict_float)
    except (json.JSONDecodeError, RecursionError):
        raise RequestUnparseable(
            [{"loc": "body", "message": f"malformed JSON: {reason}"}]
        ) from None
    bad = _unpaired_surrogate(doc)
    if bad is not None:
        raise RequestUnparseable([{"loc": bad, "message": "a string holds an unpaired "
                                   "UTF-16 surrogate escape, which is not text"}])
    return doc


def _unpaired_surrogate(doc: Any) -> str | None:
    """The location of the first string (or key) that is not encodable text, else ``None``."""
    stack: list[tuple[Any, str]] = [(doc, "")]
    while stack:
        value, loc = stack.pop()
        if isinstance(value, str):
            try:
                value.encode("utf-8")
            except UnicodeEncodeError:
                return loc or "body"
        elif isinstance(value, dict):
            for key, item in value.items():
                where = f"{loc}.{key}" if loc else str(key)
                try:
                    key.encode("utf-8")
                except UnicodeEncodeError:
                    return loc or "body"
                stack.append((item, where))
        elif isinstance(value, list):
            stack.extend((item, f"{loc}[{i}]") for i, item in enumerate(value))
    return None


# ---------------------------------------------------------------------------------------------
# Small typed readers


def _describe(value: Any) -> str:
    if isinstance(value, _NonFinite):
        return value.describe()
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, (list, tuple)):
        return "an array"
    if isinstance(value, dict):
        return "an object"
    return type(value).__name__


def _name(doc: Mapping[str, Any], key: str, errs: _Errors, *, required: bool) -> str:
    value = doc.get(key)
    if value is None:
        if required:
            errs.add(key, "is required")
        return ""
    if not isinstance(value, str) or not value.strip():
        errs.add(key, f"must be a non-empty string, got {_describe(value)}")
        return ""
    if len(value) > MAX_NAME_LENGTH:
        errs.add(key, f"must be at most {MAX_NAME_LENGTH} characters")
        return ""
    if "\x00" in value:
        errs.add(key, "must not contain NUL characters")
        return ""
    return value


def _int(value: Any, loc: str, errs: _Errors, *, default: int, minimum: int) -> int:
    if value is None:
        return default
    if isinstance(value, float) and value.is_integer():
        value = int(value)
    if isinstance(value, bool) or not isinstance(value, int):
        errs.add(loc, f"must be an integer, got {_describe(value)}")
        return default
    if value < minimum:
        errs.add(loc, f"must be at least {minimum}, got {value}")
        return default
    if value > 1_000_000:
        errs.add(loc, f"must be at most 1000000, got {value}")
        return default
    return value


def _policy(value: Any, errs: _Errors) -> str | dict[str, Any]:
    if value is None:
        return "default"
    if isinstance(value, str):
        if not value.strip() or len(value) > MAX_NAME_LENGTH or "\x00" in value:
            errs.add("policy", "must be a policy name (1 to 200 characters) or a policy object")
        return value
    if isinstance(value, dict):
        return value
    errs.add("policy", f"must be a policy name or a policy object, got {_describe(value)}")
    return "default"


def _labels(value: Any, errs: _Errors) -> dict[str, str]:
    if value is None:
        return {}
    if not isinstance(value, dict):
        errs.add("labels", f"must be an object of string values, got {_describe(value)}")
        return {}
    out: dict[str, str] = {}
    for key, item in value.items():
        if "\x00" in key or (isinstance(item, str) and "\x00" in item):
            errs.add(f"labels.{key}", NUL_MESSAGE)
        elif isinstance(item, str):
            out[key] = item
        elif isinstance(item, (int, float)) and not isinstance(item, bool):
            out[key] = str(item)
        else:
            errs.add(f"labels.{key}", f"must be a string, got {_describe(item)}")
    return out


# ---------------------------------------------------------------------------------------------
# Vectorised number arrays

_NUMBER_TYPES = frozenset({float, int, type(None)})


def _locate_bad(row: Sequence[Any]) -> tuple[int, Any] | None:
    for j, v in enumerate(row):
        if type(v) not in _NUMBER_TYPES:
            return j, v
        if type(v) is int and abs(v) > 1.7e308:
            return j, _NonFinite(str(v))
    return None


def _flat_numbers(
    rows: Sequence[Sequence[Any]], locs: Sequence[str], errs: _Errors
) -> tuple[np.ndarray, np.ndarray] | None:
    """Join ``rows`` into one float array (``None`` -> NaN); return it and the row lengths.

    Reports a non-number (string, boolean, object, NaN literal, overflow) with its location.
    """
    lengths = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
    types = set(map(type, chain.from_iterable(rows)))
    ok = types <= _NUMBER_TYPES
    arr = None
    if ok:
        try:
            if type(None) in types:  # None becomes NaN on the way through a list
                arr = np.array(list(chain.from_iterable(rows)), dtype=float)
            else:
                arr = np.fromiter(chain.from_iterable(rows), dtype=float,
                                  count=int(lengths.sum()))
        except OverflowError:
            ok = False
    if not ok:
        for row, loc in zip(rows, locs, strict=True):
            bad = _locate_bad(row)
            if bad is not None:
                j, v = bad
                if isinstance(v, _NonFinite):
                    errs.add(loc, f"value at index {j}: {v.describe()}")
                else:
                    errs.add(loc, f"value at index {j} must be a number or null, got "
                             f"{_describe(v)}")
                if errs.full:
                    break
        return None
    assert arr is not None
    if arr.size and not np.isfinite(arr[~np.isnan(arr)]).all():
        ends = np.cumsum(lengths)
        for pos in np.flatnonzero(np.isinf(arr))[:MAX_ERRORS]:
            i = int(np.searchsorted(ends, pos, side="right"))
            j = int(pos - (ends[i] - lengths[i]))
            errs.add(locs[i], f"value at index {j} overflows a 64-bit float")
        return None
    with np.errstate(invalid="ignore"):
        huge = np.abs(arr) > MAX_ABS_VALUE
    if huge.any():
        ends = np.cumsum(lengths)
        for pos in np.flatnonzero(huge)[:MAX_ERRORS]:
            i = int(np.searchsorted(ends, pos, side="right"))
            j = int(pos - (ends[i] - lengths[i]))
            errs.add(locs[i], f"value at index {j} ({arr[pos]:g}) is beyond the accepted "
                     f"magnitude of {MAX_ABS_VALUE:g}; rescale the series")
        return None
    return arr, lengths


def _matrix(flat: np.ndarray, lengths: np.ndarray, width: int | None = None) -> np.ndarray:
    """Right-pad the rows of ``flat`` with NaN into an ``(n, width)`` matrix."""
    width = int(lengths.max(initial=0)) if width is None else width
    out = np.full((lengths.shape[0], width), np.nan)
    out[np.arange(width)[None, :] < lengths[:, None]] = flat
    return out


def _timestamps(
    rows: Sequence[Sequence[Any] | None], locs: Sequence[str], errs: _Errors
) -> None:
    """Check ISO 8601 timestamps: strings, parseable, strictly increasing within each row."""
    present = [(i, r) for i, r in enumerate(rows) if r is not None]
    if not present:
        return
    flat = list(chain.from_iterable(r for _, r in present))
    if set(map(type, flat)) - {str}:
        for i, r in present:
            for j, v in enumerate(r):
                if not isinstance(v, str):
                    errs.add(locs[i], f"value at index {j} must be an ISO 8601 string, got "
                             f"{_describe(v)}")
                    break
        return
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            stamps = np.array(flat, dtype="datetime64[us]").astype(np.int64)
    except (ValueError, OverflowError):
        for i, r in present:
            for j, v in enumerate(r):
                try:
                    datetime.fromisoformat(v)
                except ValueError:
                    errs.add(locs[i], f"value at index {j} ({v[:40]!r}) is not an ISO 8601 "
                             "date or date-time")
                    break
            if errs.full:
                break
        if not errs.items:  # numpy refused what Python accepts: say so plainly.
            errs.add(locs[present[0][0]], "timestamps must be ISO 8601 dates or date-times")
        return
    lengths = np.array([len(r) for _, r in present], dtype=np.int64)
    if stamps.size < 2:
        return
    starts = np.cumsum(lengths) - lengths
    step_ok = np.diff(stamps) > 0
    boundary = np.zeros(stamps.size - 1, dtype=bool)
    inner = starts[1:] - 1
    boundary[inner[(inner >= 0) & (inner < boundary.size)]] = True
    bad = ~step_ok & ~boundary
    if bad.any():
        ends = np.cumsum(lengths)
        reported: set[int] = set()
        for pos in np.flatnonzero(bad):
            k = int(np.searchsorted(ends, pos + 1, side="right"))
            if k in reported:
                continue
            reported.add(k)
            j = int(pos + 1 - starts[k])
            i = present[k][0]
            errs.add(locs[i], f"must be strictly increasing: index {j} "
                     f"({present[k][1][j][:40]!r}) is not after index {j - 1}")
            if errs.full:
                break


# ---------------------------------------------------------------------------------------------
# JSON body


def parse_json_request(
    body: bytes | str | Mapping[str, Any],
    *,
    max_series: int | None = None,
    max_series_length: int | None = None,
) -> AssessmentRequest:
    """Parse the JSON body of ``POST /v1/assessments`` (raw bytes/text, or already decoded).

    Raises
    ------
    RequestUnparseable
        The bytes are not JSON.
    RequestInvalid
        Anything else, each problem with its field: missing or mistyped fields, unknown fields,
        ``NaN``/``Infinity`` literals, numbers that overflow, length mismatches, duplicate ids,
        timestamps that do not increase, lower above upper, levels outside (0, 1), limits.
    """
    doc = load_json(body) if isinstance(body, (bytes, bytearray, memoryview, str)) else body
    if not isinstance(doc, Mapping):
        raise RequestInvalid([{"loc": "body", "message": f"must be a JSON object, got "
                               f"{_describe(doc)}"}])
    errs = _Errors()
    for key in doc:
        if key not in TOP_LEVEL_FIELDS:
            errs.add(str(key), f"unknown field; expected one of {sorted(TOP_LEVEL_FIELDS)}")
    model = _name(doc, "model", errs, required=True)
    version = _name(doc, "version", errs, required=True)
    policy = _policy(doc.get("policy"), errs)
    season_length = _int(doc.get("season_length"), "season_length", errs, default=1, minimum=1)
    model_params = _int(doc.get("model_params"), "model_params", errs, default=0, minimum=0)
    labels = _labels(doc.get("labels"), errs)
    series = doc.get("series")
    if series is None:
        errs.add("series", "is required")
        errs.check()
    if not isinstance(series, list):
        errs.add("series", f"must be an array of series objects, got {_describe(series)}")
        errs.check()
    if not series:
        errs.add("series", "must hold at least one series")
        errs.check()
    if max_series is not None and len(series) > max_series:
        errs.add("series", f"holds {len(series)} series; the limit is {max_series}")
        errs.check()

    n = len(series)
    ids: list[str] = []
    actual_rows: list[Any] = []
    fitted_rows: list[Any] = []
    ts_rows: list[Any] = []
    weights: list[float | None] = []
    h_rows: dict[str, list[Any]] = {k: [] for k in ("actuals", "forecasts", "lower", "upper")}
    h_ts: list[Any] = []
    levels: list[float | None] = []
    has_holdout = np.zeros(n, dtype=bool)
    has_interval = np.zeros(n, dtype=bool)
    seen: dict[str, int] = {}
    empty: list[Any] = []
    for i, s in enumerate(series):
        at = f"series[{i}]"
        if not isinstance(s, dict):
            errs.add(at, f"must be an object, got {_describe(s)}")
            s = {}
        elif not SERIES_FIELDS.issuperset(s):
            for key in s:
                if key not in SERIES_FIELDS:
                    errs.add(f"{at}.{key}",
                             f"unknown field; expected one of {sorted(SERIES_FIELDS)}")
        sid = s.get("id")
        if not isinstance(sid, str) or not sid:
            errs.add(f"{at}.id", f"must be a non-empty string, got {_describe(sid)}")
            sid = f"#{i}"
        elif len(sid) > MAX_NAME_LENGTH:
            errs.add(f"{at}.id", f"must be at most {MAX_NAME_LENGTH} characters")
        elif "\x00" in sid:
            errs.add(f"{at}.id", "must not contain NUL characters")
        elif sid in seen:
            errs.add(f"{at}.id", f"duplicate series id {sid!r} (first at series[{seen[sid]}])")
        seen.setdefault(sid, i)
        ids.append(sid)
        a, f = s.get("actuals"), s.get("fitted")
        for key, v in (("actuals", a), ("fitted", f)):
            if not isinstance(v, list):
                errs.add(f"{at}.{key}", "is required" if v is None
                         else f"must be an array of numbers, got {_describe(v)}")
        a = a if isinstance(a, list) else empty
        f = f if isinstance(f, list) else empty
        if isinstance(s.get("actuals"), list) and not a:
            errs.add(f"{at}.actuals", "must hold at least one value")
        if len(f) != len(a) and isinstance(s.get("fitted"), list):
            errs.add(f"{at}.fitted", f"has {len(f)} values, actuals has {len(a)}: give one fitted"
                     " value (or null) per actual")
        if max_series_length is not None and len(a) > max_series_length:
            errs.add(f"{at}.actuals", f"has {len(a)} values; the limit is {max_series_length}")
        actual_rows.append(a)
        fitted_rows.append(f)
        ts = s.get("timestamps")
        if ts is not None and not isinstance(ts, list):
            errs.add(f"{at}.timestamps", f"must be an array of strings, got {_describe(ts)}")
            ts = None
        if ts is not None and len(ts) != len(a):
            errs.add(f"{at}.timestamps", f"has {len(ts)} values, actuals has {len(a)}")
            ts = None
        ts_rows.append(ts)
        w = s.get("weight")
        if w is not None and (isinstance(w, bool) or not isinstance(w, (int, float))):
            errs.add(f"{at}.weight", f"must be a number, got {_describe(w)}")
            w = None
        elif w is not None and (not math.isfinite(float(w)) or not 0 <= w <= MAX_ABS_VALUE):
            errs.add(f"{at}.weight", f"must be a non-negative number up to {MAX_ABS_VALUE:g}")
            w = None
        weights.append(None if w is None else float(w))
        h = s.get("holdout")
        hrow: dict[str, Any] = {}
        hts = None
        level = None
        if h is not None:
            if not isinstance(h, dict):
                errs.add(f"{at}.holdout", f"must be an object, got {_describe(h)}")
            else:
                for key in h:
                    if key not in HOLDOUT_FIELDS:
                        errs.add(f"{at}.holdout.{key}",
                                 f"unknown field; expected one of {sorted(HOLDOUT_FIELDS)}")
                for key in ("actuals", "forecasts", "lower", "upper"):
                    v = h.get(key)
                    if v is not None and not isinstance(v, list):
                        errs.add(f"{at}.holdout.{key}",
                                 f"must be an array of numbers, got {_describe(v)}")
                    elif v is not None:
                        hrow[key] = v
                if ("actuals" in hrow) != ("forecasts" in hrow):
                    missing = "forecasts" if "actuals" in hrow else "actuals"
                    errs.add(f"{at}.holdout.{missing}", "is required with holdout "
                             + ("actuals" if missing == "forecasts" else "forecasts"))
                if ("lower" in hrow) != ("upper" in hrow):
                    missing = "upper" if "lower" in hrow else "lower"
                    errs.add(f"{at}.holdout.{missing}", "lower and upper must be given together")
                if "lower" in hrow and "actuals" not in hrow:
                    errs.add(f"{at}.holdout.actuals", "is required with interval bounds")
                ha = hrow.get("actuals")
                if ha is not None:
                    if not ha:
                        errs.add(f"{at}.holdout.actuals", "must hold at least one value")
                    if max_series_length is not None and len(ha) > max_series_length:
                        errs.add(f"{at}.holdout.actuals",
                                 f"has {len(ha)} values; the limit is {max_series_length}")
                    for key in ("forecasts", "lower", "upper"):
                        if key in hrow and len(hrow[key]) != len(ha):
                            errs.add(f"{at}.holdout.{key}", f"has {len(hrow[key])} values, "
                                     f"holdout actuals has {len(ha)}")
                level = h.get("level")
                if level is not None:
                    if isinstance(level, bool) or not isinstance(level, (int, float)):
                        errs.add(f"{at}.holdout.level", f"must be a number, got "
                                 f"{_describe(level)}")
                        level = None
                    elif not 0.0 < float(level) < 1.0:
                        errs.add(f"{at}.holdout.level",
                                 f"must lie strictly between 0 and 1, got {level}")
                        level = None
                hts = h.get("timestamps")
                if hts is not None and (not isinstance(hts, list) or ha is None
                                        or len(hts) != len(ha)):
                    errs.add(f"{at}.holdout.timestamps",
                             "must be an array of strings, one per holdout actual")
                    hts = None
        has_holdout[i] = "actuals" in hrow and "forecasts" in hrow
        has_interval[i] = has_holdout[i] and "lower" in hrow and "upper" in hrow
        for key in h_rows:
            h_rows[key].append(hrow.get(key, empty) if has_holdout[i] else empty)
        h_ts.append(hts)
        levels.append(None if level is None else float(level))
        if errs.full:
            break
    errs.check()

    locs = {k: [f"series[{i}].{k}" for i in range(n)] for k in ("actuals", "fitted")}
    got_a = _flat_numbers(actual_rows, locs["actuals"], errs)
    got_f = _flat_numbers(fitted_rows, locs["fitted"], errs)
    _timestamps(ts_rows, [f"series[{i}].timestamps" for i in range(n)], errs)
    holdout_flat: dict[str, tuple[np.ndarray, np.ndarray] | None] = {}
    if has_holdout.any():
        for key, rows in h_rows.items():
            if key in ("lower", "upper") and not has_interval.any():
                continue
            holdout_flat[key] = _flat_numbers(
                rows, [f"series[{i}].holdout.{key}" for i in range(n)], errs
            )
        _timestamps(h_ts, [f"series[{i}].holdout.timestamps" for i in range(n)], errs)
    errs.check()
    assert got_a is not None and got_f is not None
    a_flat, a_len = got_a
    f_flat, _ = got_f
    width = int(a_len.max(initial=0))
    actuals = _matrix(a_flat, a_len, width)
    fitted = _matrix(f_flat, a_len, width)

    kwargs: dict[str, Any] = {}
    h_len = np.zeros(n, dtype=np.int64)
    if has_holdout.any():
        ha_flat, h_len = holdout_flat["actuals"]  # type: ignore[misc]
        hwidth = int(h_len.max(initial=0))
        kwargs["holdout_actuals"] = _matrix(ha_flat, h_len, hwidth)
        kwargs["holdout_forecasts"] = _matrix(holdout_flat["forecasts"][0], h_len, hwidth)  # type: ignore[index]
        if has_interval.any():
            lo_flat, lo_len = holdout_flat["lower"]  # type: ignore[misc]
            up_flat, _ = holdout_flat["upper"]  # type: ignore[misc]
            crossed = lo_flat > up_flat
            if crossed.any():
                ends = np.cumsum(lo_len)
                done: set[int] = set()
                for pos in np.flatnonzero(crossed):
                    i = int(np.searchsorted(ends, pos, side="right"))
                    if i in done:
                        continue
                    done.add(i)
                    j = int(pos - (ends[i] - lo_len[i]))
                    errs.add(f"series[{i}].holdout.lower", f"lower bound {lo_flat[pos]:g} is "
                             f"above upper bound {up_flat[pos]:g} at index {j}")
                    if errs.full:
                        break
                errs.check()
            kwargs["holdout_lower"] = _matrix(lo_flat, lo_len, hwidth)
            kwargs["holdout_upper"] = _matrix(up_flat, lo_len, hwidth)
            kwargs["level"] = [lv if iv else None for lv, iv in zip(levels, has_interval,
                                                                    strict=True)]
    batch = _make_batch(
        actuals, fitted, ids=ids, weights=weights, season_length=season_length,
        model_params=model_params, **kwargs,
    )
    return AssessmentRequest(
        model=model,
        version=version,
        policy=policy,
        season_length=season_length,
        model_params=model_params,
        labels=labels,
        ids=tuple(ids),
        batch=batch,
        timestamps=tuple(ts_rows),
        holdout_timestamps=tuple(h_ts),
        train_lengths=a_len,
        holdout_lengths=h_len,
        weights_given=tuple(weights),
    )


def core_error_loc(exc: InputError) -> str:
    """The request field a core :class:`InputError` concerns, e.g. ``series[3].holdout.level``."""
    field_loc = _CORE_LOCS.get(exc.argument)
    if field_loc is None:
        return exc.argument
    if exc.index is None:
        return f"series[*].{field_loc}"
    return f"series[{exc.index}].{field_loc}"


def _make_batch(*args: Any, **kwargs: Any) -> SeriesBatch:
    try:
        return make_batch(*args, **kwargs)
    except InputError as exc:
        raise RequestInvalid([{"loc": core_error_loc(exc), "message": exc.message}]) from None


# ---------------------------------------------------------------------------------------------
# CSV long format


def _csv_float(text: str) -> float:
    """A CSV cell as a number: empty is missing (NaN); NaN/inf text is refused."""
    if not text:
        return math.nan
    value = float(text)
    if not math.isfinite(value):
        raise ValueError("not finite")
    return value


def _param_int(params: Mapping[str, str], key: str, errs: _Errors, default: int,
               minimum: int) -> int:
    raw = params.get(key)
    if raw is None or raw == "":
        return default
    try:
        value = int(raw)
    except ValueError:
        errs.add(key, f"must be an integer, got {raw[:40]!r}")
        return default
    return _int(value, key, errs, default=default, minimum=minimum)


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
    errs = _Errors()
    for key in params:
        if key not in CSV_PARAMS and key not in ("store",):
            errs.add(key, f"unknown query parameter; expected one of {sorted(CSV_PARAMS)}")
    if isinstance(text, (bytes, bytearray)):
        try:
            text = text.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise RequestUnparseable(
                [{"loc": "body", "message": f"not UTF-8 text: {exc.reason} at byte {exc.start}"}]
            ) from None
    elif text.startswith("\ufeff"):
        text = text[1:]
    reader = csv.reader(io.StringIO(text), strict=True)
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
            errs.add(f"header.{name}", f"required column {name!r} is missing (columns: "
                     f"{', '.join(header)})")
    for name in header:
        if name not in CSV_REQUIRED and name not in CSV_OPTIONAL:
            errs.add(f"header.{name}", "unknown column; expected "
                     f"{', '.join(CSV_REQUIRED + CSV_OPTIONAL)}")
    if len(col) != len(header):
        errs.add("header", "a column name appears twice")
    errs.check()

    level_raw = params.get("level")
    level: float | None = None
    if level_raw not in (None, ""):
        try:
            level = float(level_raw)  # type: ignore[arg-type]
        except ValueError:
            errs.add("level", f"must be a number, got {level_raw[:40]!r}")  # type: ignore[index]
        else:
            if not 0.0 < level < 1.0:
                errs.add("level", f"must lie strictly between 0 and 1, got {level_raw}")
                level = None

    width = len(header)
    k_id, k_a, k_f = col["series_id"], col["actual"], col["fitted"]
    k_ts, k_part = col.get("timestamp"), col.get("part")
    k_lo, k_up = col.get("lower"), col.get("upper")
    groups: dict[str, dict[str, list[Any]]] = {}
    line = 1
    try:
        for row in reader:
            line += 1
            if not row or (len(row) == 1 and not row[0].strip()):
                continue
            if len(row) != width:
                errs.add(f"line[{line}]", f"has {len(row)} cells, the header has {width}")
                if errs.full:
                    break
                continue
            sid = row[k_id].strip()
            if not sid:
                errs.add(f"line[{line}].series_id", "must not be empty")
                continue
            part = row[k_part].strip() if k_part is not None else ""
            if part not in ("", "train", "holdout"):
                errs.add(f"line[{line}].part", f"must be train or holdout, got {part[:40]!r}")
                continue
            g = groups.get(sid)
            if g is None:
                if len(sid) > MAX_NAME_LENGTH or "\x00" in sid:
                    errs.add(f"line[{line}].series_id",
                             f"must be at most {MAX_NAME_LENGTH} characters, without NUL")
                    continue
                g = groups[sid] = {"a": [], "f": [], "ts": [], "ha": [], "hf": [], "lo": [],
                                   "up": [], "hts": [], "line": [line]}
            values = []
            for key, k in (("actual", k_a), ("fitted", k_f), ("lower", k_lo), ("upper", k_up)):
                cell = row[k].strip() if k is not None else ""
                try:
                    values.append(_csv_float(cell))
                except ValueError:
                    errs.add(f"line[{line}].{key}", f"must be a finite number or empty, got "
                             f"{cell[:40]!r}")
                    values.append(math.nan)
            ts = row[k_ts].strip() if k_ts is not None else ""
            if part == "holdout":
                g["ha"].append(values[0])
                g["hf"].append(values[1])
                g["lo"].append(values[2])
                g["up"].append(values[3])
                g["hts"].append(ts)
            else:
                if (k_lo is not None and row[k_lo].strip()) or (
                    k_up is not None and row[k_up].strip()
                ):
                    errs.add(f"line[{line}].lower", "lower and upper belong on holdout rows only")
                g["a"].append(values[0])
                g["f"].append(values[1])
                g["ts"].append(ts)
            if errs.full:
                break
    except csv.Error as exc:
        raise RequestUnparseable(
            [{"loc": f"line[{line + 1}]", "message": f"malformed CSV: {exc}"}]
        ) from None
    model = _name(params, "model", errs, required=True)
    version = _name(params, "version", errs, required=True)
    policy = _policy(params.get("policy") or None, errs)
    season_length = _param_int(params, "season_length", errs, 1, 1)
    model_params = _param_int(params, "model_params", errs, 0, 0)
    if not groups and not errs.items:
        errs.add("body", "no data rows after the header")
    if max_series is not None and len(groups) > max_series:
        errs.add("series", f"holds {len(groups)} series; the limit is {max_series}")
    errs.check()

    ids = list(groups)
    series: list[dict[str, Any]] = []
    for i, sid in enumerate(ids):
        g = groups[sid]
        if not g["a"]:
            errs.add(f"series[{i}].actuals", f"series {sid!r} has holdout rows but no train rows")
            continue
        if max_series_length is not None and max(len(g["a"]), len(g["ha"])) > max_series_length:
            errs.add(f"series[{i}].actuals", f"series {sid!r} has more than "
                     f"{max_series_length} rows")
            continue
        s: dict[str, Any] = {"id": sid, "actuals": g["a"], "fitted": g["f"]}
        if k_ts is not None:
            if any(not t for t in g["ts"]):
                errs.add(f"series[{i}].timestamps", f"series {sid!r}: every row needs a "
                         "timestamp when the column is present")
            else:
                s["timestamps"] = g["ts"]
        if g["ha"]:
            h: dict[str, Any] = {"actuals": g["ha"], "forecasts": g["hf"]}
            lo_given = [not math.isnan(v) for v in g["lo"]]
            up_given = [not math.isnan(v) for v in g["up"]]
            if any(lo_given) or any(up_given):
                h["lower"], h["upper"] = g["lo"], g["up"]
                if lo_given != up_given:
                    errs.add(f"series[{i}].holdout.lower", f"series {sid!r}: lower and upper "
                             "must be given on the same holdout rows")
                if level is not None:
                    h["level"] = level
            if k_ts is not None and all(g["hts"]):
                h["timestamps"] = g["hts"]
            s["holdout"] = h
        series.append(s)
    errs.check()
    # The rest of the checks (lengths, order, bounds, limits) are the JSON body's.
    doc = {"model": model, "version": version, "policy": policy,
           "season_length": season_length, "model_params": model_params, "series": series}
    return _with_nan_as_null(doc, max_series=max_series, max_series_length=max_series_length)


def _with_nan_as_null(doc: dict[str, Any], **limits: Any) -> AssessmentRequest:
    for s in doc["series"]:
        for key in ("actuals", "fitted"):
            s[key] = [None if v != v else v for v in s[key]]
        h = s.get("holdout")
        if h:
            for key in ("actuals", "forecasts", "lower", "upper"):
                if key in h:
                    h[key] = [None if v != v else v for v in h[key]]
    return parse_json_request(doc, **limits)
