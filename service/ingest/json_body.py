"""The JSON body of ``POST /v1/assessments``: decoding and validation into a request.

:func:`load_json` decodes (``NaN``/``Infinity`` literals and overflowing numbers become
:class:`~service.ingest.request.NonFinite` markers, reported with their field);
:func:`parse_json_request` checks every field and builds the core's batch;
:func:`core_error_loc` maps an error of the core back to the request field it concerns.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import orjson

from service.core import InputError, SeriesBatch, make_batch

from .arrays import check_timestamps, flat_numbers, padded_matrix
from .fields import read_int, read_labels, read_name, read_policy
from .request import (
    MAX_ABS_VALUE,
    MAX_NAME_LENGTH,
    AssessmentRequest,
    Errors,
    NonFinite,
    RequestInvalid,
    RequestUnparseable,
    describe,
)

TOP_LEVEL_FIELDS = frozenset(
    {"model", "version", "policy", "season_length", "model_params", "labels", "series"}
)
SERIES_FIELDS = frozenset({"id", "actuals", "fitted", "timestamps", "weight", "holdout"})
HOLDOUT_FIELDS = frozenset({"actuals", "forecasts", "lower", "upper", "level", "timestamps"})

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
    for key in doc:
        if key not in TOP_LEVEL_FIELDS:
            errs.add(str(key), f"unknown field; expected one of {sorted(TOP_LEVEL_FIELDS)}")
    model = read_name(doc, "model", errs, required=True)
    version = read_name(doc, "version", errs, required=True)
    policy = read_policy(doc.get("policy"), errs)
    season_length = read_int(doc.get("season_length"), "season_length", errs, default=1, minimum=1)
    model_params = read_int(doc.get("model_params"), "model_params", errs, default=0, minimum=0)
    labels = read_labels(doc.get("labels"), errs)
    series = doc.get("series")
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
            errs.add(at, f"must be an object, got {describe(s)}")
            s = {}
        elif not SERIES_FIELDS.issuperset(s):
            for key in s:
                if key not in SERIES_FIELDS:
                    errs.add(
                        f"{at}.{key}", f"unknown field; expected one of {sorted(SERIES_FIELDS)}"
                    )
        sid = s.get("id")
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
        ids.append(sid)
        a, f = s.get("actuals"), s.get("fitted")
        for key, v in (("actuals", a), ("fitted", f)):
            if not isinstance(v, list):
                errs.add(
                    f"{at}.{key}",
                    "is required"
                    if v is None
                    else f"must be an array of numbers, got {describe(v)}",
                )
        a = a if isinstance(a, list) else empty
        f = f if isinstance(f, list) else empty
        if isinstance(s.get("actuals"), list) and not a:
            errs.add(f"{at}.actuals", "must hold at least one value")
        if len(f) != len(a) and isinstance(s.get("fitted"), list):
            errs.add(
                f"{at}.fitted",
                f"has {len(f)} values, actuals has {len(a)}: give one fitted"
                " value (or null) per actual",
            )
        if max_series_length is not None and len(a) > max_series_length:
            errs.add(f"{at}.actuals", f"has {len(a)} values; the limit is {max_series_length}")
        actual_rows.append(a)
        fitted_rows.append(f)
        ts = s.get("timestamps")
        if ts is not None and not isinstance(ts, list):
            errs.add(f"{at}.timestamps", f"must be an array of strings, got {describe(ts)}")
            ts = None
        if ts is not None and len(ts) != len(a):
            errs.add(f"{at}.timestamps", f"has {len(ts)} values, actuals has {len(a)}")
            ts = None
        ts_rows.append(ts)
        w = s.get("weight")
        if w is not None and (isinstance(w, bool) or not isinstance(w, (int, float))):
            errs.add(f"{at}.weight", f"must be a number, got {describe(w)}")
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
                errs.add(f"{at}.holdout", f"must be an object, got {describe(h)}")
            else:
                for key in h:
                    if key not in HOLDOUT_FIELDS:
                        errs.add(
                            f"{at}.holdout.{key}",
                            f"unknown field; expected one of {sorted(HOLDOUT_FIELDS)}",
                        )
                for key in ("actuals", "forecasts", "lower", "upper"):
                    v = h.get(key)
                    if v is not None and not isinstance(v, list):
                        errs.add(
                            f"{at}.holdout.{key}", f"must be an array of numbers, got {describe(v)}"
                        )
                    elif v is not None:
                        hrow[key] = v
                if ("actuals" in hrow) != ("forecasts" in hrow):
                    missing = "forecasts" if "actuals" in hrow else "actuals"
                    errs.add(
                        f"{at}.holdout.{missing}",
                        "is required with holdout "
                        + ("actuals" if missing == "forecasts" else "forecasts"),
                    )
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
                        errs.add(
                            f"{at}.holdout.actuals",
                            f"has {len(ha)} values; the limit is {max_series_length}",
                        )
                    for key in ("forecasts", "lower", "upper"):
                        if key in hrow and len(hrow[key]) != len(ha):
                            errs.add(
                                f"{at}.holdout.{key}",
                                f"has {len(hrow[key])} values, holdout actuals has {len(ha)}",
                            )
                level = h.get("level")
                if level is not None:
                    if isinstance(level, bool) or not isinstance(level, (int, float)):
                        errs.add(f"{at}.holdout.level", f"must be a number, got {describe(level)}")
                        level = None
                    elif not 0.0 < float(level) < 1.0:
                        errs.add(
                            f"{at}.holdout.level", f"must lie strictly between 0 and 1, got {level}"
                        )
                        level = None
                hts = h.get("timestamps")
                if hts is not None and (
                    not isinstance(hts, list) or ha is None or len(hts) != len(ha)
                ):
                    errs.add(
                        f"{at}.holdout.timestamps",
                        "must be an array of strings, one per holdout actual",
                    )
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
    got_a = flat_numbers(actual_rows, locs["actuals"], errs)
    got_f = flat_numbers(fitted_rows, locs["fitted"], errs)
    check_timestamps(ts_rows, [f"series[{i}].timestamps" for i in range(n)], errs)
    holdout_flat: dict[str, tuple[np.ndarray, np.ndarray] | None] = {}
    if has_holdout.any():
        for key, rows in h_rows.items():
            if key in ("lower", "upper") and not has_interval.any():
                continue
            holdout_flat[key] = flat_numbers(
                rows, [f"series[{i}].holdout.{key}" for i in range(n)], errs
            )
        check_timestamps(h_ts, [f"series[{i}].holdout.timestamps" for i in range(n)], errs)
    errs.check()
    assert got_a is not None and got_f is not None
    a_flat, a_len = got_a
    f_flat, _ = got_f
    width = int(a_len.max(initial=0))
    actuals = padded_matrix(a_flat, a_len, width)
    fitted = padded_matrix(f_flat, a_len, width)

    kwargs: dict[str, Any] = {}
    h_len = np.zeros(n, dtype=np.int64)
    if has_holdout.any():
        ha_flat, h_len = holdout_flat["actuals"]  # type: ignore[misc]
        hwidth = int(h_len.max(initial=0))
        kwargs["holdout_actuals"] = padded_matrix(ha_flat, h_len, hwidth)
        kwargs["holdout_forecasts"] = padded_matrix(holdout_flat["forecasts"][0], h_len, hwidth)  # type: ignore[index]
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
                    errs.add(
                        f"series[{i}].holdout.lower",
                        f"lower bound {lo_flat[pos]:g} is "
                        f"above upper bound {up_flat[pos]:g} at index {j}",
                    )
                    if errs.full:
                        break
                errs.check()
            kwargs["holdout_lower"] = padded_matrix(lo_flat, lo_len, hwidth)
            kwargs["holdout_upper"] = padded_matrix(up_flat, lo_len, hwidth)
            kwargs["level"] = [
                lv if iv else None for lv, iv in zip(levels, has_interval, strict=True)
            ]
    batch = _make_batch(
        actuals,
        fitted,
        ids=ids,
        weights=weights,
        season_length=season_length,
        model_params=model_params,
        **kwargs,
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
