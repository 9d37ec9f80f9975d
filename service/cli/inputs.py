"""Reading the files given to ``plumbline assess``: detection, first checks, option overrides.

Only what the command line can tell cheaply is checked here (the file exists, is UTF-8, parses as
JSON or has a CSV header with the required columns); the request itself is validated by the
service (server mode) or by ``service.ingest`` (offline), which name the offending field.
"""

from __future__ import annotations

import csv
import io
import json
import os
import sys
from dataclasses import dataclass, field
from typing import Any, Literal

from .errors import CliError

REQUIRED_CSV_COLUMNS = ("series_id", "actual", "fitted")

Kind = Literal["json", "csv", "arrow", "parquet"]
COLUMNAR_EXTENSIONS = {
    ".parquet": "parquet",
    ".pq": "parquet",
    ".arrow": "arrow",
    ".arrows": "arrow",
    ".ipc": "arrow",
}
"""Files of the long layout as Arrow IPC or Parquet, by extension (read as bytes)."""


@dataclass(frozen=True)
class Overrides:
    """Request fields given as options; ``None`` leaves the file's value alone."""

    model: str | None = None
    version: str | None = None
    policy: str | dict[str, Any] | None = None
    season_length: int | None = None
    model_params: int | None = None
    level: float | None = None
    labels: dict[str, str] = field(default_factory=dict)
    baseline: str | None = None
    burn_in: int | None = None


@dataclass(frozen=True)
class AssessInput:
    """A request ready to send or compute.

    JSON input: ``body`` is the request body with the overrides applied. CSV input: ``text`` is
    the file and ``params`` the query parameters; an inline policy (``--policy FILE``) and
    ``labels`` have no query parameter, so they travel apart (see ``csv_as_body``). Arrow and
    Parquet input: ``data`` is the file, with ``params`` as for CSV.
    """

    name: str
    kind: Kind
    body: dict[str, Any] | None = None
    text: str | None = None
    params: dict[str, str] = field(default_factory=dict)
    inline_policy: dict[str, Any] | None = None
    labels: dict[str, str] = field(default_factory=dict)
    data: bytes | None = None

    @property
    def n_series(self) -> int | None:
        if self.body is not None and isinstance(self.body.get("series"), list):
            return len(self.body["series"])
        return None


def read_text(path: str) -> tuple[str, str]:
    """(display name, text) of ``path``; ``-`` reads standard input."""
    name, data = read_bytes(path)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise CliError(
            f"{name}: not UTF-8 text (byte {exc.start}); expected a JSON or CSV file "
            "(or give a Parquet or Arrow file its extension, or --format)"
        ) from None
    return name, text


def read_bytes(path: str) -> tuple[str, bytes]:
    """(display name, bytes) of ``path``; ``-`` reads standard input."""
    if path == "-":
        data = sys.stdin.buffer.read()
        name = "standard input"
    else:
        name = path
        try:
            with open(path, "rb") as fh:
                data = fh.read()
        except FileNotFoundError:
            raise CliError(f"file not found: {path}") from None
        except IsADirectoryError:
            raise CliError(f"{path} is a directory, expected a JSON or CSV file") from None
        except PermissionError:
            raise CliError(f"{path}: permission denied") from None
        except OSError as exc:
            raise CliError(f"{path}: cannot read ({exc.strerror or exc})") from None
    return name, data


def detect_kind(path: str, text: str, declared: str | None = None) -> Kind:
    """``declared`` if given, else by extension (.json / .csv), else by the first character."""
    if declared in ("json", "csv", "arrow", "parquet"):
        return declared  # type: ignore[return-value]
    ext = os.path.splitext(path)[1].lower()
    if ext in COLUMNAR_EXTENSIONS:
        return COLUMNAR_EXTENSIONS[ext]  # type: ignore[return-value]
    if ext == ".json":
        return "json"
    if ext == ".csv":
        return "csv"
    head = text.lstrip()[:1]
    return "json" if head in ("{", "[") else "csv"


def parse_json(name: str, text: str) -> dict[str, Any]:
    if not text.strip():
        raise CliError(f"{name}: empty file, expected a JSON object with a 'series' list")
    try:
        body = json.loads(text)
    except json.JSONDecodeError as exc:
        raise CliError(
            f"{name}: not valid JSON: {exc.msg} (line {exc.lineno}, column {exc.colno})"
        ) from None
    except RecursionError:
        raise CliError(f"{name}: not valid JSON: nested too deeply") from None
    if not isinstance(body, dict):
        raise CliError(
            f"{name}: expected a JSON object with a 'series' list, got {_json_type(body)}"
        )
    return body


def _json_type(value: object) -> str:
    if isinstance(value, list):
        return "an array"
    if isinstance(value, str):
        return "a string"
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "a boolean"
    return "a number"


CSV_DELIMITERS = (",", ";", "\t")
"""What the service reads between cells (``service.ingest.csv_dialect``, which imports no more
than this does but lives in a package that needs numpy)."""


def check_csv_header(name: str, text: str) -> list[str]:
    """The header's column names (lower-cased; names are read in any case, cells separated by
    a comma, a semicolon or a tab, as the service reads them); raises when it lacks a required
    column, saying what the header was read as."""
    first = text.lstrip("\r\n")[: 64 * 1024].splitlines()[:1]
    if not first or not first[0].strip():
        raise CliError(
            f"{name}: empty file, expected a CSV header with columns "
            + ", ".join(REQUIRED_CSV_COLUMNS)
        )
    best: list[str] = []
    for delimiter in CSV_DELIMITERS:
        try:
            header = next(csv.reader(io.StringIO(first[0]), delimiter=delimiter))
        except csv.Error as exc:
            raise CliError(f"{name}: unreadable CSV header: {exc}") from None
        columns = [c.strip().lower() for c in header]
        if (
            sum(c in columns for c in REQUIRED_CSV_COLUMNS)
            > sum(c in best for c in REQUIRED_CSV_COLUMNS)
            or not best
        ):
            best = columns
    missing = [c for c in REQUIRED_CSV_COLUMNS if c not in best]
    if missing:
        plural = "s" if len(missing) > 1 else ""
        shown = [c if len(c) <= 40 else c[:40] + "..." for c in best[:8] if c]
        more = len(best) - 8
        raise CliError(
            f"{name}: missing required CSV column{plural} {', '.join(missing)} "
            f"(header has: {', '.join(shown) or 'nothing'}"
            + (f" and {more:,} more" if more > 0 else "")
            + "); cells separated by commas, semicolons or tabs are read, names in any case"
        )
    return best


def load_policy_option(value: str) -> str | dict[str, Any]:
    """``--policy``: a file (exists, or ends in .json) is read and sent inline; else a name."""
    looks_like_file = value.lower().endswith(".json") or os.sep in value or value == "-"
    if not looks_like_file and not os.path.isfile(value):
        return value
    name, text = read_text(value)
    if not text.strip():
        raise CliError(f"policy file {name} is empty")
    try:
        policy = json.loads(text)
    except json.JSONDecodeError as exc:
        raise CliError(
            f"policy file {name}: not valid JSON: {exc.msg} (line {exc.lineno}, column {exc.colno})"
        ) from None
    if not isinstance(policy, dict):
        raise CliError(f"policy file {name}: expected a JSON object, got {_json_type(policy)}")
    return policy


def load_input(path: str, overrides: Overrides, declared: str | None = None) -> AssessInput:
    """Read and first-check ``path``, then apply ``overrides``."""
    columnar = declared in ("arrow", "parquet") or (
        declared is None and os.path.splitext(path)[1].lower() in COLUMNAR_EXTENSIONS
    )
    if columnar:
        name, data = read_bytes(path)
        if not data:
            raise CliError(f"{name}: empty file, expected an Arrow IPC stream or Parquet file")
        return AssessInput(
            name=name,
            kind=detect_kind(path, "", declared),
            data=data,
            params=csv_params(overrides),
            inline_policy=overrides.policy if isinstance(overrides.policy, dict) else None,
            labels=dict(overrides.labels),
        )
    name, text = read_text(path)
    kind = detect_kind(path, text, declared)
    if kind == "json":
        body = parse_json(name, text)
        return AssessInput(name=name, kind="json", body=apply_to_body(name, body, overrides))
    check_csv_header(name, text)
    return AssessInput(
        name=name,
        kind="csv",
        text=text,
        params=csv_params(overrides),
        inline_policy=overrides.policy if isinstance(overrides.policy, dict) else None,
        labels=dict(overrides.labels),
    )


def apply_to_body(name: str, body: dict[str, Any], o: Overrides) -> dict[str, Any]:
    if o.level is not None:
        raise CliError(
            "--level applies to CSV input (and Arrow or Parquet); in JSON give holdout.level "
            "in each series"
        )
    out = dict(body)
    for key in ("model", "version", "policy", "season_length", "model_params", "burn_in"):
        value = getattr(o, key)
        if value is not None:
            out[key] = value
    if o.baseline is not None:
        out["baseline"] = {"version": o.baseline}
    if o.labels:
        labels = out.get("labels")
        if labels is None:
            labels = {}
        if not isinstance(labels, dict):
            raise CliError(f"{name}: 'labels' is not an object, cannot add --label values")
        out["labels"] = {**labels, **o.labels}
    return out


def csv_params(o: Overrides) -> dict[str, str]:
    """The query parameters of a CSV upload (all strings, as they travel)."""
    params: dict[str, str] = {}
    for key in (
        "model",
        "version",
        "policy",
        "season_length",
        "model_params",
        "level",
        "baseline",
        "burn_in",
    ):
        value = getattr(o, key)
        if value is not None and not isinstance(value, dict):
            params[key] = str(value)
    return params


def parse_label(text: str) -> tuple[str, str]:
    key, sep, value = text.partition("=")
    if not sep or not key.strip():
        raise CliError(f"--label expects KEY=VALUE, got {text!r}")
    return key.strip(), value
