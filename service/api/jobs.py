"""Background jobs: an assessment submitted with ``Prefer: respond-async`` (RFC 7240).

The request is read and validated as a synchronous one would be (a bad body is still a 422
before anything is stored); its policy is resolved then, so the job runs on the policy version
current at submission. The validated arrays are stored with the job as binary
(:func:`encode_request`, NumPy's ``.npz`` container: a float64 array per matrix and one JSON
member for ids, timestamps and the request's own fields), not as the JSON that was sent.

:class:`JobRunner` runs jobs in threads of the serving process: each thread takes the next job
from the store (``Store.claim_job``: any process sharing a PostgreSQL database may take it),
keeps its lease alive while it works, and stores the assessment and the job's end in one
transaction. The work itself is one call, ``work(job_input, progress)`` (:func:`assess_input`
by default), which returns the assessment's result and calls ``progress(done, total)`` as
series are done; another implementation (chunks of series, a cluster) takes its place through
the runner's ``work`` argument.

A Parquet upload is the exception: it is stored as sent, in parts, and read back chunk by
chunk when the job runs (:mod:`service.api.parquet_jobs`; the ``work`` argument is not used
for it).

A job fails only on a server-side error: its problem document is stored with the job. A job
whose worker died (the process was killed, the machine lost) is taken up again once its lease
expires; one that was started ``job_max_attempts`` times without finishing is failed, so a
job that kills its worker cannot take every worker down in turn.
"""

from __future__ import annotations

import io
import logging
import os
import socket
import threading
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from http import HTTPStatus
from typing import IO, Any

import numpy as np
import orjson
from starlette.concurrency import run_in_threadpool
from starlette.responses import Response

from service.core import SeriesBatch
from service.core.batch import Holdout
from service.core.gate import assess_many_results
from service.core.policy import Policy
from service.ingest import AssessmentRequest
from service.results import AssessmentResult
from service.settings import Settings
from service.store.port import IdempotencyConflict, JobLost, Store, StoreError, StoreUnavailable
from service.store.records import ClaimedJob, NewJob, StoredJob, new_id, utcnow

from . import assessing, parquet_jobs, policy_lookup
from .deps import Services
from .errors import INTERNAL_ERROR, TYPE_PREFIX, ApiError
from .gcpause import paused_gc
from .httputil import JSON
from .memory import release_memory
from .policy_lookup import policy_from_document
from .spool import read_all

log = logging.getLogger("plumbline.jobs")

Progress = Callable[[int, int], None]
"""``progress(series_done, series_total)``."""

FORMAT = 1
"""Version of the stored input's layout (:func:`encode_request`)."""


@dataclass(frozen=True)
class JobInput:
    """What a job's work is given: the validated request and the policy it runs on."""

    request: AssessmentRequest
    policy: Policy


Work = Callable[[JobInput, Progress], AssessmentResult]


def assess_input(job: JobInput, progress: Progress) -> AssessmentResult:
    """The default work: the whole fleet in one vectorised pass, as a synchronous POST."""
    n = job.request.n_series
    progress(0, n)
    (result,) = assess_many_results([(job.request.batch, job.policy)])
    progress(n, n)
    return result


# ---------------------------------------------------------------------------------------------
# The stored input


_MATRICES = ("actuals", "fitted", "h_actuals", "h_forecasts", "h_lower", "h_upper")


def encode_request(req: AssessmentRequest) -> bytes:
    """The validated request as bytes: an ``.npz`` archive of little-endian arrays and one
    JSON member for the ids, timestamps and the request's own fields.

    A matrix is kept as its rows' values up to each row's last non-missing one (``name``) and
    those lengths (``name.len``): a ragged fleet's padding is not stored.
    """
    b = req.batch
    h = b.holdout
    meta = {
        "format": FORMAT,
        "model": req.model,
        "version": req.version,
        "policy": req.policy,
        "season_length": req.season_length,
        "model_params": req.model_params,
        "labels": req.labels,
        "ids": list(req.ids),
        "timestamps": list(req.timestamps),
        "holdout_timestamps": list(req.holdout_timestamps),
        "weights_given": list(req.weights_given),
        "baseline": req.baseline,
        "request_burn_in": req.request_burn_in,
        "burn_in_given": list(req.burn_in_given),
        "batch_ids": list(b.ids),
        "batch_season_length": b.season_length,
        "batch_model_params": b.model_params,
        "widths": {},
    }
    arrays: dict[str, np.ndarray] = {
        "weights": b.weights,
        "lengths": b.lengths,
        "burn_in": b.burn_in,
        "weights_given_mask": b.weights_given,
        "train_lengths": np.asarray(req.train_lengths),
        "holdout_lengths": np.asarray(req.holdout_lengths),
    }
    if req.burn_in is not None:
        arrays["req_burn_in"] = np.asarray(req.burn_in)
    matrices = {"actuals": b.actuals, "fitted": b.fitted}
    if req.fitted_given is not None:
        matrices["fitted_given"] = req.fitted_given
    if h is not None:
        matrices.update(h_actuals=h.actuals, h_forecasts=h.forecasts)
        for name in ("lower", "upper"):
            if getattr(h, name) is not None:
                matrices[f"h_{name}"] = getattr(h, name)
        if h.level is not None:
            arrays["h_level"] = h.level
    for name, matrix in matrices.items():
        present = ~np.isnan(matrix)
        width = matrix.shape[1]
        last = np.where(present.any(axis=1), width - np.argmax(present[:, ::-1], axis=1), 0)
        arrays[name] = matrix[np.arange(width)[None, :] < last[:, None]]
        arrays[f"{name}.len"] = last.astype(np.int64)
        meta["widths"][name] = width  # type: ignore[index]
    arrays["meta"] = np.frombuffer(orjson.dumps(meta), dtype=np.uint8)
    buffer = io.BytesIO()
    np.savez(buffer, **{k: _little_endian(v) for k, v in arrays.items()})  # type: ignore[arg-type]
    return buffer.getvalue()


def _little_endian(a: np.ndarray) -> np.ndarray:
    a = np.asarray(a)
    if a.dtype.kind in "fiu" and a.dtype.byteorder == ">":
        return a.astype(a.dtype.newbyteorder("<"))
    return a


def _read_only(a: np.ndarray) -> np.ndarray:
    a.flags.writeable = False
    return a


def _matrix(arrays: dict[str, np.ndarray], name: str, width: int) -> np.ndarray:
    last = arrays[f"{name}.len"]
    out = np.full((last.shape[0], width), np.nan)
    out[np.arange(width)[None, :] < last[:, None]] = arrays[name]
    return _read_only(out)


def decode_request(blob: bytes) -> AssessmentRequest:
    """The request :func:`encode_request` stored, its arrays equal to the last bit."""
    with np.load(io.BytesIO(blob), allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    meta = orjson.loads(arrays.pop("meta").tobytes())
    if meta.get("format") != FORMAT:
        raise ValueError(f"stored job input has format {meta.get('format')!r}, not {FORMAT}")
    widths = meta["widths"]
    m = {name: _matrix(arrays, name, width) for name, width in widths.items()}
    holdout = None
    if "h_actuals" in m:
        holdout = Holdout(
            actuals=m["h_actuals"],
            forecasts=m["h_forecasts"],
            lower=m.get("h_lower"),
            upper=m.get("h_upper"),
            level=_maybe(arrays.get("h_level")),
        )
    batch = SeriesBatch(
        ids=tuple(meta["batch_ids"]),
        actuals=m["actuals"],
        fitted=m["fitted"],
        weights=_read_only(arrays["weights"]),
        season_length=int(meta["batch_season_length"]),
        model_params=int(meta["batch_model_params"]),
        holdout=holdout,
        lengths=_read_only(arrays["lengths"]),
        burn_in=_read_only(arrays["burn_in"]),
        weights_given=_read_only(arrays["weights_given_mask"]),
    )
    return AssessmentRequest(
        model=meta["model"],
        version=meta["version"],
        policy=meta["policy"],
        season_length=int(meta["season_length"]),
        model_params=int(meta["model_params"]),
        labels=dict(meta["labels"]),
        ids=tuple(meta["ids"]),
        batch=batch,
        timestamps=tuple(meta["timestamps"]),
        holdout_timestamps=tuple(meta["holdout_timestamps"]),
        train_lengths=arrays["train_lengths"],
        holdout_lengths=arrays["holdout_lengths"],
        weights_given=tuple(meta["weights_given"]),
        baseline=meta.get("baseline"),
        request_burn_in=int(meta.get("request_burn_in", 0)),
        burn_in=_maybe(arrays.get("req_burn_in")),
        burn_in_given=tuple(meta.get("burn_in_given", ())),
        fitted_given=m.get("fitted_given"),
    )


def _baseline_problem(store: Store, pending: assessing.Job) -> None:
    """Match the baseline ``pending`` asks for (its batch then carries it); raise the 422 (or
    the store's error) a synchronous POST would answer when it cannot be compared."""
    if pending.req.baseline is None:
        return
    outcomes: list[Any] = [None]
    assessing.attach_baselines(store, [pending], outcomes)
    if outcomes[0] is not None:
        raise outcomes[0]


def _maybe(a: np.ndarray | None) -> np.ndarray | None:
    return None if a is None else _read_only(a)


# ---------------------------------------------------------------------------------------------
# Submission


def prefers_async(prefer: str | None) -> bool:
    """Whether a ``Prefer`` header (RFC 7240 section 2) asks for ``respond-async``.

    Preferences are comma-separated, each a token optionally followed by ``=value`` and
    ``;parameters``; names are case-insensitive. Several ``Prefer`` headers arrive joined by
    commas.
    """
    if not prefer:
        return False
    for item in prefer.split(","):
        name = item.split(";", 1)[0].split("=", 1)[0].strip().lower()
        if name == "respond-async":
            return True
    return False


@dataclass(frozen=True)
class Submitted:
    """What a submission with ``respond-async`` came to: a job (new, or the one an
    ``Idempotency-Key`` names) or the stored assessment a repeated key had produced."""

    job: StoredJob | None = None
    replayed: bool = False
    assessment: assessing.Outcome | None = None


def _same_key(found: StoredJob, key: str, digest: str | None) -> Submitted:
    if found.body_hash != digest:
        raise ApiError(
            409,
            f"Idempotency-Key {key!r} was already used with another request "
            "body; use a new key for a new assessment",
            slug="idempotency-key-reused",
        )
    return Submitted(job=found, replayed=True)


def submit(
    store: Store,
    settings: Settings,
    *,
    kind: str,
    body: bytes | IO[bytes],
    params: Mapping[str, str],
    key: str | None,
    digest: str | None,
) -> Submitted:
    """Validate a submission and store it as a queued job (blocking: run it in a thread).

    Raises what a synchronous POST would for a bad body or an unknown policy (422), or a key
    used with another body (409). A key already used with the same body answers with what it
    produced: its job, or the stored assessment of a synchronous POST.
    """
    if key is not None:
        replay = assessing.replay(store, key, digest)  # type: ignore[arg-type]
        if replay is not None:
            return Submitted(assessment=replay, replayed=True)
        found = store.find_job_by_key(key=key)
        if found is not None:
            return _same_key(found, key, digest)
    described = None
    if kind == "parquet":  # read in chunks when it runs, unless it cannot be (then None)
        described = parquet_jobs.describe(body, params, settings)
    if described is not None:
        _policy, document = policy_lookup.resolve(store, described.policy)
        record = NewJob(
            job_id=new_id(),
            created_at=utcnow(),
            model=described.model,
            version=described.version,
            n_series=described.n_series,
            input=described.encode(),
            input_parts=parquet_jobs.input_parts(body),
            policy_document=document,
            assessment_id=new_id(),
            idempotency_key=key,
            body_hash=digest,
        )
    else:
        req = assessing.parse(kind, read_all(body), params, settings)
        pending = assessing.Job(req=req, store=True, idempotency_key=key, digest=digest)
        (problem,) = assessing.resolve_policies(store, [pending])
        if problem is not None:
            raise problem
        # A baseline that cannot be compared is refused now, as a synchronous POST would; the
        # job matches it again when it runs (latest-pass: the newest passing version then).
        _baseline_problem(store, pending)
        assert pending.document is not None
        record = NewJob(
            job_id=new_id(),
            created_at=utcnow(),
            model=req.model,
            version=req.version,
            n_series=req.n_series,
            input=encode_request(req),
            policy_document=pending.document,
            assessment_id=new_id(),
            idempotency_key=key,
            body_hash=digest,
        )
        del req, pending
    try:
        return Submitted(job=store.create_job(record))
    except IdempotencyConflict:  # the same key submitted at the same moment
        found = store.find_job_by_key(key=key)  # type: ignore[arg-type]
        if found is None:
            raise
        return _same_key(found, key, digest)  # type: ignore[arg-type]


async def respond_async(
    store: Store,
    settings: Settings,
    services: Services,
    *,
    kind: str,
    body: bytes | IO[bytes],
    params: Mapping[str, str],
    key: str | None,
    digest: str | None,
) -> Response:
    """The answer to a POST with ``Prefer: respond-async``: ``202`` with the job and its
    ``Location`` (``Idempotent-Replayed`` when a repeated key named it), or ``200`` with the
    stored assessment a repeated key of a synchronous POST had produced."""

    def run() -> Submitted:
        with paused_gc():
            return submit(
                store, settings, kind=kind, body=body, params=params, key=key, digest=digest
            )

    done = await run_in_threadpool(run)
    if done.assessment is not None:
        outcome = done.assessment
        return Response(
            outcome.body,
            status_code=200,
            media_type=JSON,
            headers={
                "Location": f"/v1/assessments/{outcome.assessment_id}",
                "Idempotent-Replayed": "true",
            },
        )
    job = done.job
    assert job is not None
    if services.jobs is not None and not done.replayed:
        services.jobs.notify()
    headers = {
        "Location": f"/v1/jobs/{job.id}",
        "Preference-Applied": "respond-async",
        "Retry-After": "1",
    }
    if done.replayed:
        headers["Idempotent-Replayed"] = "true"
    return Response(orjson.dumps(job_view(job)), status_code=202, media_type=JSON, headers=headers)


def job_view(job: StoredJob) -> dict[str, Any]:
    """The JSON of ``GET /v1/jobs/{id}``."""
    view: dict[str, Any] = {
        "id": job.id,
        "state": job.state,
        "model": job.model,
        "version": job.version,
        "progress": {"series_done": job.series_done, "series_total": job.n_series},
        "created_at": job.created_at.isoformat(),
        "started_at": None if job.started_at is None else job.started_at.isoformat(),
        "updated_at": job.updated_at.isoformat(),
        "finished_at": None if job.finished_at is None else job.finished_at.isoformat(),
        "attempts": job.attempts,
        "assessment": None,
        "error": job.error,
    }
    if job.state == "done":
        view["assessment"] = {
            "id": job.assessment_id,
            "href": f"/v1/assessments/{job.assessment_id}",
        }
    return view


# ---------------------------------------------------------------------------------------------
# Running


def _problem(status: int, detail: str, slug: str) -> dict[str, Any]:
    return {
        "type": TYPE_PREFIX + slug,
        "title": HTTPStatus(status).phrase,
        "status": status,
        "detail": detail,
    }


def worker_name() -> str:
    """This process' name in the jobs it takes: host and process id."""
    return f"{socket.gethostname()}:{os.getpid()}"


class JobRunner:
    """Runs the store's jobs in ``settings.job_workers`` threads of this process.

    :meth:`run_once` takes and runs one job (``False`` when none was free); the threads
    started by :meth:`start` call it until :meth:`stop`, waiting ``job_poll_seconds`` between
    empty looks, or less when this process has just queued a job (:meth:`notify`).
    """

    def __init__(self, store: Store, settings: Settings, *, work: Work = assess_input) -> None:
        self.store = store
        self.settings = settings
        self.work = work
        self.worker = worker_name()
        self._stop = threading.Event()
        self._wake = threading.Event()
        self._threads: list[threading.Thread] = []

    # --- life cycle ------------------------------------------------------------------------

    def start(self) -> None:
        if self._threads or self.settings.job_workers < 1:
            return
        self._stop.clear()
        for i in range(self.settings.job_workers):
            thread = threading.Thread(target=self._loop, name=f"plumbline-job-{i}", daemon=True)
            thread.start()
            self._threads.append(thread)

    def stop(self, timeout: float | None = None) -> None:
        """Stop taking jobs and wait for the running ones to end (``timeout`` seconds at most:
        a job left running is taken up by another worker when its lease expires)."""
        self._stop.set()
        self._wake.set()
        for thread in self._threads:
            thread.join(timeout)
        self._threads = []

    def notify(self) -> None:
        """A job was queued: look now rather than at the next poll."""
        self._wake.set()

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                took = self.run_once()
            except StoreError as exc:  # the database is away: try again at the next poll
                log.warning("jobs: could not take a job: %s", exc)
                took = False
            except Exception:  # a bug: logged, and the thread keeps serving the queue
                log.exception("jobs: unexpected error taking or running a job")
                took = False
            if not took:
                self._wake.wait(self.settings.job_poll_seconds)
                self._wake.clear()

    # --- one job ---------------------------------------------------------------------------

    def run_once(self) -> bool:
        """Take one job and run it to its end; ``False`` when no job was free."""
        lease = self.settings.job_lease_seconds
        claimed = self.store.claim_job(worker=self.worker, lease_seconds=lease)
        if claimed is None:
            return False
        job = claimed.job
        if job.attempts > self.settings.job_max_attempts:
            self.store.fail_job(
                job_id=job.id,
                claim=claimed.claim,
                error=_problem(
                    500,
                    f"the job was started {job.attempts - 1} times and its worker stopped "
                    "each time before it finished",
                    "job-abandoned",
                ),
            )
            log.error("jobs: %s failed after %d attempts", job.id, job.attempts - 1)
            return True
        with _Heartbeat(self.store, claimed, lease) as beat:
            self._run(claimed, beat)
        return True

    def _run(self, claimed: ClaimedJob, beat: _Heartbeat) -> None:
        job = claimed.job
        try:
            # Its head alone: the series rows of a big fleet are not read to learn this.
            found = self.store.assessment_head(assessment_id=job.assessment_id)
            if found is not None:  # stored by an earlier attempt already
                self.store.link_job(
                    job_id=job.id, claim=claimed.claim, assessment_id=found.summary.id
                )
                return
            if parquet_jobs.is_described(claimed.input):
                self._run_parts(claimed, beat)
                return
            req = decode_request(claimed.input)
            policy = policy_from_document(claimed.policy_document)
            pending = assessing.Job(
                req=req,
                store=True,
                idempotency_key=job.idempotency_key,
                digest=job.body_hash,
                policy=policy,
                document=claimed.policy_document,
            )
            _baseline_problem(self.store, pending)
            result = self.work(JobInput(request=pending.req, policy=policy), beat.progress)
            _outcome, record = assessing.stored_answer(pending, result, job.assessment_id)
            self._finish(claimed, record)  # the lease is still renewed while it writes
        except JobLost:
            log.warning("jobs: %s was taken over by another worker; its result is dropped", job.id)
        except StoreUnavailable as exc:  # not the job's fault: give it back for a later try
            log.warning("jobs: database unavailable while running %s: %s", job.id, exc)
            self._give_back(claimed)
        except ApiError as exc:
            self._fail(claimed, _problem(exc.status, exc.detail, exc.slug or "job-failed"))
        except Exception:
            log.exception("jobs: %s failed", job.id)
            self._fail(claimed, _problem(500, INTERNAL_ERROR, "internal-error"))

    def _run_parts(self, claimed: ClaimedJob, beat: _Heartbeat) -> None:
        """A Parquet job stored in parts: assessed chunk by chunk, stored part by part
        (:mod:`service.api.parquet_jobs`)."""
        from service.cluster import assess_chunks_on

        settings = self.settings

        def assess(chunks: Any, policy: Policy, progress: Any, *, total: int) -> Any:
            def each_part(done: int, of: int | None) -> None:
                progress(done, of)
                release_memory()  # the part's observations, before the next part's

            return assess_chunks_on(
                chunks,
                policy,
                each_part,
                settings=settings,
                total=total,
                part_blocks=parquet_jobs.PART_BLOCKS,
            )

        policy = policy_from_document(claimed.policy_document)
        with parquet_jobs.prepared(
            self.store, settings, claimed, beat.progress, assess, policy
        ) as record:
            self._finish(claimed, record)  # the rows are made while they are written

    def _finish(self, claimed: ClaimedJob, record: Any) -> None:
        job = claimed.job
        try:
            self.store.finish_job(job_id=job.id, claim=claimed.claim, record=record)
        except IdempotencyConflict:
            # A synchronous POST with the same key and body stored its assessment first: the
            # job's answer is that one (as a repeat of the key would be).
            found = self.store.find_idempotency_key(key=job.idempotency_key)  # type: ignore[arg-type]
            stored = (
                None
                if found is None
                else self.store.get_assessment_by_seq(seq=found.assessment_seq)
            )
            if found is None or stored is None or found.body_hash != job.body_hash:
                self._fail(
                    claimed,
                    _problem(
                        409,
                        f"Idempotency-Key {job.idempotency_key!r} was used meanwhile by another "
                        "request; send the request again with a new key",
                        "idempotency-key-reused",
                    ),
                )
                return
            self.store.link_job(job_id=job.id, claim=claimed.claim, assessment_id=stored.summary.id)

    def _fail(self, claimed: ClaimedJob, error: dict[str, Any]) -> None:
        try:
            self.store.fail_job(job_id=claimed.job.id, claim=claimed.claim, error=error)
        except StoreError as exc:  # left running: retaken when its lease expires
            log.error("jobs: could not record the failure of %s: %s", claimed.job.id, exc)

    def _give_back(self, claimed: ClaimedJob) -> None:
        try:
            self.store.release_job(job_id=claimed.job.id, claim=claimed.claim)
        except StoreError:
            pass  # retaken when its lease expires


class _Heartbeat:
    """Renews a claimed job's lease while it runs, a third of the lease apart, and records
    the latest progress the work reported (at most once a second)."""

    def __init__(self, store: Store, claimed: ClaimedJob, lease: float) -> None:
        self.store = store
        self.claimed = claimed
        self.lease = lease
        self.every = min(lease / 3.0, 1.0)
        self.done: int | None = None
        self.lost = False
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="plumbline-job-lease", daemon=True)

    def progress(self, done: int, total: int | None) -> None:
        self.done = int(done)

    def __enter__(self) -> _Heartbeat:
        self._thread.start()
        return self

    def stop(self) -> None:
        self._stop.set()
        if self._thread.is_alive() and threading.current_thread() is not self._thread:
            self._thread.join()

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def _run(self) -> None:
        written: int | None = None
        while not self._stop.wait(self.every):
            done = self.done
            try:
                mine = self.store.renew_job(
                    job_id=self.claimed.job.id,
                    claim=self.claimed.claim,
                    lease_seconds=self.lease,
                    series_done=done if done != written else None,
                )
            except StoreError as exc:
                log.warning("jobs: could not renew the lease of %s: %s", self.claimed.job.id, exc)
                continue
            written = done
            if not mine:
                self.lost = True
                return
