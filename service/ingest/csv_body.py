"""The CSV long-format upload: one row per series and period, parsed into a request.

The standard ``csv`` reader hands over text a cell at a time, so the rows are checked and
grouped by series as they are read (errors name ``line[N].column``); the grouped series then go
through the JSON body's validation, so lengths, order, bounds and limits follow the same rules.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Mapping
from typing import Any

from .fields import read_int, read_name, read_policy
from .json_body import parse_json_request
from .request import MAX_NAME_LENGTH, AssessmentRequest, Errors, RequestUnparseable

CSV_REQUIRED = ("series_id", "actual", "fitted")
CSV_OPTIONAL = ("timestamp", "part", "lower", "upper")
CSV_PARAMS = frozenset({"model", "version", "policy", "season_length", "model_params", "level"})


def _csv_float(text: str) -> float:
    """A CSV cell as a number: empty is missing (NaN); NaN/inf text is refused."""
    if not text:
        return math.nan
    value = float(text)
    if not math.isfinite(value):
        raise ValueError("not finite")
    return value


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
                    errs.add(
                        f"line[{line}].series_id",
                        f"must be at most {MAX_NAME_LENGTH} characters, without NUL",
                    )
                    continue
                g = groups[sid] = {
                    "a": [],
                    "f": [],
                    "ts": [],
                    "ha": [],
                    "hf": [],
                    "lo": [],
                    "up": [],
                    "hts": [],
                    "line": [line],
                }
            values = []
            for key, k in (("actual", k_a), ("fitted", k_f), ("lower", k_lo), ("upper", k_up)):
                cell = row[k].strip() if k is not None else ""
                try:
                    values.append(_csv_float(cell))
                except ValueError:
                    errs.add(
                        f"line[{line}].{key}",
                        f"must be a finite number or empty, got {cell[:40]!r}",
                    )
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
    model = read_name(params, "model", errs, required=True)
    version = read_name(params, "version", errs, required=True)
    policy = read_policy(params.get("policy") or None, errs)
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
            errs.add(
                f"series[{i}].actuals", f"series {sid!r} has more than {max_series_length} rows"
            )
            continue
        s: dict[str, Any] = {"id": sid, "actuals": g["a"], "fitted": g["f"]}
        if k_ts is not None:
            if any(not t for t in g["ts"]):
                errs.add(
                    f"series[{i}].timestamps",
                    f"series {sid!r}: every row needs a timestamp when the column is present",
                )
            else:
                s["timestamps"] = g["ts"]
        if g["ha"]:
            h: dict[str, Any] = {"actuals": g["ha"], "forecasts": g["hf"]}
            lo_given = [not math.isnan(v) for v in g["lo"]]
            up_given = [not math.isnan(v) for v in g["up"]]
            if any(lo_given) or any(up_given):
                h["lower"], h["upper"] = g["lo"], g["up"]
                if lo_given != up_given:
                    errs.add(
                        f"series[{i}].holdout.lower",
                        f"series {sid!r}: lower and upper must be given on the same holdout rows",
                    )
                if level is not None:
                    h["level"] = level
            if k_ts is not None and all(g["hts"]):
                h["timestamps"] = g["hts"]
            s["holdout"] = h
        series.append(s)
    errs.check()
    # The rest of the checks (lengths, order, bounds, limits) are the JSON body's.
    doc = {
        "model": model,
        "version": version,
        "policy": policy,
        "season_length": season_length,
        "model_params": model_params,
        "series": series,
    }
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
