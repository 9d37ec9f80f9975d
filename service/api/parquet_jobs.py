"""Parquet jobs in bounded memory: the upload kept as sent, in parts, and assessed in chunks.

A Parquet upload submitted with ``Prefer: respond-async`` is not parsed whole. At submission
the body (a temporary file when it is big: :mod:`service.api.spool`) is scanned by
:class:`~service.ingest.parquet_chunks.ParquetChunks`, which checks every row and names the
row and column of a problem as the columnar upload does (rows counted from 0), and the
timestamps are checked for what the columnar upload also refuses (an empty one on any row).
Then the file is stored as sent, in parts of :data:`PART_BYTES`, with the job
(``NewJob.input_parts``); the job's ``input`` holds only a description (:class:`Described`).

When the job runs, the parts are written back to a temporary file, the fleet is assessed chunk
by chunk (:func:`service.cluster.assess_chunks_on`: here, or on the Dask cluster configured),
its progress reported after each part, and the assessment is stored with its series rows and
inputs made part by part while they are written (``NewAssessment.parts``): across chunks only
what the fleet decision needs is held (every series' statistics and p-values, not its
observations), and no list of every series' row is ever built. The stored assessment is the
one the synchronous POST of the same file stores, to the last bit.

The path needs what :class:`ParquetChunks` needs: the rows of each series together. A file
whose series are not contiguous, or a request with ``burn_in`` or ``baseline``, goes the
whole-file way instead (:func:`describe` answers ``None``): parsed whole and stored as arrays,
as every other job.
"""

from __future__ import annotations

import io
import tempfile
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import asdict, dataclass
from datetime import datetime
from typing import IO, Any

import numpy as np
import orjson

from service.core.gate import Assessment
from service.ingest.columnar import is_text_type
from service.ingest.csv_body import check_params, read_csv_envelope, read_level
from service.ingest.request import Errors, RequestInvalid
from service.results import AssessmentDocument, SeriesTable, to_dicts
from service.settings import Settings
from service.store.port import Store
from service.store.records import (
    ClaimedJob,
    NewAssessment,
    SeriesInput,
    SeriesParts,
    SeriesResult,
    utcnow,
)

from . import assessing
from .memory import release_memory

MIB = 1024 * 1024
PART_BYTES = 4 * MIB
"""Bytes per stored part of a job's input."""

SERIES_PER_CHUNK = 16_384
"""Series per chunk read from the file when the job runs."""

PART_BLOCKS = 8
"""Blocks of 1,024 series per part of the chunked assessment (the result does not depend on
it; smaller parts hold fewer observations at a time)."""

WRITE_SERIES = 2_048
"""Series whose rows and inputs are made and written at a time."""

MAGIC = b"plumbline:parquet-parts:1\n"
"""How a job's ``input`` that describes parts (not ``.npz`` arrays) begins."""

_DUMP = orjson.OPT_SERIALIZE_NUMPY


@dataclass(frozen=True)
class Described:
    """What a Parquet job's ``input`` holds: the upload's query parameters and fields, the
    fleet's size and how its timestamps are written as text."""

    params: dict[str, str]
    model: str
    version: str
    policy: Any
    season_length: int
    model_params: int
    level: float | None
    n_series: int
    size: int
    stamps: dict[str, Any] | None
    """``None`` without a timestamp column; else ``{"text": bool, "unit": str, "utc": bool}``."""

    def encode(self) -> bytes:
        return MAGIC + orjson.dumps(asdict(self))

    @classmethod
    def decode(cls, blob: bytes) -> Described:
        return cls(**orjson.loads(blob[len(MAGIC) :]))


def is_described(blob: bytes) -> bool:
    """Whether a job's stored ``input`` describes parts (a Parquet job of this module)."""
    return blob.startswith(MAGIC)


# ---------------------------------------------------------------------------------------------
# Submission


def _source(body: bytes | IO[bytes]) -> IO[bytes]:
    return io.BytesIO(body) if isinstance(body, bytes) else body


def _size(source: IO[bytes]) -> int:
    end = source.seek(0, 2)
    source.seek(0)
    return end


def describe(
    body: bytes | IO[bytes], params: Mapping[str, str], settings: Settings
) -> Described | None:
    """Check a Parquet upload for a job (the 422 a synchronous POST would answer, naming
    ``row[N].column``) and describe it; ``None`` when it must go the whole-file way (series not
    contiguous, ``burn_in`` or ``baseline`` asked for)."""
    from service.ingest.parquet_chunks import NOT_CONTIGUOUS, ParquetChunks

    params = dict(params)
    errs = Errors()
    check_params(params, errs)
    level = read_level(params, errs)
    envelope = read_csv_envelope(params, errs)
    errs.check()
    if envelope.baseline is not None or envelope.burn_in:
        return None
    source = _source(body)
    try:
        chunks = ParquetChunks(
            source,
            season_length=envelope.season_length,
            model_params=envelope.model_params,
            level=level,
            max_series_length=settings.max_series_length,
            first_row=0,
        )
    except RequestInvalid as exc:
        if any(e["message"].endswith(NOT_CONTIGUOUS) for e in exc.errors):
            return None
        raise
    n = chunks.n_series
    if settings.max_series is not None and n > settings.max_series:
        raise RequestInvalid(
            [{"loc": "series", "message": f"holds {n} series; the limit is {settings.max_series}"}]
        )
    stamps = _stamp_form(source, chunks.columns)
    del chunks
    if not isinstance(body, bytes):  # a spooled upload: its scan freed hundreds of MiB
        release_memory()
    return Described(
        params=params,
        model=envelope.model,
        version=envelope.version,
        policy=envelope.policy,
        season_length=envelope.season_length,
        model_params=envelope.model_params,
        level=level,
        n_series=n,
        size=_size(source),
        stamps=stamps,
    )


def input_parts(body: bytes | IO[bytes]) -> Iterator[bytes]:
    """The upload as sent, in parts of :data:`PART_BYTES`."""
    source = _source(body)
    source.seek(0)
    while part := source.read(PART_BYTES):
        yield part


def _stamp_form(source: IO[bytes], columns: Sequence[str]) -> dict[str, Any] | None:
    """How the timestamps become text, as the columnar upload writes them (dates as dates,
    times to the second unless some are finer); a 422 naming the rows whose timestamp is
    empty (the chunked reader asks for one on train rows only, the upload on every row)."""
    if "timestamp" not in columns:
        return None
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq
    import pyarrow.types as pat

    source.seek(0)
    reader = pq.ParquetFile(source, pre_buffer=False)
    kind = reader.schema_arrow.field("timestamp").type
    if pat.is_dictionary(kind):
        kind = kind.value_type
    text = is_text_type(kind)
    errs = Errors()
    unit = "s"
    whole = True
    start = 0
    for batch in reader.iter_batches(batch_size=65_536, columns=["timestamp"]):
        column = batch.column("timestamp")
        if pat.is_dictionary(column.type):
            column = column.dictionary_decode()
        n = len(column)
        if text:
            trimmed = pc.utf8_trim_whitespace(column.cast(pa.string()))
            empty = np.asarray(pc.fill_null(pc.equal(trimmed, ""), True))
        else:
            empty = np.asarray(column.is_null())
            moments = _moments(column)
            unit = np.datetime_data(moments.dtype)[0]
            if whole and unit not in ("D", "W", "M", "Y", "h", "m", "s"):
                filled = moments[~empty]
                whole = bool((filled.astype("datetime64[s]").astype(filled.dtype) == filled).all())
        for r in np.flatnonzero(empty)[:8].tolist():
            errs.add(
                f"row[{start + r}].timestamp",
                "must not be empty: every row needs a timestamp when the column is present",
            )
        start += n
        if errs.full:
            break
    errs.check()
    if text or pat.is_null(kind):
        return {"text": True, "unit": "", "utc": False}
    if unit not in ("D", "W", "M", "Y", "h", "m", "s"):
        unit = "s" if whole else unit
    unit = "D" if unit in ("D", "W", "M", "Y") else ("s" if unit in ("h", "m") else unit)
    return {"text": False, "unit": unit, "utc": bool(pat.is_timestamp(kind) and kind.tz)}


def _moments(column: Any) -> np.ndarray:
    """An Arrow timestamp or date column as numpy ``datetime64`` (nulls as the epoch)."""
    import pyarrow as pa
    import pyarrow.types as pat

    filled = column.fill_null(0) if column.null_count else column
    if pat.is_date64(column.type):
        filled = filled.cast(pa.timestamp("ms"))
    return np.asarray(filled.to_numpy(zero_copy_only=False))


# ---------------------------------------------------------------------------------------------
# Running


@contextmanager
def _written_back(store: Store, job_id: str, described: Described) -> Iterator[str]:
    """The job's stored parts as one temporary file (its path), for the ``with`` block."""
    with tempfile.NamedTemporaryFile(prefix="plumbline-job-", suffix=".parquet") as out:
        for part in store.job_input_parts(job_id=job_id):
            out.write(part)
            del part
        out.flush()
        if out.tell() != described.size:
            raise ValueError(
                f"the stored input of job {job_id} holds {out.tell()} bytes, not {described.size}"
            )
        yield out.name


@contextmanager
def prepared(
    store: Store,
    settings: Settings,
    claimed: ClaimedJob,
    progress: Callable[[int, int | None], None],
    assess: Callable[..., Assessment],
    policy: Any,
) -> Iterator[NewAssessment]:
    """The record to store for a claimed Parquet job (valid within the ``with`` block, whose
    series rows and inputs are made from the file while they are written)."""
    from service.ingest.parquet_chunks import ParquetChunks

    described = Described.decode(claimed.input)
    job = claimed.job
    with _written_back(store, job.id, described) as path:
        chunks = ParquetChunks(
            path,
            season_length=described.season_length,
            model_params=described.model_params,
            level=described.level,
            max_series_length=settings.max_series_length,
            first_row=0,
            series_per_chunk=SERIES_PER_CHUNK,
        )
        n = chunks.n_series
        release_memory()
        progress(0, n)
        assessment = assess(chunks, policy, progress, total=n)
        release_memory()
        result = assessment.result("none")
        doc = AssessmentDocument(
            id=job.assessment_id,
            created_at=utcnow().isoformat(),
            model=described.model,
            version=described.version,
            stored=True,
            labels={},
            season_length=described.season_length,
            model_params=described.model_params,
            extra={},
            result=result,
        )
        created = doc.created_at
        assert created is not None
        (data,) = to_dicts([doc])
        data.pop("series")
        head = orjson.dumps(data, option=_DUMP)

        def make() -> Iterator[tuple[Sequence[SeriesResult], Sequence[SeriesInput]]]:
            # Written a few thousand series at a time: a series' row is a few kB of JSON and
            # some hundred Python values while it is made.
            size = chunks.series_per_chunk
            step = WRITE_SERIES if size % WRITE_SERIES == 0 else size
            tables = assessment.series_parts(step)
            stamps = _stamp_texts(path, chunks, described.stamps)
            hold = chunks.holdout_lengths
            lo = 0
            for batch, (t_stamps, h_stamps) in zip(chunks, stamps, strict=True):
                for j in range(0, batch.n_series, step):
                    part = slice(j, j + step)
                    table = next(tables)
                    yield (
                        _rows(table),
                        _inputs(
                            batch.rows(part),
                            hold[lo + j : lo + j + step],
                            (t_stamps[part], h_stamps[part]),
                        ),
                    )
                    del table
                lo += batch.n_series
                del batch
                release_memory()

        yield NewAssessment(
            assessment_id=job.assessment_id,
            created_at=datetime.fromisoformat(created),
            model=described.model,
            version=described.version,
            verdict=str(result.verdict),
            n_failed=result.fleet.n_failed,
            n_warned=result.fleet.n_warned,
            policy_name=result.policy.name,
            policy_version=result.policy.version,
            policy_document=claimed.policy_document,
            head=head,
            series=(),
            inputs=(),
            idempotency_key=job.idempotency_key,
            body_hash=job.body_hash,
            parts=SeriesParts(n_series=n, make=make),
        )


def _rows(table: SeriesTable) -> list[SeriesResult]:
    """A part's series rows, encoded as the synchronous POST stores them."""
    rows = table.to_dicts()
    return [
        SeriesResult(series_id=sid, verdict=v, n_obs=k, json=orjson.dumps(row, option=_DUMP))
        for sid, v, k, row in zip(
            table.ids, table.column("verdict"), table.column("n_obs"), rows, strict=True
        )
    ]


_Texts = tuple[list[list[str] | None], list[list[str] | None]]


def _stamp_texts(path: str, chunks: Any, form: dict[str, Any] | None) -> Iterator[_Texts]:
    """Per chunk: each series' train and holdout timestamps as text (``None`` where it has
    none), read from the file beside the chunks."""
    n = chunks.n_series
    size = chunks.series_per_chunk
    if form is None:
        for lo in range(0, n, size):
            k = min(lo + size, n) - lo
            yield [None] * k, [None] * k
        return
    import pyarrow as pa
    import pyarrow.parquet as pq

    train = chunks.train_lengths
    hold = chunks.holdout_lengths
    counts = train + hold
    names = ["timestamp"] + (["part"] if "part" in chunks.columns else [])
    reader = pq.ParquetFile(path, pre_buffer=False)
    pending: list[Any] = []
    held = 0
    batches = reader.iter_batches(batch_size=65_536, columns=names)
    for lo in range(0, n, size):
        hi = min(lo + size, n)
        need = int(counts[lo:hi].sum())
        while held < need:
            batch = next(batches)
            pending.append(batch)
            held += batch.num_rows
        whole = pa.Table.from_batches(pending)
        table = whole.slice(0, need)
        pending = whole.slice(need).to_batches()
        held -= need
        del whole
        texts = _as_text(table.column("timestamp"), form)
        if "part" in table.column_names:
            from service.ingest.parquet_chunks import _part

            holdout = _part(table.column("part"), need) == 1
        else:
            holdout = np.zeros(need, dtype=bool)
        yield (
            _split(texts[~holdout], train[lo:hi]),
            _split(texts[holdout], hold[lo:hi]),
        )


def _as_text(column: Any, form: dict[str, Any]) -> np.ndarray:
    import pyarrow as pa
    import pyarrow.compute as pc

    if column.num_chunks != 1:
        column = column.combine_chunks()
    else:
        column = column.chunk(0)
    if pa.types.is_dictionary(column.type):
        column = column.dictionary_decode()
    if form["text"]:
        trimmed = pc.utf8_trim_whitespace(column.cast(pa.string())).fill_null("")
        return np.asarray(trimmed.to_numpy(zero_copy_only=False), dtype=object)
    zone = "UTC" if form["utc"] else "naive"
    moments = _moments(column)
    return np.asarray(
        np.datetime_as_string(moments, unit=form["unit"], timezone=zone),  # type: ignore[call-overload]
        dtype=object,
    )


def _split(texts: np.ndarray, lengths: np.ndarray) -> list[list[str] | None]:
    out: list[list[str] | None] = []
    start = 0
    for length in lengths.tolist():
        out.append([str(s) for s in texts[start : start + length]] if length else None)
        start += length
    return out


def _inputs(batch: Any, hold_lengths: np.ndarray, texts: _Texts) -> list[SeriesInput]:
    """A chunk's stored inputs, as the synchronous POST stores them (training values as
    sent, holdout values and, where given, the interval and its level)."""
    t_stamps, h_stamps = texts
    h = batch.holdout
    out = []
    for i, (sid, n, nh) in enumerate(
        zip(batch.ids, batch.lengths.tolist(), hold_lengths.tolist(), strict=True)
    ):
        hold = assessing.holdout_input(h, i, nh, h_stamps[i])
        out.append(
            SeriesInput(
                series_id=sid,
                weight=None,
                actuals=batch.actuals[i, :n],
                fitted=batch.fitted[i, :n],
                timestamps=t_stamps[i],
                burn_in=0,
                **hold,
            )
        )
    return out
