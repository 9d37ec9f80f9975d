"""ORM models: assessments, their per-series results and inputs, policies, tokens, keys.

JSON documents are kept as text written by orjson (a stored result is handed back byte for byte);
per-series number arrays are packed little-endian float64 bytes (``NaN`` for missing values).
"""

from __future__ import annotations

from datetime import datetime
from typing import cast

from sqlalchemy import (
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Table,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column


class Base(DeclarativeBase):
    pass


def table_of(row: type[Base]) -> Table:
    """The Core table of a mapped row class (typed as a table, for insert/update/select)."""
    return cast(Table, row.__table__)


class AssessmentRow(Base):
    """One assessment: its summary columns for listing and the result without its series."""

    __tablename__ = "assessments"

    seq: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    id: Mapped[str] = mapped_column(String(32), unique=True, nullable=False)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)
    model: Mapped[str] = mapped_column(String(200), nullable=False)
    version: Mapped[str] = mapped_column(String(200), nullable=False)
    verdict: Mapped[str] = mapped_column(String(8), nullable=False)
    n_series: Mapped[int] = mapped_column(Integer, nullable=False)
    n_failed: Mapped[int] = mapped_column(Integer, nullable=False)
    n_warned: Mapped[int] = mapped_column(Integer, nullable=False)
    policy_name: Mapped[str] = mapped_column(String(200), nullable=False)
    policy_version: Mapped[int] = mapped_column(Integer, nullable=False)
    policy_document: Mapped[str] = mapped_column(Text, nullable=False)
    result: Mapped[str] = mapped_column(Text, nullable=False)

    __table_args__ = (
        Index("ix_assessments_model_seq", "model", "seq"),
        Index("ix_assessments_model_version_seq", "model", "version", "seq"),
    )


class SeriesResultRow(Base):
    """One series' result within an assessment (its JSON as in the response)."""

    __tablename__ = "series_results"

    assessment_seq: Mapped[int] = mapped_column(
        ForeignKey("assessments.seq", ondelete="CASCADE"), primary_key=True
    )
    position: Mapped[int] = mapped_column(Integer, primary_key=True)
    series_id: Mapped[str] = mapped_column(String(200), nullable=False)
    verdict: Mapped[str] = mapped_column(String(8), nullable=False)
    n_obs: Mapped[int] = mapped_column(Integer, nullable=False)
    result: Mapped[str] = mapped_column(Text, nullable=False)


class SeriesInputRow(Base):
    """The numbers one series was assessed on, kept so a report can redraw its charts."""

    __tablename__ = "series_inputs"

    assessment_seq: Mapped[int] = mapped_column(
        ForeignKey("assessments.seq", ondelete="CASCADE"), primary_key=True
    )
    position: Mapped[int] = mapped_column(Integer, primary_key=True)
    series_id: Mapped[str] = mapped_column(String(200), nullable=False)
    weight: Mapped[float | None] = mapped_column(Float, nullable=True)
    actuals: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    fitted: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    timestamps: Mapped[str | None] = mapped_column(Text, nullable=True)
    holdout_actuals: Mapped[bytes | None] = mapped_column(LargeBinary, nullable=True)
    holdout_forecasts: Mapped[bytes | None] = mapped_column(LargeBinary, nullable=True)
    holdout_lower: Mapped[bytes | None] = mapped_column(LargeBinary, nullable=True)
    holdout_upper: Mapped[bytes | None] = mapped_column(LargeBinary, nullable=True)
    holdout_level: Mapped[float | None] = mapped_column(Float, nullable=True)
    holdout_timestamps: Mapped[str | None] = mapped_column(Text, nullable=True)
    burn_in: Mapped[int | None] = mapped_column(Integer, nullable=True)
    """Periods dropped at the start of the series (``NULL``: none)."""


class PolicyRow(Base):
    """One version of a named gate policy."""

    __tablename__ = "policies"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    name: Mapped[str] = mapped_column(String(200), nullable=False)
    version: Mapped[int] = mapped_column(Integer, nullable=False)
    document: Mapped[str] = mapped_column(Text, nullable=False)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)

    __table_args__ = (UniqueConstraint("name", "version", name="uq_policies_name_version"),)


class TokenRow(Base):
    """An API token: only its SHA-256 hash is kept."""

    __tablename__ = "tokens"

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    token_hash: Mapped[str] = mapped_column(String(64), unique=True, nullable=False)
    scopes: Mapped[str] = mapped_column(String(200), nullable=False)
    label: Mapped[str] = mapped_column(String(200), nullable=False, default="")
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)
    revoked_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)


class IdempotencyKeyRow(Base):
    """An ``Idempotency-Key`` seen with a body (by hash) and the assessment it produced."""

    __tablename__ = "idempotency_keys"

    key: Mapped[str] = mapped_column(String(200), primary_key=True)
    body_hash: Mapped[str] = mapped_column(String(64), nullable=False)
    assessment_seq: Mapped[int] = mapped_column(
        ForeignKey("assessments.seq", ondelete="CASCADE"), nullable=False
    )
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)


class ServerSecretRow(Base):
    """A key the server makes for itself on first use and keeps (e.g. the report-link key), so
    every worker and every restart share it."""

    __tablename__ = "server_secrets"

    name: Mapped[str] = mapped_column(String(64), primary_key=True)
    value: Mapped[str] = mapped_column(Text, nullable=False)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)


class JobRow(Base):
    """An assessment run in the background: its state, progress, lease and compact input.

    ``input`` holds the validated request's arrays (see ``service.api.jobs``), cleared once the
    assessment is stored; ``assessment_id`` is chosen when the job is made, so a job run twice
    after a crash stores one assessment. A running job belongs to ``worker`` under ``claim``
    until ``lease_expires_at``; a worker that stops renewing its lease loses the job to the next.
    """

    __tablename__ = "jobs"

    seq: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    id: Mapped[str] = mapped_column(String(32), unique=True, nullable=False)
    state: Mapped[str] = mapped_column(String(8), nullable=False)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)
    started_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)
    updated_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), nullable=False)
    finished_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)
    model: Mapped[str] = mapped_column(String(200), nullable=False)
    version: Mapped[str] = mapped_column(String(200), nullable=False)
    n_series: Mapped[int] = mapped_column(Integer, nullable=False)
    series_done: Mapped[int] = mapped_column(Integer, nullable=False)
    input: Mapped[bytes | None] = mapped_column(LargeBinary, nullable=True)
    policy_document: Mapped[str] = mapped_column(Text, nullable=False)
    idempotency_key: Mapped[str | None] = mapped_column(String(200), unique=True, nullable=True)
    body_hash: Mapped[str | None] = mapped_column(String(64), nullable=True)
    assessment_id: Mapped[str] = mapped_column(String(32), nullable=False)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    worker: Mapped[str | None] = mapped_column(String(200), nullable=True)
    claim: Mapped[str | None] = mapped_column(String(32), nullable=True)
    lease_expires_at: Mapped[datetime | None] = mapped_column(
        DateTime(timezone=True), nullable=True
    )
    attempts: Mapped[int] = mapped_column(Integer, nullable=False)

    __table_args__ = (Index("ix_jobs_state_seq", "state", "seq"),)


class JobInputPartRow(Base):
    """One part (a few MiB) of a job's input as it was sent, for inputs too big to hold
    whole (a big Parquet upload): ``jobs.input`` then describes it. Dropped with the input
    once the job's assessment is stored."""

    __tablename__ = "job_input_parts"

    job_id: Mapped[str] = mapped_column(String(32), primary_key=True)
    position: Mapped[int] = mapped_column(Integer, primary_key=True)
    data: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
