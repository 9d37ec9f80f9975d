"""The service's settings: one class, read from ``PLUMBLINE_*`` environment variables.

Nothing is read at import time: call :func:`Settings` where needed.
"""

from __future__ import annotations

from typing import Literal

from pydantic import Field, SecretStr
from pydantic_settings import BaseSettings, SettingsConfigDict

MIB = 1024 * 1024


class Settings(BaseSettings):
    """Every knob of the service. Each field ``x`` is read from ``PLUMBLINE_X``."""

    model_config = SettingsConfigDict(env_prefix="PLUMBLINE_", extra="ignore")

    database_url: str = Field(
        default="sqlite:///plumbline.db",
        description="SQLAlchemy URL; default an SQLite file plumbline.db in the working directory.",
    )
    admin_token: SecretStr | None = Field(
        default=None, description="A bearer token that holds every scope (containers, CI)."
    )
    token_cache_seconds: float = Field(
        default=2.0,
        ge=0,
        le=300,
        description="How long a worker remembers a verified stored token; 0: look up every "
        "request (revocation then takes effect at once on every worker).",
    )
    max_body_bytes: int = Field(default=64 * MIB, ge=1, description="Largest request body.")
    max_series: int = Field(default=100_000, ge=1, description="Most series in one assessment.")
    max_series_length: int = Field(
        default=100_000, ge=1, description="Most periods in one series (training or holdout)."
    )
    link_secret: SecretStr | None = Field(
        default=None, description="Key that signs shareable report links (HMAC)."
    )
    link_ttl_seconds: int = Field(
        default=7 * 24 * 3600, ge=1, description="How long a signed report link stays valid."
    )
    cors_origins: list[str] = Field(
        default_factory=list, description="Origins allowed by CORS; none by default."
    )
    page_limit_max: int = Field(default=500, ge=1, description="Largest page in list endpoints.")
    examples_dir: str | None = Field(
        default=None, description="Folder of OpenAPI examples (default: the source checkout's)."
    )
    migrate_on_start: bool = Field(
        default=True, description="Apply database migrations when the app starts."
    )
    # Hardening (service/api/limits.py, slowclients.py): rate limits per token and per worker.
    rate_limit_per_second: float = Field(
        default=50.0, ge=0, description="Requests a second per token on average; 0: no limit."
    )
    rate_limit_burst: int = Field(default=200, ge=1, description="Requests a token may burst.")
    body_read_timeout_seconds: float = Field(
        default=60.0, gt=0, description="Time allowed for a whole request body to arrive."
    )
    header_read_timeout_seconds: float = Field(
        default=10.0, gt=0, description="Time allowed for a request line and headers."
    )
    keep_alive_timeout_seconds: int = Field(
        default=5, ge=1, description="An idle keep-alive connection is closed after this."
    )
    max_header_bytes: int = Field(
        default=16 * 1024, ge=1024, description="Largest request line plus headers."
    )
    max_connections: int = Field(
        default=1000, ge=1, description="Most connections and requests at once per worker."
    )
    http_parser: Literal["auto", "h11", "httptools"] = Field(
        default="auto", description="HTTP/1.1 parser; auto: httptools when installed, else h11."
    )
    # Background jobs (service/api/jobs.py): ``Prefer: respond-async`` submissions.
    job_workers: int = Field(
        default=1,
        ge=0,
        le=64,
        description="Threads of each serving process that run jobs; 0: this process queues "
        "jobs but runs none (another process on the same database does).",
    )
    job_lease_seconds: float = Field(
        default=30.0,
        gt=0,
        description="How long a worker holds a job without renewing its lease (it renews a "
        "third of this apart); a job whose worker died is taken up again after it.",
    )
    job_poll_seconds: float = Field(
        default=1.0, gt=0, description="How often an idle job worker looks for a queued job."
    )
    job_max_attempts: int = Field(
        default=3,
        ge=1,
        description="A job started this many times without finishing (its worker stopped "
        "each time) is failed rather than started again.",
    )
    dask_scheduler: str | None = Field(
        default=None,
        description="Address of a Dask scheduler (tcp://host:8786) on which a chunked "
        "assessment's parts run (service/cluster.py; the cluster extra); none: in the process.",
    )
