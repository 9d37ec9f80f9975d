"""A Parquet file in the CSV upload's long layout, read as chunks of series in bounded memory.

The columns are the CSV upload's (:data:`~service.ingest.csv_body.CSV_REQUIRED`,
:data:`~service.ingest.csv_body.CSV_OPTIONAL`): ``series_id``, ``actual``, ``fitted``
(required), ``timestamp``, ``part`` (``train`` by default, or ``holdout``; holdout rows carry
the forecast in ``fitted``), ``lower``, ``upper``. A null cell is a missing value. The rows of
one series are contiguous, in period order. :class:`ParquetChunks` reads the file in record
batches (``pyarrow.parquet.ParquetFile.iter_batches``) twice:

1. a scan that checks every row (as the CSV upload does: an id on every row, a known part,
   finite numbers within the accepted magnitude, bounds on holdout rows only, timestamps
   strictly increasing within a series' train rows and within its holdout rows) and every
   series (contiguous rows, train rows, bounds on the same holdout rows, the length limit),
   and learns the fleet's shape: the ids, the longest training period and holdout, whether any
   series has intervals. Problems are reported as the CSV upload reports them, naming the row
   and column (``row[N].column``, ``N`` counting data rows from 1, or from 0 with ``first_row=0`` as
   the columnar upload counts them) or the series' field
   (``series[i].actuals``), at most :data:`~service.ingest.request.MAX_ERRORS`, by raising
   :class:`~service.ingest.request.RequestInvalid`;
2. iteration, which yields :class:`~service.core.SeriesBatch` chunks of ``series_per_chunk``
   series, each already of the fleet's shape, carrying a series whose rows straddle two record
   batches into the next chunk.

The chunks' rows are the rows the CSV upload of the same data gives the core, so
:func:`service.core.chunked.assess_chunks` over them equals the one-shot assessment of that
upload. Memory held: the ids, two counts per series, and one chunk's and one record batch's
rows. pyarrow is imported when a file is opened.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import IO, Any

import numpy as np

from service.core import SeriesBatch, make_batch

from .csv_body import CSV_OPTIONAL, CSV_REQUIRED
from .request import MAX_ABS_VALUE, MAX_NAME_LENGTH, Errors, RequestInvalid, RequestUnparseable

BATCH_ROWS = 65_536
"""Rows per record batch read from the file."""

SERIES_PER_CHUNK = 16_384
"""Series per chunk by default (a whole number of the core's blocks of series)."""

_NUMBERS = ("actual", "fitted", "lower", "upper")
_PANDAS_INDEX = re.compile(r"__index_level_\d+__")


@dataclass(frozen=True)
class _Shape:
    ids: list[str]
    train: np.ndarray
    holdout: np.ndarray
    interval: np.ndarray
    rows: np.ndarray

    @property
    def width(self) -> int:
        return int(self.train.max(initial=0))

    @property
    def horizon(self) -> int:
        return int(self.holdout.max(initial=0))


NOT_CONTIGUOUS = "the rows of a series must be contiguous"
"""The end of the message of a series whose rows are not contiguous (a caller that can read
the file whole instead looks for it)."""


class ParquetChunks:
    """The series of a Parquet file in the long layout as chunks (see the module docstring).

    ``source``: a path or a binary file object (seekable). ``season_length``,
    ``model_params`` and ``level`` are the upload's parameters (the CSV upload's query
    parameters). Opening the file scans and checks it; iterating yields the chunks (it may be
    repeated). ``n_series``, ``width`` (longest training period), ``horizon`` (longest holdout)
    and ``intervals`` describe the fleet.
    """

    def __init__(
        self,
        source: str | IO[bytes] | Any,
        *,
        season_length: int = 1,
        model_params: int = 0,
        level: float | None = None,
        series_per_chunk: int = SERIES_PER_CHUNK,
        batch_rows: int = BATCH_ROWS,
        max_series_length: int | None = None,
        first_row: int = 1,
    ) -> None:
        if series_per_chunk < 1:
            raise ValueError("series_per_chunk must be at least 1")
        self._source = source
        self._season_length = season_length
        self._model_params = model_params
        self._level = level
        self._per_chunk = series_per_chunk
        self._batch_rows = batch_rows
        self._first_row = first_row
        self._columns = self._open_columns()
        self._shape = self._scan(max_series_length)
        _release()

    @property
    def n_series(self) -> int:
        return len(self._shape.ids)

    @property
    def ids(self) -> list[str]:
        return self._shape.ids

    @property
    def width(self) -> int:
        return self._shape.width

    @property
    def horizon(self) -> int:
        return self._shape.horizon

    @property
    def series_per_chunk(self) -> int:
        """Series per chunk (the last may hold fewer)."""
        return self._per_chunk

    @property
    def train_lengths(self) -> np.ndarray:
        """Each series' train rows."""
        return self._shape.train

    @property
    def holdout_lengths(self) -> np.ndarray:
        """Each series' holdout rows."""
        return self._shape.holdout

    @property
    def columns(self) -> tuple[str, ...]:
        """The file's columns read (those of the long layout)."""
        return tuple(self._columns)

    @property
    def intervals(self) -> bool:
        return bool(self._shape.interval.any())

    # ------------------------------------------------------------------ reading the file

    def _file(self) -> Any:
        import pyarrow.parquet as pq

        if hasattr(self._source, "seek"):
            self._source.seek(0)
        try:
            # Without pre-buffering: pyarrow would otherwise keep every row group's buffered
            # bytes until the reader is closed, memory that grows with the file.
            return pq.ParquetFile(self._source, pre_buffer=False)
        except Exception as exc:  # pyarrow raises its own error types for a bad file
            raise RequestUnparseable(
                [{"loc": "body", "message": f"not a readable Parquet file: {exc}"}]
            ) from None

    def _open_columns(self) -> dict[str, Any]:
        """The file's columns by name, checked like the CSV upload's header (and their
        types: text ids and parts, numbers, timestamps as timestamps, dates or ISO text)."""
        import pyarrow as pa

        schema = self._file().schema_arrow
        errs = Errors()
        # The columns pandas adds for a named index are left out, as the columnar upload does.
        names = [n for n in schema.names if not _PANDAS_INDEX.fullmatch(n)]
        for name in CSV_REQUIRED:
            if name not in names:
                errs.add(
                    f"header.{name}",
                    f"required column {name!r} is missing (columns: {', '.join(names)})",
                )
        for name in names:
            if name not in CSV_REQUIRED and name not in CSV_OPTIONAL:
                errs.add(
                    f"header.{name}",
                    f"unknown column; expected {', '.join(CSV_REQUIRED + CSV_OPTIONAL)}",
                )
        if len(set(names)) != len(names):
            errs.add("header", "a column name appears twice")
        types = {name: schema.field(name).type for name in names}

        def text(t: Any) -> bool:
            if pa.types.is_dictionary(t):
                t = t.value_type
            return bool(pa.types.is_string(t) or pa.types.is_large_string(t))

        for name, t in types.items():
            if name == "series_id" and not (text(t) or pa.types.is_integer(t)):
                errs.add(f"header.{name}", f"must hold text (or integers), not {t}")
            elif name == "part" and not (text(t) or pa.types.is_null(t)):
                errs.add(f"header.{name}", f"must hold text (train or holdout), not {t}")
            elif name in _NUMBERS and not (
                pa.types.is_floating(t) or pa.types.is_integer(t) or pa.types.is_null(t)
            ):
                errs.add(f"header.{name}", f"must hold numbers, not {t}")
            elif name == "timestamp" and not (
                text(t) or pa.types.is_timestamp(t) or pa.types.is_date(t) or pa.types.is_null(t)
            ):
                errs.add(f"header.{name}", f"must hold timestamps (or ISO 8601 text), not {t}")
        errs.check()
        return types

    def _batches(self, columns: list[str]) -> Iterator[tuple[int, dict[str, Any]]]:
        """``(first row, {column: arrow array})`` per record batch."""
        start = 0
        for batch in self._file().iter_batches(batch_size=self._batch_rows, columns=columns):
            yield start, {name: batch.column(name) for name in columns}
            start += batch.num_rows

    # -------------------------------------------------------------------------- the scan

    def _scan(self, max_length: int | None) -> _Shape:
        import pyarrow as pa
        import pyarrow.compute as pc

        errs = Errors()
        names = list(self._columns)
        ids: list[str] = []
        train: list[np.ndarray] = []
        hold: list[np.ndarray] = []
        interval: list[np.ndarray] = []
        uneven: list[np.ndarray] = []
        seen: set[str] = set()
        last_id: str | None = None
        last_stamp = {False: None, True: None}
        for start, cols in self._batches(names):
            n = len(cols["series_id"])
            rows = np.arange(start, start + n) + self._first_row  # data rows, from 1 by default
            sid = cols["series_id"]
            if not pa.types.is_integer(sid.type):
                sid = pc.utf8_trim_whitespace(sid.cast(pa.string()))
            sid = sid.cast(pa.string())
            null_id = np.asarray(sid.is_null())
            empty = np.asarray(pc.fill_null(pc.equal(sid, ""), True))
            for k in np.flatnonzero(empty)[:8].tolist():
                got = "null" if null_id[k] else "an empty string"
                errs.add(
                    f"row[{rows[k]}].series_id",
                    f"must be a non-empty string, got {got} at data row {rows[k]}",
                )
            first_id = sid[0].as_py() if n else None
            part = _part(cols.get("part"), n)
            bad_part = part < 0
            for r, text in zip(
                rows[bad_part][:8], _texts(cols.get("part"), bad_part), strict=False
            ):
                errs.add(f"row[{r}].part", f"must be train or holdout, got {text[:40]!r}")
            holdout = part == 1
            numbers = {name: _numbers(cols.get(name), n) for name in _NUMBERS}
            for name, arr in numbers.items():
                if name in ("lower", "upper"):
                    on_train = ~holdout & ~np.isnan(arr) & ~bad_part
                    for r in rows[on_train][:8]:
                        errs.add(f"row[{r}].lower", "lower and upper belong on holdout rows only")
                _check_numbers(arr, cols.get(name), name, rows, errs)
            crossed = numbers["lower"] > numbers["upper"]  # NaN compares False
            for r in np.flatnonzero(crossed)[:8].tolist():
                errs.add(
                    f"row[{rows[r]}].lower",
                    f"lower bound {numbers['lower'][r]:g} is above upper bound "
                    f"{numbers['upper'][r]:g}",
                )
            # Runs of one id: a new series wherever the id changes.
            change = np.ones(n, dtype=bool)
            if n > 1:
                differs = pc.not_equal(sid.slice(1), sid.slice(0, n - 1))
                change[1:] = np.asarray(pc.fill_null(differs, True))
            if n and last_id is not None and first_id == last_id:
                change[0] = False
            starts = np.flatnonzero(change)
            # One Python string per series, not per row.
            run_ids = sid.take(pa.array(starts)).to_pylist() if starts.size else []
            for k, s in zip(starts.tolist(), run_ids, strict=True):
                if s is None or s == "":
                    continue
                if s in seen:
                    errs.add(
                        f"row[{rows[k]}].series_id",
                        f"series {s!r} appears again after other series: {NOT_CONTIGUOUS}",
                    )
                    continue
                if len(s) > MAX_NAME_LENGTH or "\x00" in s:
                    errs.add(
                        f"row[{rows[k]}].series_id",
                        f"must be at most {MAX_NAME_LENGTH} characters, without NUL",
                    )
                seen.add(s)
                ids.append(s)
            if "timestamp" in cols:
                last_stamp = _check_stamps(
                    cols["timestamp"], n, holdout, change, rows, last_stamp, errs
                )
            # Per run: train rows, holdout rows, bounds given, one bound without the other.
            if n:
                bounds = ~np.isnan(numbers["lower"]) | ~np.isnan(numbers["upper"])
                one = np.isnan(numbers["lower"]) != np.isnan(numbers["upper"])
                runs = (
                    np.add.reduceat(~holdout, starts) if starts.size else np.zeros(0, dtype=int),
                    np.add.reduceat(holdout, starts) if starts.size else np.zeros(0, dtype=int),
                    np.add.reduceat(bounds & holdout, starts) if starts.size else np.zeros(0),
                    np.add.reduceat(one & holdout, starts) if starts.size else np.zeros(0),
                )
                lead = slice(0, starts[0] if starts.size else n)  # rows continuing a series
                carry = (
                    int((~holdout[lead]).sum()),
                    int(holdout[lead].sum()),
                    int((bounds & holdout)[lead].sum()),
                    int((one & holdout)[lead].sum()),
                )
                for target, run, more in zip(
                    (train, hold, interval, uneven), runs, carry, strict=True
                ):
                    if more:
                        target[-1] = target[-1].copy()
                        target[-1][-1] += more
                    target.append(np.asarray(run, dtype=np.int64))
                last_id = sid[n - 1].as_py()
            if errs.full:
                break
        errs.check()
        shape = _Shape(
            ids=ids,
            train=_joined(train),
            holdout=_joined(hold),
            interval=_joined(interval) > 0,
            rows=_joined(train) + _joined(hold),
        )
        if not ids:
            errs.add("body", "no data rows")
        for i in np.flatnonzero(shape.train == 0)[:8].tolist():
            errs.add(
                f"series[{i}].actuals", f"series {ids[i]!r} has holdout rows but no train rows"
            )
        if max_length is not None:
            too_long = np.maximum(shape.train, shape.holdout) > max_length
            for i in np.flatnonzero(too_long)[:8].tolist():
                errs.add(
                    f"series[{i}].actuals", f"series {ids[i]!r} has more than {max_length} rows"
                )
        for i in np.flatnonzero(_joined(uneven) > 0)[:8].tolist():
            errs.add(
                f"series[{i}].holdout.lower",
                f"series {ids[i]!r}: lower and upper must be given on the same holdout rows",
            )
        errs.check()
        return shape

    # --------------------------------------------------------------------------- chunks

    def __iter__(self) -> Iterator[SeriesBatch]:
        shape = self._shape
        names = [n for n in ("part", *_NUMBERS) if n in self._columns]
        bounds = np.concatenate([[0], np.cumsum(shape.rows)])
        pending: list[dict[str, np.ndarray]] = []
        held = 0
        done = 0  # series yielded
        n = len(shape.ids)
        for _, cols in self._batches(names or ["series_id"]):
            arrays = {
                "part": _part(cols.get("part"), len(next(iter(cols.values())))),
                **{
                    name: _numbers(cols.get(name), len(next(iter(cols.values()))))
                    for name in _NUMBERS
                },
            }
            pending.append(arrays)
            held += len(arrays["part"])
            while done < n:
                stop = min(done + self._per_chunk, n)
                need = int(bounds[stop] - bounds[done])
                if held < need:
                    break
                rows = _take(pending, need)
                held -= need
                chunk = self._chunk(done, stop, rows)
                del rows
                _release()
                yield chunk
                done = stop
        if done < n:
            raise RequestInvalid([{"loc": "body", "message": "the file changed while it was read"}])

    def _chunk(self, lo: int, hi: int, rows: dict[str, np.ndarray]) -> SeriesBatch:
        """The batch of series ``lo..hi-1`` from their rows, at the fleet's shape."""
        shape = self._shape
        k = hi - lo
        counts = shape.rows[lo:hi]
        series = np.repeat(np.arange(k), counts)
        holdout = rows["part"] == 1

        def positions(mask: np.ndarray) -> np.ndarray:
            running = np.cumsum(mask)
            first = np.concatenate([[0], np.cumsum(counts)[:-1]])
            before = np.where(first > 0, running[np.maximum(first - 1, 0)], 0)
            before = np.where(first > 0, before, 0)
            return running - 1 - before[series]

        t_rows = ~holdout
        t_pos = positions(t_rows)
        width = shape.width
        actuals = np.full((k, width), np.nan)
        fitted = np.full((k, width), np.nan)
        actuals[series[t_rows], t_pos[t_rows]] = rows["actual"][t_rows]
        fitted[series[t_rows], t_pos[t_rows]] = rows["fitted"][t_rows]
        kwargs: dict[str, Any] = {}
        if shape.horizon:
            h_pos = positions(holdout)
            at = (series[holdout], h_pos[holdout])

            def matrix(values: np.ndarray) -> np.ndarray:
                out = np.full((k, shape.horizon), np.nan)
                out[at] = values[holdout]
                return out

            kwargs = {
                "holdout_actuals": matrix(rows["actual"]),
                "holdout_forecasts": matrix(rows["fitted"]),
            }
            if shape.interval.any():
                kwargs |= {
                    "holdout_lower": matrix(rows["lower"]),
                    "holdout_upper": matrix(rows["upper"]),
                    "level": [
                        self._level if has else None for has in shape.interval[lo:hi].tolist()
                    ],
                }
        return make_batch(
            actuals,
            fitted,
            # A series ends at its last train row, as in the CSV and columnar uploads: a
            # trailing missing value is a gap.
            lengths=shape.train[lo:hi],
            ids=shape.ids[lo:hi],
            season_length=self._season_length,
            model_params=self._model_params,
            **kwargs,
        )


# ------------------------------------------------------------------------------ helpers


def _release() -> None:
    """Hand the memory pyarrow's pool keeps of freed record batches back to the system (it
    would otherwise hold several record batches' worth for the rest of the process)."""
    import pyarrow as pa

    pa.default_memory_pool().release_unused()


def _joined(parts: list[np.ndarray]) -> np.ndarray:
    if not parts:
        return np.zeros(0, dtype=np.int64)
    return np.concatenate(parts).astype(np.int64)


def _part(column: Any, n: int) -> np.ndarray:
    """Per row: 0 train (null, empty or ``train``), 1 holdout, -1 anything else."""
    if column is None:
        return np.zeros(n, dtype=np.int8)
    import pyarrow as pa
    import pyarrow.compute as pc

    if pa.types.is_null(column.type):
        return np.zeros(n, dtype=np.int8)
    text = pc.fill_null(pc.utf8_trim_whitespace(column.cast(pa.string())), "")
    is_train = np.asarray(pc.is_in(text, value_set=pa.array(["", "train"])))
    is_hold = np.asarray(pc.equal(text, "holdout"))
    return np.where(is_hold, 1, np.where(is_train, 0, -1)).astype(np.int8)


def _texts(column: Any, mask: np.ndarray) -> list[str]:
    if column is None or not mask.any():
        return []
    import pyarrow as pa

    return [str(v) for v in column.cast(pa.string()).filter(mask).to_pylist()[:8]]


def _numbers(column: Any, n: int) -> np.ndarray:
    """The column as float64, NaN where null (all NaN when the column is absent)."""
    if column is None:
        return np.full(n, np.nan)
    import pyarrow as pa

    if pa.types.is_null(column.type):
        return np.full(n, np.nan)
    return np.asarray(column.cast(pa.float64()).fill_null(np.nan), dtype=float)


def _check_numbers(
    values: np.ndarray, column: Any, name: str, rows: np.ndarray, errs: Errors
) -> None:
    """A value that is not finite (a float column's NaN or infinity: a missing value is null)
    or beyond the accepted magnitude."""
    if column is None:
        return
    null = np.asarray(column.is_null()) if column.null_count else np.zeros(len(values), bool)
    with np.errstate(invalid="ignore"):
        bad = (~np.isfinite(values) & ~null) | (np.abs(values) > MAX_ABS_VALUE)
    for r in np.flatnonzero(bad)[:8].tolist():
        v = values[r]
        if np.isfinite(v):
            message = (
                f"value {v:g} is beyond the accepted magnitude of {MAX_ABS_VALUE:g}; rescale "
                "the series"
            )
        else:
            message = f"must be a finite number or empty, got {v!r}"
        errs.add(f"row[{rows[r]}].{name}", message)


def _check_stamps(
    column: Any,
    n: int,
    holdout: np.ndarray,
    change: np.ndarray,
    rows: np.ndarray,
    last: dict[bool, Any],
    errs: Errors,
) -> dict[bool, Any]:
    """Timestamps on every train row, strictly increasing within a series' train rows and
    within its holdout rows (``last``: the previous batch's last of each, for its last
    series); returns this batch's last of each."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if pa.types.is_null(column.type):
        stamps = np.full(n, np.iinfo(np.int64).min)
        null = np.ones(n, dtype=bool)
    else:
        if pa.types.is_string(column.type) or pa.types.is_large_string(column.type):
            try:
                column = pc.cast(column, pa.timestamp("us"))
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
                errs.add("header.timestamp", f"must hold ISO 8601 timestamps: {exc}")
                return {False: None, True: None}
        elif pa.types.is_date(column.type):
            column = pc.cast(column, pa.timestamp("s"))
        null = np.asarray(column.is_null())
        stamps = np.asarray(column.cast(pa.int64()).fill_null(0), dtype=np.int64)
    for r in rows[null & ~holdout][:8]:
        errs.add(
            f"row[{r}].timestamp", "every train row needs a timestamp when the column is present"
        )
    # Series number per row (0 continues the previous batch's last series).
    series = np.cumsum(change)
    out = dict(last)
    for part in (False, True):
        sel = np.flatnonzero((holdout == part) & ~null)
        if sel.size == 0:
            if change.any():
                out[part] = None
            continue
        s = stamps[sel]
        g = series[sel]
        same = np.zeros(sel.size, dtype=bool)
        same[1:] = g[1:] == g[:-1]
        bad = np.zeros(sel.size, dtype=bool)
        bad[1:] = same[1:] & (s[1:] <= s[:-1])
        if last[part] is not None and g[0] == 0:
            bad[0] = s[0] <= last[part]
        for k in np.flatnonzero(bad)[:8].tolist():
            errs.add(
                f"row[{rows[sel[k]]}].timestamp",
                "not after the series' previous timestamp: periods must be strictly "
                "increasing, without duplicates",
            )
        out[part] = int(s[-1]) if g[-1] == series[-1] else None
    return out


def _take(pending: list[dict[str, np.ndarray]], need: int) -> dict[str, np.ndarray]:
    """The first ``need`` rows held in ``pending`` (removed from it)."""
    taken: list[dict[str, np.ndarray]] = []
    left = need
    while left:
        head = pending[0]
        size = len(head["part"])
        if size <= left:
            taken.append(pending.pop(0))
            left -= size
        else:
            taken.append({k: v[:left] for k, v in head.items()})
            pending[0] = {k: v[left:] for k, v in head.items()}
            left = 0
    if len(taken) == 1:
        return taken[0]
    return {k: np.concatenate([t[k] for t in taken]) for k in taken[0]}
