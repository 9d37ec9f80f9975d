"""The JSON body of ``POST /v1/assessments``: decoding and validation into a request.

:func:`load_json` decodes (``NaN``/``Infinity`` literals and overflowing numbers become
:class:`~service.ingest.request.NonFinite` markers, reported with their field).
:func:`parse_json_request` reads the body in steps: the envelope (:func:`read_envelope`), the
series list (:func:`read_series_list`), each series (:func:`read_series`, its holdout with
:func:`read_holdout`), all of it gathered as sent; then the numbers and timestamps of every
series at once (:func:`json_columns`), and the shared last steps
(:func:`~service.ingest.assemble.build_request`).
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import orjson

from .arrays import check_timestamps, flat_numbers
from .assemble import build_request
from .fields import read_baseline, read_int, read_labels, read_name, read_policy
from .request import (
    MAX_ABS_VALUE,
    MAX_NAME_LENGTH,
    QUOTE_LIMIT,
    AssessmentRequest,
    Envelope,
    Errors,
    HoldoutColumns,
    NonFinite,
    RequestInvalid,
    RequestUnparseable,
    SeriesColumns,
    describe,
)
from .shape import ENVELOPE, HOLDOUT, HOLDOUT_FIELDS, SERIES_FIELDS, TOP_LEVEL_FIELDS, spec

_SEASON_LENGTH = spec(ENVELOPE, "season_length")
_MODEL_PARAMS = spec(ENVELOPE, "model_params")
_BURN_IN = spec(ENVELOPE, "burn_in")
_LEVEL = spec(HOLDOUT, "level")
_HOLDOUT_ARRAYS = tuple(f.name for f in HOLDOUT if f.kind == "numbers")
_EMPTY: list[Any] = []


def _strict_float(text: str) -> float | NonFinite:
    value = float(text)
    return value if math.isfinite(value) else NonFinite(text)


def _strict_int(text: str) -> int | float | NonFinite:
    """An integer literal read as orjson reads it (the fast path): an integer within 64 bits,
    a float beyond, a marker beyond a float's range. (Python itself refuses to convert
    integers of more than 4,300 digits.)"""
    if len(text) - text.startswith("-") <= 20:
        value = int(text)
        if -(2**63) <= value < 2**64:
            return value
    return _strict_float(text)


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
        doc = json.loads(
            text, parse_constant=NonFinite, parse_float=_strict_float, parse_int=_strict_int
        )
    except (json.JSONDecodeError, RecursionError):
        raise RequestUnparseable(
            [{"loc": "body", "message": f"malformed JSON: {reason}"}]
        ) from None
    bad = _unpaired_surrogate(doc)
    if bad is not None:
        raise RequestUnparseable(
            [
                {
                    "loc": bad,
                    "message": "a string holds an unpaired "
                    "UTF-16 surrogate escape, which is not text",
                }
            ]
        )
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
        raise RequestInvalid(
            [{"loc": "body", "message": f"must be a JSON object, got {describe(doc)}"}]
        )
    errs = Errors()
    envelope = read_envelope(doc, errs)
    series = read_series_list(doc.get("series"), errs, max_series)
    rows = SeriesRows(len(series))
    seen: dict[str, int] = {}
    for i, s in enumerate(series):
        read_series(i, s, errs, seen, max_series_length, rows)
        if errs.full:
            break
    errs.check()
    return build_request(envelope, json_columns(rows, errs))


def read_envelope(doc: Mapping[str, Any], errs: Errors) -> Envelope:
    """The request's own fields (everything but ``series``), unknown fields reported."""
    _unknown_fields("", doc, TOP_LEVEL_FIELDS, errs)
    return Envelope(
        model=read_name(doc, "model", errs, required=True),
        version=read_name(doc, "version", errs, required=True),
        policy=read_policy(doc.get("policy"), errs),
        season_length=read_int(
            doc.get("season_length"),
            "season_length",
            errs,
            default=_SEASON_LENGTH.default,
            minimum=int(_SEASON_LENGTH.minimum or 0),
        ),
        model_params=read_int(
            doc.get("model_params"),
            "model_params",
            errs,
            default=_MODEL_PARAMS.default,
            minimum=int(_MODEL_PARAMS.minimum or 0),
        ),
        labels=read_labels(doc.get("labels"), errs),
        baseline=read_baseline(doc.get("baseline"), errs),
        burn_in=read_int(
            doc.get("burn_in"),
            "burn_in",
            errs,
            default=_BURN_IN.default,
            minimum=int(_BURN_IN.minimum or 0),
        ),
    )


def read_series_list(series: Any, errs: Errors, max_series: int | None) -> list[Any]:
    """``series`` when it is a non-empty array within the limit; else raises with every
    problem found so far."""
    if series is None:
        errs.add("series", "is required")
        errs.check()
    if not isinstance(series, list):
        errs.add("series", f"must be an array of series objects, got {describe(series)}")
        errs.check()
    if not series:
        errs.add("series", "must hold at least one series")
        errs.check()
    if max_series is not None and len(series) > max_series:
        errs.add("series", f"holds {len(series)} series; the limit is {max_series}")
        errs.check()
    return series


def _unknown_fields(at: str, doc: Mapping[Any, Any], known: frozenset[str], errs: Errors) -> None:
    expected = sorted(known)
    for key in doc:
        if key not in known:
            errs.add(
                f"{at}.{str(key)[:QUOTE_LIMIT]}" if at else str(key)[:QUOTE_LIMIT],
                f"unknown field; expected one of {expected}",
            )


class SeriesRows:
    """Every series' fields as sent (arrays still lists), gathered for the checks that run
    over all series at once."""

    def __init__(self, n: int) -> None:
        self.ids: list[str] = []
        self.actuals: list[list[Any]] = []
        self.fitted: list[list[Any]] = []
        self.timestamps: list[Any] = []
        self.weights: list[float | None] = []
        self.burn_in: list[int | None] = []
        self.holdout: dict[str, list[list[Any]]] = {k: [] for k in _HOLDOUT_ARRAYS}
        self.holdout_timestamps: list[Any] = []
        self.levels: list[float | None] = []
        self.has_holdout = np.zeros(n, dtype=bool)
        self.has_interval = np.zeros(n, dtype=bool)

    def add_holdout(
        self, i: int, arrays: Mapping[str, list[Any]], stamps: Any, level: float | None
    ) -> None:
        """Series ``i``'s holdout arrays (empty unless both actuals and forecasts are given)."""
        has = "actuals" in arrays and "forecasts" in arrays
        self.has_holdout[i] = has
        self.has_interval[i] = has and "lower" in arrays and "upper" in arrays
        for key, rows in self.holdout.items():
            rows.append(arrays.get(key, _EMPTY) if has else _EMPTY)
        self.holdout_timestamps.append(stamps)
        self.levels.append(level)


def read_series(
    i: int,
    s: Any,
    errs: Errors,
    seen: dict[str, int],
    max_length: int | None,
    rows: SeriesRows,
) -> None:
    """Check ``series[i]`` field by field and add it to ``rows``."""
    at = f"series[{i}]"
    if not isinstance(s, dict):
        errs.add(at, f"must be an object, got {describe(s)}")
        s = {}
    elif not SERIES_FIELDS.issuperset(s):
        _unknown_fields(at, s, SERIES_FIELDS, errs)
    rows.ids.append(_series_id(at, i, s.get("id"), errs, seen))
    a, f = _train_values(at, s, errs, max_length)
    rows.actuals.append(a)
    rows.fitted.append(f)
    ts = s.get("timestamps")
    rows.timestamps.append(None if ts is None else _train_timestamps(at, ts, len(a), errs))
    w = s.get("weight")
    rows.weights.append(None if w is None else _weight(at, w, errs))
    b = s.get("burn_in")
    rows.burn_in.append(
        None if b is None else read_int(b, f"{at}.burn_in", errs, default=0, minimum=0)
    )
    h = s.get("holdout")
    if h is None:
        rows.add_holdout(i, {}, None, None)
    else:
        rows.add_holdout(i, *read_holdout(f"{at}.holdout", h, errs, max_length))


def _series_id(at: str, i: int, sid: Any, errs: Errors, seen: dict[str, int]) -> str:
    """The series' id (``#i`` in its place when it is not a string)."""
    if not isinstance(sid, str) or not sid:
        errs.add(f"{at}.id", f"must be a non-empty string, got {describe(sid)}")
        sid = f"#{i}"
    elif len(sid) > MAX_NAME_LENGTH:
        errs.add(f"{at}.id", f"must be at most {MAX_NAME_LENGTH} characters")
    elif "\x00" in sid:
        errs.add(f"{at}.id", "must not contain NUL characters")
    elif sid in seen:
        errs.add(f"{at}.id", f"duplicate series id {sid!r} (first at series[{seen[sid]}])")
    seen.setdefault(sid, i)
    return sid


def _train_values(
    at: str, s: Mapping[str, Any], errs: Errors, max_length: int | None
) -> tuple[list[Any], list[Any]]:
    """``actuals`` and ``fitted`` (empty where not an array): present, of one length."""
    a_raw, f_raw = s.get("actuals"), s.get("fitted")
    a_given, f_given = isinstance(a_raw, list), isinstance(f_raw, list)
    if not a_given:
        errs.add(f"{at}.actuals", _not_an_array(a_raw))
    if not f_given:
        errs.add(f"{at}.fitted", _not_an_array(f_raw))
    a: list[Any] = a_raw if isinstance(a_raw, list) else _EMPTY
    f: list[Any] = f_raw if isinstance(f_raw, list) else _EMPTY
    if a_given and not a:
        errs.add(f"{at}.actuals", "must hold at least one value")
    if f_given and len(f) != len(a):
        errs.add(
            f"{at}.fitted",
            f"has {len(f)} values, actuals has {len(a)}: give one fitted value (or null) "
            "per actual",
        )
    if max_length is not None and len(a) > max_length:
        errs.add(f"{at}.actuals", f"has {len(a)} values; the limit is {max_length}")
    return a, f


def _not_an_array(value: Any) -> str:
    if value is None:
        return "is required"
    return f"must be an array of numbers, got {describe(value)}"


def _train_timestamps(at: str, ts: Any, n: int, errs: Errors) -> list[Any] | None:
    if not isinstance(ts, list):
        errs.add(f"{at}.timestamps", f"must be an array of strings, got {describe(ts)}")
        return None
    if len(ts) != n:
        errs.add(f"{at}.timestamps", f"has {len(ts)} values, actuals has {n}")
        return None
    return ts


def _weight(at: str, w: Any, errs: Errors) -> float | None:
    if isinstance(w, bool) or not isinstance(w, (int, float)):
        errs.add(f"{at}.weight", f"must be a number, got {describe(w)}")
        return None
    if not 0 <= w <= MAX_ABS_VALUE:  # NaN fails too; an integer is compared without rounding
        errs.add(f"{at}.weight", f"must be a non-negative number up to {MAX_ABS_VALUE:g}")
        return None
    return float(w)


def read_holdout(
    at: str, h: Any, errs: Errors, max_length: int | None
) -> tuple[dict[str, list[Any]], list[Any] | None, float | None]:
    """One series' holdout (``at`` is its location): its arrays as sent, timestamps, level."""
    if not isinstance(h, dict):
        errs.add(at, f"must be an object, got {describe(h)}")
        return {}, None, None
    _unknown_fields(at, h, HOLDOUT_FIELDS, errs)
    arrays: dict[str, list[Any]] = {}
    for key in _HOLDOUT_ARRAYS:
        v = h.get(key)
        if v is not None and not isinstance(v, list):
            errs.add(f"{at}.{key}", f"must be an array of numbers, got {describe(v)}")
        elif v is not None:
            arrays[key] = v
    _holdout_pairs(at, arrays, errs)
    ha = arrays.get("actuals")
    if ha is not None:
        _holdout_lengths(at, arrays, ha, errs, max_length)
    level = h.get("level")
    level = None if level is None else _holdout_level(at, level, errs)
    stamps = h.get("timestamps")
    if stamps is not None and (
        not isinstance(stamps, list) or ha is None or len(stamps) != len(ha)
    ):
        errs.add(f"{at}.timestamps", "must be an array of strings, one per holdout actual")
        stamps = None
    return arrays, stamps, level


def _holdout_pairs(at: str, arrays: Mapping[str, list[Any]], errs: Errors) -> None:
    """Actuals come with forecasts, lower with upper, and bounds with actuals."""
    if ("actuals" in arrays) != ("forecasts" in arrays):
        missing, given = (
            ("forecasts", "actuals") if "actuals" in arrays else ("actuals", "forecasts")
        )
        errs.add(f"{at}.{missing}", f"is required with holdout {given}")
    if ("lower" in arrays) != ("upper" in arrays):
        missing = "upper" if "lower" in arrays else "lower"
        errs.add(f"{at}.{missing}", "lower and upper must be given together")
    if "lower" in arrays and "actuals" not in arrays:
        errs.add(f"{at}.actuals", "is required with interval bounds")


def _holdout_lengths(
    at: str, arrays: Mapping[str, list[Any]], ha: list[Any], errs: Errors, max_length: int | None
) -> None:
    if not ha:
        errs.add(f"{at}.actuals", "must hold at least one value")
    if max_length is not None and len(ha) > max_length:
        errs.add(f"{at}.actuals", f"has {len(ha)} values; the limit is {max_length}")
    for key in ("forecasts", "lower", "upper"):
        if key in arrays and len(arrays[key]) != len(ha):
            errs.add(f"{at}.{key}", f"has {len(arrays[key])} values, holdout actuals has {len(ha)}")


def _holdout_level(at: str, level: Any, errs: Errors) -> float | None:
    if isinstance(level, bool) or not isinstance(level, (int, float)):
        errs.add(f"{at}.level", f"must be a number, got {describe(level)}")
        return None
    low, high = _LEVEL.above, _LEVEL.below
    if not low < level < high:  # type: ignore[operator]
        errs.add(f"{at}.level", f"must lie strictly between {low:g} and {high:g}, got {level}")
        return None
    return float(level)


def json_columns(rows: SeriesRows, errs: Errors) -> SeriesColumns:
    """The numbers and timestamps of every series, checked at once; raises with every problem."""
    n = len(rows.ids)
    actuals = flat_numbers(rows.actuals, _locs(n, "actuals"), errs)
    fitted = flat_numbers(rows.fitted, _locs(n, "fitted"), errs)
    check_timestamps(rows.timestamps, _locs(n, "timestamps"), errs)
    holdout = _holdout_columns(rows, errs) if rows.has_holdout.any() else None
    errs.check()
    assert actuals is not None and fitted is not None
    return SeriesColumns(
        ids=rows.ids,
        actuals=actuals,
        fitted=fitted,
        timestamps=rows.timestamps,
        weights=rows.weights,
        holdout=holdout,
        burn_in=rows.burn_in,
    )


def _holdout_columns(rows: SeriesRows, errs: Errors) -> HoldoutColumns | None:
    """The holdout arrays of every series; ``None`` after reporting a problem."""
    n = len(rows.ids)
    with_interval = bool(rows.has_interval.any())
    flat = {
        key: flat_numbers(rows.holdout[key], _locs(n, f"holdout.{key}"), errs)
        for key in _HOLDOUT_ARRAYS
        if with_interval or key not in ("lower", "upper")
    }
    check_timestamps(rows.holdout_timestamps, _locs(n, "holdout.timestamps"), errs)
    if any(v is None for v in flat.values()):
        return None
    return HoldoutColumns(
        actuals=flat["actuals"],  # type: ignore[arg-type]
        forecasts=flat["forecasts"],  # type: ignore[arg-type]
        lower=flat.get("lower"),
        upper=flat.get("upper"),
        levels=[lv if iv else None for lv, iv in zip(rows.levels, rows.has_interval, strict=True)],
        timestamps=rows.holdout_timestamps,
    )


def _locs(n: int, key: str) -> list[str]:
    return [f"series[{i}].{key}" for i in range(n)]
