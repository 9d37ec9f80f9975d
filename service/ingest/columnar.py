"""Columnar uploads: an Arrow IPC stream or a Parquet file in the CSV upload's long layout.

The columns and the query parameters are those of the CSV upload
(:mod:`service.ingest.csv_body`): ``series_id``, ``actual``, ``fitted`` required;
``timestamp``, ``part``, ``lower``, ``upper`` optional; one row per series and period. The
file is read with pyarrow, imported here only (when such a body arrives), and goes straight
into the arrays of the core: every check and the grouping by series are array operations
(dictionary codes of the ids, a stable sort only when the rows of a series are not together,
run lengths), never a Python object per value.

Types: ``series_id`` text (or whole numbers, read as their decimal text); the numeric
columns integers or floats, a null or NaN a missing value as an empty CSV cell is; ``part``
text (``train``, ``holdout``, null or empty for train); ``timestamp`` an Arrow timestamp or
date, or ISO 8601 text. The same rules as the CSV upload hold (series in the order of their
first row, each series' rows in file order, timestamps strictly increasing within a series'
train rows and within its holdout rows, bounds on holdout rows only), and a problem names
``row[N].column`` (``N`` counts data rows from 0, as a data frame's positions do) or the
series' field. Columns pandas adds for a named index (``__index_level_0__``) are left out.
"""

from __future__ import annotations

import re
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import replace
from datetime import datetime
from typing import Any, Literal, overload

import numpy as np

from .arrays import within_bound
from .assemble import build_request
from .csv_body import (
    CSV_OPTIONAL,
    CSV_REQUIRED,
    check_params,
    check_series,
    csv_columns,
    read_csv_envelope,
    read_level,
)
from .csv_rows import ReadSeries
from .request import (
    MAX_ABS_VALUE,
    MAX_ERRORS,
    MAX_NAME_LENGTH,
    AssessmentRequest,
    Errors,
    RequestUnparseable,
)

ARROW_STREAM = "application/vnd.apache.arrow.stream"
PARQUET = "application/vnd.apache.parquet"
Format = Literal["arrow", "parquet"]

_PANDAS_INDEX = re.compile(r"__index_level_\d+__")
_NUMERIC = ("actual", "fitted", "lower", "upper")


def is_text_type(t: Any) -> bool:
    """Whether an Arrow type holds text: ``string``, ``large_string`` or, where this pyarrow
    has it, ``string_view``."""
    import pyarrow.types as pat

    is_view = getattr(pat, "is_string_view", None)
    return bool(pat.is_string(t) or pat.is_large_string(t) or (is_view is not None and is_view(t)))


def parse_columnar_request(
    body: bytes,
    fmt: Format,
    params: Mapping[str, str] | None = None,
    *,
    max_series: int | None = None,
    max_series_length: int | None = None,
) -> AssessmentRequest:
    """Parse an Arrow IPC stream (``fmt="arrow"``; the Arrow file format is recognised by its
    magic bytes) or a Parquet file (``"parquet"``) in the CSV upload's long layout, with the
    CSV upload's query parameters in ``params``. Raises
    :class:`~service.ingest.request.RequestUnparseable` when the body is not such a file and
    :class:`~service.ingest.request.RequestInvalid` naming ``row[N].column``, the column or
    the series' field for every problem found."""
    params = dict(params or {})
    errs = Errors()
    check_params(params, errs)
    table = _read_table(body, fmt)
    columns = _check_header(table, errs)
    level = read_level(params, errs)
    envelope = read_csv_envelope(params, errs)
    rows = _Rows(table, columns, errs)
    errs.check()
    read = rows.series()
    if not read.ids and not errs.items:
        errs.add("body", "no data rows")
    if max_series is not None and len(read.ids) > max_series:
        errs.add("series", f"holds {len(read.ids)} series; the limit is {max_series}")
    errs.check()
    check_series(read, errs, max_series_length)
    rows.check_order(read)
    errs.check()
    cols = csv_columns(read, level, errs)
    cols = replace(cols, timestamps=rows.train_stamps(read))
    if cols.holdout is not None:
        cols = replace(cols, holdout=replace(cols.holdout, timestamps=rows.holdout_stamps(read)))
    return build_request(envelope, cols)


def _read_table(body: bytes, fmt: Format) -> Any:
    import pyarrow as pa

    what = "a Parquet file" if fmt == "parquet" else "an Arrow IPC stream"
    try:
        source = pa.BufferReader(body)
        if fmt == "parquet":
            import pyarrow.parquet as pq

            return pq.read_table(source)
        if body[:6] == b"ARROW1":
            return pa.ipc.open_file(source).read_all()
        return pa.ipc.open_stream(source).read_all()
    except (pa.ArrowException, ValueError, OSError, TypeError, IndexError, KeyError) as exc:
        reason = str(exc).strip().splitlines()[0][:200] if str(exc).strip() else type(exc).__name__
        raise RequestUnparseable(
            [{"loc": "body", "message": f"not {what}: {reason}"}],
        ) from None


def _check_header(table: Any, errs: Errors) -> dict[str, int]:
    """Where each known column is; raises with every problem found so far when a column is
    missing, unknown or repeated."""
    names = [n for n in table.column_names if not _PANDAS_INDEX.fullmatch(n)]
    where = {n: k for k, n in enumerate(table.column_names) if not _PANDAS_INDEX.fullmatch(n)}
    for name in CSV_REQUIRED:
        if name not in where:
            errs.add(
                f"header.{name}",
                f"required column {name!r} is missing (columns: {_listing(names)})",
            )
    for name in names:
        if name not in CSV_REQUIRED and name not in CSV_OPTIONAL:
            errs.add(
                f"header.{name[:60]}",
                f"unknown column; expected {', '.join(CSV_REQUIRED + CSV_OPTIONAL)}",
            )
    if len(where) != len(names):
        errs.add("header", "a column name appears twice")
    errs.check()
    return where


def _listing(names: list[str]) -> str:
    text = ", ".join(n[:40] for n in names[:12])
    return text + (f", ... ({len(names)} in all)" if len(names) > 12 else "")


def _array(table: Any, k: int) -> Any:
    """Column ``k`` as one Arrow array."""
    column = table.column(k)
    return column.chunk(0) if column.num_chunks == 1 else column.combine_chunks()


def _rows_of(mask: np.ndarray) -> np.ndarray:
    return np.flatnonzero(mask)[:MAX_ERRORS]


class _Rows:
    """The table's columns checked and converted: per row, the series' code (its place in
    the order of first rows), whether it is a holdout row, its numbers (NaN where missing)
    and its timestamp. Problems go to ``errs``, naming ``row[N].column``."""

    def __init__(self, table: Any, columns: dict[str, int], errs: Errors) -> None:
        self.errs = errs
        self.n_rows = table.num_rows
        self.ids, self.codes = self._ids(_array(table, columns["series_id"]))
        self.holdout = np.zeros(self.n_rows, dtype=bool)
        if "part" in columns:
            self.holdout = self._parts(_array(table, columns["part"]))
        self.values = {
            name: self._numbers(name, _array(table, columns[name]))
            for name in _NUMERIC
            if name in columns
        }
        bounds = [self.values[b] for b in ("lower", "upper") if b in self.values]
        if bounds:
            bounded = np.zeros(self.n_rows, dtype=bool)
            for values in bounds:
                bounded |= ~np.isnan(values)
            for r in _rows_of(bounded & ~self.holdout):
                errs.add(f"row[{r}].lower", "lower and upper belong on holdout rows only")
        self.stamps: np.ndarray | None = None  # int64 per row, for the order
        self.texts: Any = None  # what the stored timestamps are made of, per row
        if "timestamp" in columns:
            self._timestamps(_array(table, columns["timestamp"]))
        self.reordered: np.ndarray | None = None  # the rows, when a sort reordered them
        train = np.flatnonzero(~self.holdout)
        held = np.flatnonzero(self.holdout)
        self.t_rows = self._grouped(train)
        self.h_rows = self._grouped(held)

    # --- columns ------------------------------------------------------------------------------

    def _type_error(self, name: str, arr: Any, expected: str) -> None:
        self.errs.add(f"column.{name}", f"must be {expected}, got Arrow type {arr.type}")

    def _text(self, name: str, arr: Any, *, integers: bool) -> Any:
        """``arr`` as an Arrow string array, or ``None`` after reporting its type."""
        import pyarrow as pa
        import pyarrow.types as pat

        t = arr.type
        if pat.is_dictionary(t):
            arr, t = arr.dictionary_decode(), t.value_type
        if is_text_type(t):
            return arr.cast(pa.string()) if not pat.is_string(t) else arr
        if integers and pat.is_integer(t):
            return arr.cast(pa.string())
        if pat.is_null(t):
            return arr.cast(pa.string())
        self._type_error(name, arr, "text" + (" or whole numbers" if integers else ""))
        return None

    def _ids(self, raw: Any) -> tuple[list[str], np.ndarray]:
        """The series' ids in the order of their first rows, and each row's place in it."""
        import pyarrow.compute as pc

        arr = self._text("series_id", raw, integers=True)
        if arr is None:
            return [], np.zeros(self.n_rows, dtype=np.int64)
        if arr.null_count == 0 and len(arr) > 1:
            # The usual file: each series' rows together. Encode the first row of each run
            # of equal ids (a series may still come back later) and repeat its code.
            change = np.asarray(pc.not_equal(arr[1:], arr[:-1]))
            starts = np.flatnonzero(np.concatenate(([True], change)))
            encoded = pc.dictionary_encode(arr.take(starts))
            run_codes = np.asarray(encoded.indices, dtype=np.int64)
            codes = np.repeat(run_codes, np.diff(np.append(starts, len(arr))))
            nulls = np.zeros(self.n_rows, dtype=bool)
        else:
            encoded = pc.dictionary_encode(arr)
            nulls = np.asarray(encoded.indices.is_null())
            codes = np.asarray(encoded.indices.fill_null(0), dtype=np.int64)
        for r in _rows_of(nulls):
            self.errs.add(f"row[{r}].series_id", "must not be empty (null)")
        given = encoded.dictionary.to_pylist()  # one string per series
        stripped = [s.strip() for s in given]  # as the CSV upload strips its cells
        bad = np.array(
            [not s or len(s) > MAX_NAME_LENGTH or "\x00" in s for s in stripped], dtype=bool
        )
        if bad.any():
            first: dict[int, int] = {}
            for r in np.flatnonzero(bad[codes] & ~nulls):
                first.setdefault(int(codes[r]), int(r))
                if len(first) >= MAX_ERRORS:
                    break
            for code, r in first.items():
                message = (
                    "must not be empty"
                    if not stripped[code]
                    else f"must be at most {MAX_NAME_LENGTH} characters, without NUL"
                )
                self.errs.add(f"row[{r}].series_id", message)
        if stripped != given:  # ids equal once stripped are one series
            place: dict[str, int] = {}
            remap = np.array([place.setdefault(s, len(place)) for s in stripped], dtype=np.int64)
            codes = remap[codes]
            stripped = list(place)
        return stripped, codes

    def _parts(self, raw: Any) -> np.ndarray:
        """Whether each row is a holdout row (``part``: train, holdout, empty or null)."""
        import pyarrow.compute as pc

        arr = self._text("part", raw, integers=False)
        if arr is None:
            return np.zeros(self.n_rows, dtype=bool)
        encoded = pc.dictionary_encode(arr)
        values = [v.strip() for v in encoded.dictionary.to_pylist()]
        codes = np.asarray(encoded.indices.fill_null(len(values)), dtype=np.int64)
        known = np.array([v in ("", "train", "holdout") for v in values] + [True], dtype=bool)
        for r in _rows_of(~known[codes]):
            text = values[codes[r]][:40]
            self.errs.add(f"row[{r}].part", f"must be train or holdout, got {text!r}")
        is_holdout = np.array([v == "holdout" for v in values] + [False], dtype=bool)
        return is_holdout[codes]

    def _numbers(self, name: str, raw: Any) -> np.ndarray:
        """A numeric column as float64, NaN where null or NaN; infinities and values beyond
        the accepted magnitude are reported with their rows."""
        import pyarrow as pa
        import pyarrow.types as pat

        t = raw.type
        if not (pat.is_integer(t) or pat.is_floating(t) or pat.is_decimal(t) or pat.is_null(t)):
            self._type_error(name, raw, "numbers (integers or floats)")
            return np.full(self.n_rows, np.nan)
        arr = raw if pat.is_float64(t) else raw.cast(pa.float64(), safe=False)
        values = np.asarray(arr.to_numpy(zero_copy_only=False), dtype=np.float64)
        if within_bound(values, MAX_ABS_VALUE):
            return values  # no infinity, nothing beyond the bound (NaN aside)
        with np.errstate(invalid="ignore"):
            inf = np.isinf(values)
            huge = ~inf & (np.abs(values) > MAX_ABS_VALUE)
        for r in _rows_of(inf):
            self.errs.add(f"row[{r}].{name}", f"must be a finite number or null, got {values[r]}")
        for r in _rows_of(huge):
            self.errs.add(
                f"row[{r}].{name}",
                f"value {values[r]:g} is beyond the accepted magnitude of {MAX_ABS_VALUE:g}; "
                "rescale the series",
            )
        return values

    def _timestamps(self, raw: Any) -> None:
        """Each row's timestamp as an integer for the order, and what its text is made of."""
        import pyarrow as pa
        import pyarrow.compute as pc
        import pyarrow.types as pat

        t = raw.type
        if pat.is_dictionary(t):
            raw, t = raw.dictionary_decode(), t.value_type
        nulls = np.asarray(raw.is_null()) if raw.null_count else np.zeros(self.n_rows, bool)
        strings = None
        if is_text_type(t):
            texts = pc.utf8_trim_whitespace(raw.cast(pa.string())).fill_null("")
            strings = np.asarray(texts.to_numpy(zero_copy_only=False), dtype=object)
            nulls = nulls | (strings == "")
        elif not (pat.is_timestamp(t) or pat.is_date(t)):
            self._type_error("timestamp", raw, "an Arrow timestamp or date, or ISO 8601 text")
            return
        for r in _rows_of(nulls):
            self.errs.add(
                f"row[{r}].timestamp",
                "must not be empty: every row needs a timestamp when the column is present",
            )
        if strings is None:
            filled = raw.fill_null(0) if raw.null_count else raw
            if pat.is_date64(t):
                filled = filled.cast(pa.timestamp("ms"))
            moments = np.asarray(filled.to_numpy(zero_copy_only=False))
            self.stamps = moments.astype(np.int64)
            self.texts = _Moments(moments, utc=pat.is_timestamp(t) and t.tz is not None)
            return
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                parsed = np.array(np.where(nulls, "1970-01-01", strings), dtype="datetime64[us]")
        except (ValueError, OverflowError):
            self._report_unparseable(strings, nulls)
            return
        self.stamps = parsed.astype(np.int64)
        self.texts = strings

    def _report_unparseable(self, strings: np.ndarray, nulls: np.ndarray) -> None:
        found = 0
        for r in np.flatnonzero(~nulls):
            try:
                datetime.fromisoformat(strings[r])
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    np.datetime64(strings[r], "us")
            except (ValueError, OverflowError):
                self.errs.add(
                    f"row[{r}].timestamp",
                    f"{strings[r][:40]!r} is not an ISO 8601 date or date-time",
                )
                found += 1
                if found >= 5 or self.errs.full:
                    return
        if not found:
            self.errs.add("column.timestamp", "timestamps must be ISO 8601 dates or date-times")

    # --- grouping -----------------------------------------------------------------------------

    def _at(self, values: np.ndarray, rows: np.ndarray) -> np.ndarray:
        """``values[rows]``; ``values`` itself when ``rows`` is every row in file order."""
        if rows.size == self.n_rows and rows is not self.reordered:
            return values
        return values[rows]

    def _grouped(self, rows: np.ndarray) -> np.ndarray:
        """``rows`` ordered by series, file order kept within each (no sort when the rows of
        each series already come together in order of first appearance)."""
        codes = self._at(self.codes, rows)
        if codes.size < 2 or bool((codes[1:] >= codes[:-1]).all()):
            return rows
        self.reordered = rows[np.argsort(codes, kind="stable")]
        return self.reordered

    def _taken(self, name: str, rows: np.ndarray) -> np.ndarray:
        """Column ``name`` at ``rows`` (NaN throughout for a column left out)."""
        values = self.values.get(name)
        if values is None:
            return np.full(rows.size, np.nan)
        if rows.size == self.n_rows and rows is not self.reordered:
            return values  # every row, in file order
        return values[rows]

    def series(self) -> ReadSeries:
        """Every series as read, as the CSV upload's rows give it."""
        n = len(self.ids)
        t, h = self.t_rows, self.h_rows
        return ReadSeries(
            ids=self.ids,
            t_lengths=np.bincount(self._at(self.codes, t), minlength=n),
            actual=self._taken("actual", t),
            fitted=self._taken("fitted", t),
            t_stamps=None,  # checked here by row; given to the request lazily
            h_lengths=np.bincount(self._at(self.codes, h), minlength=n),
            h_actual=self._taken("actual", h),
            h_forecast=self._taken("fitted", h),
            lower=self._taken("lower", h),
            upper=self._taken("upper", h),
            h_stamps=None,
        )

    def check_order(self, read: ReadSeries) -> None:
        """Timestamps strictly increasing within each series' train rows and holdout rows:
        the first row of each series that does not move forward in time is named."""
        if self.stamps is None:
            return
        for rows, lengths in ((self.t_rows, read.t_lengths), (self.h_rows, read.h_lengths)):
            stamps = self._at(self.stamps, rows)
            if stamps.size < 2:
                continue
            starts = np.cumsum(lengths) - lengths
            later = np.ones(stamps.size, dtype=bool)  # a row after the one before it
            later[1:] = stamps[1:] > stamps[:-1]
            later[starts[lengths > 0]] = True
            reported: set[int] = set()
            for pos in np.flatnonzero(~later):
                code = int(self.codes[rows[pos]])
                if code in reported:
                    continue
                reported.add(code)
                row, before = int(rows[pos]), int(rows[pos - 1])
                same = stamps[pos] == stamps[pos - 1]
                self.errs.add(
                    f"row[{row}].timestamp",
                    f"series {self.ids[code][:60]!r}: {self._stamp_text(row)} "
                    f"{'repeats' if same else 'is before'} {self._stamp_text(before)} on "
                    f"row {before}; a series' rows must be in increasing timestamp order, "
                    "each period once",
                )
                if len(reported) >= 10 or self.errs.full:
                    break

    def _stamp_text(self, row: int) -> str:
        if isinstance(self.texts, _Moments):
            return repr(self.texts[row : row + 1][0])
        return repr(str(self.texts[row])[:40])

    def train_stamps(self, read: ReadSeries) -> Sequence[list[str] | None]:
        n = len(read.ids)
        if self.texts is None:
            return (None,) * n
        return _Stamps(self.texts, self.t_rows, read.t_lengths)

    def holdout_stamps(self, read: ReadSeries) -> Sequence[list[str] | None]:
        n = len(read.ids)
        if self.texts is None:
            return (None,) * n
        return _Stamps(self.texts, self.h_rows, read.h_lengths)


class _Moments:
    """Arrow timestamps or dates (as numpy ``datetime64``) written as ISO 8601 on demand."""

    def __init__(self, moments: np.ndarray, *, utc: bool) -> None:
        self.moments = moments
        self.utc = utc
        # Dates as dates; times to the second, or finer when some are finer.
        unit = np.datetime_data(moments.dtype)[0]
        if unit not in ("D", "W", "M", "Y", "h", "m", "s"):
            whole = moments.astype("datetime64[s]").astype(moments.dtype) == moments
            unit = "s" if bool(whole.all()) else unit
        self.unit = "D" if unit in ("D", "W", "M", "Y") else ("s" if unit in ("h", "m") else unit)

    def __getitem__(self, rows: Any) -> list[str]:
        part = self.moments[rows]
        zone = "UTC" if self.utc else "naive"
        text = np.datetime_as_string(part, unit=self.unit, timezone=zone)  # type: ignore[call-overload]
        return list(text.tolist())


class _Stamps(Sequence[list[str] | None]):
    """Each series' timestamps as ISO 8601 text, made when a series' are asked for (to store
    them): an assessment that is not stored never turns them into Python strings."""

    def __init__(self, texts: Any, rows: np.ndarray, lengths: np.ndarray) -> None:
        self._texts = texts
        self._rows = rows
        self._ends = np.cumsum(lengths).tolist()
        self._starts = (np.cumsum(lengths) - lengths).tolist()

    def __len__(self) -> int:
        return len(self._ends)

    @overload
    def __getitem__(self, i: int) -> list[str] | None: ...

    @overload
    def __getitem__(self, i: slice) -> Sequence[list[str] | None]: ...

    def __getitem__(self, i: int | slice) -> Any:
        if isinstance(i, slice):
            return [self[k] for k in range(*i.indices(len(self)))]
        a, b = self._starts[i], self._ends[i]
        if a == b:
            return None
        rows = self._rows[a:b]
        if isinstance(self._texts, _Moments):
            return self._texts[rows]
        return [str(s) for s in self._texts[rows]]
