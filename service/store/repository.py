"""Repository functions over an engine: every read and write of the SQL store, keyword arguments
only (:class:`service.store.sql.SqlStore` calls them and translates their errors).

An assessment, all its per-series result rows, its per-series inputs and its idempotency key are
written by :func:`save_assessments` in one transaction: after a crash either all of it is there or
none of it.
"""

from __future__ import annotations

import hmac
import secrets
from collections.abc import Callable, Sequence
from datetime import UTC, datetime
from typing import Any

import numpy as np
import orjson
from sqlalchemy import Engine, func, insert, select, update
from sqlalchemy.exc import IntegrityError

from . import fastpath
from .models import (
    AssessmentRow,
    IdempotencyKeyRow,
    PolicyRow,
    SeriesInputRow,
    SeriesResultRow,
    ServerSecretRow,
    TokenRow,
    table_of,
)
from .port import IdempotencyConflict
from .records import (
    SCOPES,
    TOKEN_PREFIX,
    AssessmentSummary,
    IdempotencyRecord,
    ModelSummary,
    NewAssessment,
    SeriesInput,
    SeriesParts,
    SeriesResult,
    StoredAssessment,
    StoredHead,
    StoredPolicy,
    StoredToken,
    hash_token,
    new_id,
    utcnow,
)
from .writelock import write_lock

# The records and small functions are defined in records.py (and the conflict in port.py); they are
# named here too, for callers that reach the store through these functions.
__all__ = [
    "SCOPES",
    "TOKEN_PREFIX",
    "AssessmentSummary",
    "IdempotencyConflict",
    "IdempotencyRecord",
    "ModelSummary",
    "NewAssessment",
    "SeriesInput",
    "SeriesResult",
    "StoredAssessment",
    "StoredHead",
    "StoredPolicy",
    "StoredToken",
    "assessment_head",
    "assessment_heads",
    "count_tokens",
    "create_token",
    "find_idempotency_key",
    "find_token",
    "get_assessment",
    "get_assessment_by_seq",
    "get_or_create_secret",
    "get_policy",
    "hash_token",
    "latest_assessment",
    "latest_passing_assessment",
    "latest_policy_document",
    "list_assessments",
    "list_models",
    "list_policies",
    "list_tokens",
    "new_id",
    "pack",
    "revoke_token",
    "save_assessments",
    "save_policy",
    "series_inputs",
    "unpack",
    "utcnow",
]

A = table_of(AssessmentRow)
SR = table_of(SeriesResultRow)
SI = table_of(SeriesInputRow)
P = table_of(PolicyRow)
T = table_of(TokenRow)
K = table_of(IdempotencyKeyRow)
S = table_of(ServerSecretRow)


def _aware(value: datetime) -> datetime:
    """SQLite hands datetimes back without their zone; they were written in UTC."""
    return value if value.tzinfo is not None else value.replace(tzinfo=UTC)


def pack(values: np.ndarray | None) -> bytes | None:
    """Float64 little-endian bytes (``NaN`` for missing values)."""
    return None if values is None else np.ascontiguousarray(values, dtype="<f8").tobytes()


def unpack(blob: bytes | None) -> np.ndarray | None:
    return None if blob is None else np.frombuffer(blob, dtype="<f8")


# ---------------------------------------------------------------------------------------------
# Assessments


_SUMMARY_COLUMNS = (
    A.c.seq,
    A.c.id,
    A.c.created_at,
    A.c.model,
    A.c.version,
    A.c.verdict,
    A.c.n_series,
    A.c.n_failed,
    A.c.n_warned,
    A.c.policy_name,
    A.c.policy_version,
)


def _summary(row: Any) -> AssessmentSummary:
    return AssessmentSummary(
        seq=row.seq,
        id=row.id,
        created_at=_aware(row.created_at),
        model=row.model,
        version=row.version,
        verdict=row.verdict,
        n_series=row.n_series,
        n_failed=row.n_failed,
        n_warned=row.n_warned,
        policy_name=row.policy_name,
        policy_version=row.policy_version,
    )


def _input_row(i: int, s: SeriesInput) -> dict[str, Any]:
    return {
        "position": i,
        "series_id": s.series_id,
        "weight": s.weight,
        "actuals": pack(s.actuals),
        "fitted": pack(s.fitted),
        "timestamps": None if s.timestamps is None else orjson.dumps(s.timestamps).decode(),
        "holdout_actuals": pack(s.holdout_actuals),
        "holdout_forecasts": pack(s.holdout_forecasts),
        "holdout_lower": pack(s.holdout_lower),
        "holdout_upper": pack(s.holdout_upper),
        "holdout_level": s.holdout_level,
        "holdout_timestamps": None
        if s.holdout_timestamps is None
        else orjson.dumps(s.holdout_timestamps).decode(),
        "burn_in": s.burn_in or None,
    }


def _write_all(
    engine: Engine,
    records: Sequence[NewAssessment],
    then: Callable[[Any, list[int]], None] | None = None,
) -> list[int]:
    """Write ``records`` in one transaction; their sequence numbers in order. ``then(cursor,
    seqs)`` runs last in the same transaction (what raises there undoes the whole write)."""
    stmts = fastpath.statements(engine)

    def write(cursor: Any) -> list[int]:
        seqs = []
        result_rows: list[dict[str, Any]] = []
        input_rows: list[dict[str, Any]] = []
        for r in records:
            cursor.execute(
                stmts.insert_assessment.sql,
                stmts.insert_assessment.params(
                    {
                        "id": r.assessment_id,
                        "created_at": r.created_at,
                        "model": r.model,
                        "version": r.version,
                        "verdict": r.verdict,
                        "n_series": r.n_series,
                        "n_failed": r.n_failed,
                        "n_warned": r.n_warned,
                        "policy_name": r.policy_name,
                        "policy_version": r.policy_version,
                        "policy_document": orjson.dumps(r.policy_document).decode(),
                        "result": r.head.decode(),
                    }
                ),
            )
            seq = int(cursor.fetchone()[0])
            seqs.append(seq)
            result_rows += [
                {
                    "assessment_seq": seq,
                    "position": i,
                    "series_id": s.series_id,
                    "verdict": s.verdict,
                    "n_obs": s.n_obs,
                    "result": s.json.decode(),
                }
                for i, s in enumerate(r.series)
            ]
            input_rows += [
                {"assessment_seq": seq, **_input_row(i, s)} for i, s in enumerate(r.inputs)
            ]
            if r.parts is not None:
                _write_parts(cursor, stmts, seq, r.parts)
            if r.idempotency_key is not None:
                cursor.execute(
                    stmts.insert_key.sql,
                    stmts.insert_key.params(
                        {
                            "key": r.idempotency_key,
                            "body_hash": r.body_hash,
                            "assessment_seq": seq,
                            "created_at": r.created_at,
                        }
                    ),
                )
        # Every series row of every assessment in two statements.
        fastpath.executemany(cursor, stmts.insert_series_result, result_rows)
        fastpath.executemany(cursor, stmts.insert_series_input, input_rows)
        if then is not None:
            then(cursor, seqs)
        return seqs

    with write_lock(engine):
        return fastpath.run_in_transaction(engine, write)


def _write_parts(cursor: Any, stmts: Any, seq: int, parts: SeriesParts) -> None:
    """A big fleet's series rows and inputs, part by part (each part's rows dropped once
    written)."""
    position = 0
    for results, inputs in parts.make():
        if len(results) != len(inputs):
            raise ValueError("a part's series rows and inputs do not match")
        fastpath.executemany(
            cursor,
            stmts.insert_series_result,
            [
                {
                    "assessment_seq": seq,
                    "position": position + i,
                    "series_id": s.series_id,
                    "verdict": s.verdict,
                    "n_obs": s.n_obs,
                    "result": s.json.decode(),
                }
                for i, s in enumerate(results)
            ],
        )
        fastpath.executemany(
            cursor,
            stmts.insert_series_input,
            [{"assessment_seq": seq, **_input_row(position + i, s)} for i, s in enumerate(inputs)],
        )
        position += len(results)
        del results, inputs
    if position != parts.n_series:
        raise ValueError(f"{position} series rows written; the assessment has {parts.n_series}")


def save_assessments(
    engine: Engine, records: Sequence[NewAssessment]
) -> list[AssessmentSummary | Exception]:
    """Write several assessments, each with all its series rows and its idempotency key.

    All of them go in one transaction (one commit for many small submissions); each
    assessment is whole or absent after a crash either way. A database error on that
    transaction is raised: then none of them was written. When one of them meets a key taken
    meanwhile, each is written again in a transaction of its own, so the others are still
    saved; then each record's own outcome is returned in its place: its summary, an
    :class:`IdempotencyConflict`, or the database error that kept it out (so a caller never
    takes a written record for a lost one, or the reverse).
    """
    if not records:
        return []
    stmts = fastpath.statements(engine)
    try:
        return [r.summary(seq) for r, seq in zip(records, _write_all(engine, records), strict=True)]
    except stmts.integrity_error:
        if len(records) == 1:
            r = records[0]
            if (
                r.idempotency_key is not None
                and find_idempotency_key(engine, key=r.idempotency_key) is not None
            ):
                return [IdempotencyConflict(r.idempotency_key)]
            raise
    out: list[AssessmentSummary | Exception] = []
    for r in records:
        try:
            out += save_assessments(engine, [r])
        except Exception as exc:  # this record alone is not written
            out.append(exc)
    return out


def get_assessment(
    engine: Engine, *, assessment_id: str, flagged_only: bool = False
) -> StoredAssessment | None:
    """The stored assessment with this id, or ``None``; with ``flagged_only`` only the rows of
    its series that did not pass are read (filtered by the database, in input order)."""
    with engine.connect() as conn:
        row = conn.execute(
            select(*_SUMMARY_COLUMNS, A.c.result).where(A.c.id == assessment_id)
        ).first()
        if row is None:
            return None
        q = select(SR.c.result, SR.c.verdict).where(SR.c.assessment_seq == row.seq)
        if flagged_only:
            q = q.where(SR.c.verdict != "pass")
        series = conn.execute(q.order_by(SR.c.position)).all()
    return StoredAssessment(
        summary=_summary(row),
        head=row.result.encode(),
        series=[s.result.encode() for s in series],
        verdicts=[s.verdict for s in series],
    )


def get_assessment_by_seq(engine: Engine, *, seq: int) -> StoredAssessment | None:
    with engine.connect() as conn:
        found = conn.execute(select(A.c.id).where(A.c.seq == seq)).scalar()
    return None if found is None else get_assessment(engine, assessment_id=found)


def list_assessments(
    engine: Engine,
    *,
    model: str | None = None,
    version: str | None = None,
    verdict: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
    before_seq: int | None = None,
    limit: int = 50,
) -> list[AssessmentSummary]:
    """Summaries, newest first; ``before_seq`` continues a page (the cursor)."""
    q = select(*_SUMMARY_COLUMNS)
    if model is not None:
        q = q.where(A.c.model == model)
    if version is not None:
        q = q.where(A.c.version == version)
    if verdict is not None:
        q = q.where(A.c.verdict == verdict)
    if since is not None:
        q = q.where(A.c.created_at >= since)
    if until is not None:
        q = q.where(A.c.created_at < until)
    if before_seq is not None:
        q = q.where(A.c.seq < before_seq)
    q = q.order_by(A.c.seq.desc()).limit(limit)
    with engine.connect() as conn:
        return [_summary(r) for r in conn.execute(q)]


def latest_assessment(
    engine: Engine, *, model: str, version: str | None = None
) -> AssessmentSummary | None:
    """The newest assessment of ``model`` (and ``version``), or ``None``."""
    found = list_assessments(engine, model=model, version=version, limit=1)
    return found[0] if found else None


def latest_passing_assessment(
    engine: Engine, *, model: str, exclude_version: str | None = None
) -> AssessmentSummary | None:
    """The newest assessment of ``model`` that is the latest of its version and passed (a
    version re-assessed since with another verdict does not count), leaving out
    ``exclude_version``; ``None`` when there is none."""
    newer = A.alias("newer")
    later = (
        select(newer.c.seq)
        .where(newer.c.model == A.c.model, newer.c.version == A.c.version, newer.c.seq > A.c.seq)
        .exists()
    )
    q = select(*_SUMMARY_COLUMNS).where(A.c.model == model, A.c.verdict == "pass", ~later)
    if exclude_version is not None:
        q = q.where(A.c.version != exclude_version)
    q = q.order_by(A.c.seq.desc()).limit(1)
    with engine.connect() as conn:
        row = conn.execute(q).first()
    return None if row is None else _summary(row)


def assessment_head(engine: Engine, *, assessment_id: str) -> StoredHead | None:
    """A stored assessment without its series, with its policy document, or ``None``."""
    with engine.connect() as conn:
        row = conn.execute(
            select(*_SUMMARY_COLUMNS, A.c.result, A.c.policy_document).where(
                A.c.id == assessment_id
            )
        ).first()
    if row is None:
        return None
    return StoredHead(
        summary=_summary(row),
        head=row.result.encode(),
        policy_document=orjson.loads(row.policy_document),
    )


def list_models(engine: Engine, *, verdict: str | None = None) -> list[ModelSummary]:
    """Every model with its newest assessment (and its counts), by model name; ``verdict``
    keeps the models whose newest verdict it is."""
    per_model = (
        select(
            A.c.model.label("model"),
            func.max(A.c.seq).label("latest"),
            func.count().label("n_assessments"),
            func.count(func.distinct(A.c.version)).label("n_versions"),
        )
        .group_by(A.c.model)
        .subquery()
    )
    q = select(*_SUMMARY_COLUMNS, per_model.c.n_assessments, per_model.c.n_versions).join(
        per_model, A.c.seq == per_model.c.latest
    )
    if verdict is not None:
        q = q.where(A.c.verdict == verdict)
    q = q.order_by(A.c.model)
    with engine.connect() as conn:
        return [
            ModelSummary(latest=_summary(r), n_assessments=r.n_assessments, n_versions=r.n_versions)
            for r in conn.execute(q)
        ]


def assessment_heads(engine: Engine, *, seqs: Sequence[int]) -> dict[int, bytes]:
    """The stored result without its series (JSON bytes) of each assessment in ``seqs``."""
    out: dict[int, bytes] = {}
    wanted = sorted(set(seqs))
    with engine.connect() as conn:
        for start in range(0, len(wanted), 500):
            part = wanted[start : start + 500]
            for seq, head in conn.execute(select(A.c.seq, A.c.result).where(A.c.seq.in_(part))):
                out[int(seq)] = head.encode()
    return out


def series_inputs(engine: Engine, *, assessment_id: str) -> list[SeriesInput] | None:
    """The stored input arrays of every series, in input order (``None``: no such id)."""
    with engine.connect() as conn:
        seq = conn.execute(select(A.c.seq).where(A.c.id == assessment_id)).scalar()
        if seq is None:
            return None
        rows = conn.execute(
            select(SI).where(SI.c.assessment_seq == seq).order_by(SI.c.position)
        ).all()
    return [
        SeriesInput(
            series_id=r.series_id,
            weight=r.weight,
            actuals=unpack(r.actuals),  # type: ignore[arg-type]
            fitted=unpack(r.fitted),  # type: ignore[arg-type]
            timestamps=None if r.timestamps is None else orjson.loads(r.timestamps),
            holdout_actuals=unpack(r.holdout_actuals),
            holdout_forecasts=unpack(r.holdout_forecasts),
            holdout_lower=unpack(r.holdout_lower),
            holdout_upper=unpack(r.holdout_upper),
            holdout_level=r.holdout_level,
            holdout_timestamps=None
            if r.holdout_timestamps is None
            else orjson.loads(r.holdout_timestamps),
            burn_in=r.burn_in or 0,
        )
        for r in rows
    ]


# ---------------------------------------------------------------------------------------------
# Idempotency keys


def find_idempotency_key(engine: Engine, *, key: str) -> IdempotencyRecord | None:
    with engine.connect() as conn:
        row = conn.execute(select(K).where(K.c.key == key)).first()
    if row is None:
        return None
    return IdempotencyRecord(
        key=row.key, body_hash=row.body_hash, assessment_seq=row.assessment_seq
    )


# ---------------------------------------------------------------------------------------------
# Policies


def save_policy(
    engine: Engine,
    *,
    name: str,
    document: dict[str, Any],
    first_version: int = 1,
    attempts: int = 5,
) -> StoredPolicy:
    """Store ``document`` as the next version of policy ``name`` (``first_version`` if new).

    ``document`` is called with ``document["version"]`` set to the version assigned.
    """
    for _ in range(attempts):
        created = utcnow()
        try:
            with engine.begin() as conn:
                current = conn.execute(
                    select(func.max(P.c.version)).where(P.c.name == name)
                ).scalar()
                version = first_version if current is None else int(current) + 1
                doc = {**document, "name": name, "version": version}
                conn.execute(
                    insert(P),
                    {
                        "name": name,
                        "version": version,
                        "created_at": created,
                        "document": orjson.dumps(doc).decode(),
                    },
                )
            return StoredPolicy(name=name, version=version, document=doc, created_at=created)
        except IntegrityError:  # a concurrent writer took that version: try the next one
            continue
    raise RuntimeError(f"could not assign a version to policy {name!r}")


def get_policy(engine: Engine, *, name: str, version: int | None = None) -> StoredPolicy | None:
    """Version ``version`` of policy ``name`` (default: the newest), or ``None``."""
    q = select(P).where(P.c.name == name)
    q = (
        q.where(P.c.version == version)
        if version is not None
        else q.order_by(P.c.version.desc()).limit(1)
    )
    with engine.connect() as conn:
        row = conn.execute(q).first()
    if row is None:
        return None
    return StoredPolicy(
        name=row.name,
        version=row.version,
        document=orjson.loads(row.document),
        created_at=_aware(row.created_at),
    )


def latest_policy_document(engine: Engine, *, name: str) -> tuple[int, dict[str, Any]] | None:
    """``(version, document)`` of the newest version of policy ``name``, or ``None`` (the hot
    path of every assessment that names a policy)."""
    stmt = fastpath.statements(engine).latest_policy

    def read(cursor: Any) -> Any:
        cursor.execute(stmt.sql, stmt.params({"name": name, "one": 1}))
        return cursor.fetchone()

    row = fastpath.run_read(engine, read)
    if row is None:
        return None
    return int(row[0]), orjson.loads(row[1])


def list_policies(engine: Engine) -> list[StoredPolicy]:
    """The newest version of every stored policy, by name."""
    newest = select(P.c.name, func.max(P.c.version).label("v")).group_by(P.c.name).subquery()
    q = select(P).join(newest, (P.c.name == newest.c.name) & (P.c.version == newest.c.v))
    with engine.connect() as conn:
        rows = conn.execute(q.order_by(P.c.name)).all()
    return [
        StoredPolicy(
            name=r.name,
            version=r.version,
            document=orjson.loads(r.document),
            created_at=_aware(r.created_at),
        )
        for r in rows
    ]


# ---------------------------------------------------------------------------------------------
# Tokens


def _token(row: Any) -> StoredToken:
    return StoredToken(
        id=row.id,
        scopes=tuple(row.scopes.split()),
        label=row.label,
        created_at=_aware(row.created_at),
        revoked_at=None if row.revoked_at is None else _aware(row.revoked_at),
    )


def create_token(
    engine: Engine, *, scopes: Sequence[str], label: str = ""
) -> tuple[StoredToken, str]:
    """Mint a token; returns its record and the secret (shown once, only its hash is kept)."""
    secret = TOKEN_PREFIX + secrets.token_urlsafe(32)
    token_id, created_at = new_id(), utcnow()
    row = {
        "id": token_id,
        "token_hash": hash_token(secret),
        "scopes": " ".join(scopes),
        "label": label,
        "created_at": created_at,
        "revoked_at": None,
    }
    with engine.begin() as conn:
        conn.execute(insert(T), row)
    return StoredToken(
        id=token_id,
        scopes=tuple(scopes),
        label=label,
        created_at=created_at,
        revoked_at=None,
    ), secret


def find_token(engine: Engine, *, secret: str) -> StoredToken | None:
    """The live (not revoked) token whose secret is ``secret``, or ``None``.

    Looked up by its SHA-256 hash, then the stored hash is compared in constant time.
    """
    digest = hash_token(secret)
    with engine.connect() as conn:
        row = conn.execute(select(T).where(T.c.token_hash == digest)).first()
    if row is None or not hmac.compare_digest(row.token_hash, digest):
        return None
    if row.revoked_at is not None:
        return None
    return _token(row)


def revoke_token(engine: Engine, *, token_id: str) -> bool:
    """Revoke a token; ``False`` when no live token has that id."""
    with engine.begin() as conn:
        done = conn.execute(
            update(T)
            .where(T.c.id == token_id, T.c.revoked_at.is_(None))
            .values(revoked_at=utcnow())
        )
    return bool(done.rowcount)


def list_tokens(engine: Engine) -> list[StoredToken]:
    with engine.connect() as conn:
        return [_token(r) for r in conn.execute(select(T).order_by(T.c.created_at))]


def count_tokens(engine: Engine) -> int:
    """Tokens ever created (revoked ones included)."""
    with engine.connect() as conn:
        return int(conn.execute(select(func.count()).select_from(T)).scalar_one())


# ---------------------------------------------------------------------------------------------
# Server secrets


def get_or_create_secret(engine: Engine, *, name: str, make: Callable[[], str]) -> str:
    """The secret kept under ``name``; on first use ``make()`` creates it and it is stored.

    Workers starting together may race to create it: the primary key lets one insert win and
    every caller returns that stored value.
    """
    with engine.connect() as conn:
        found = conn.execute(select(S.c.value).where(S.c.name == name)).scalar()
    if found is not None:
        return str(found)
    try:
        with engine.begin() as conn:
            conn.execute(insert(S).values(name=name, value=make(), created_at=utcnow()))
    except IntegrityError:
        pass  # another process stored it first
    with engine.connect() as conn:
        return str(conn.execute(select(S.c.value).where(S.c.name == name)).scalar_one())
