"""Settings, read once from ``CALIBRANT_*`` environment variables.

Nothing reads the environment at import time: ``Settings()`` is built by the
composition roots (``cli``, tests) and handed down explicitly.
"""

from __future__ import annotations

import ipaddress
from datetime import UTC, datetime
from enum import StrEnum

from pydantic import Field, ValidationInfo, field_validator, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

DEFAULT_DATABASE_URL = "sqlite:///./var/calibrant.db"


class AuthMode(StrEnum):
    """When API keys are demanded."""

    AUTO = "auto"  # required unless the server listens on a loopback address only
    REQUIRED = "required"
    OFF = "off"


class Settings(BaseSettings):
    """Every tunable of the service; see the README table for what each does."""

    model_config = SettingsConfigDict(env_prefix="CALIBRANT_", extra="ignore")

    database_url: str = Field(
        DEFAULT_DATABASE_URL, description="SQLAlchemy URL of the database."
    )
    host: str = Field("127.0.0.1", description="Address `calibrant serve` listens on.")
    port: int = Field(8000, ge=1, le=65535, description="Port `calibrant serve` listens on.")
    auth: AuthMode = Field(AuthMode.AUTO, description="auto | required | off.")
    allow_open_public: bool = Field(
        False,
        description="Permit auth=off on a non-loopback address (otherwise refused at start).",
    )
    max_body_bytes: int = Field(16 * 1024 * 1024, ge=1024, description="Largest request body.")
    max_batch_items: int = Field(10_000, ge=1, le=100_000, description="Largest ingest batch.")
    earliest_instant: datetime = Field(
        datetime(2000, 1, 1, tzinfo=UTC),
        description="Oldest scored_at / observed_at accepted (RFC 3339 with offset).",
    )
    future_tolerance_hours: float = Field(
        24.0, ge=0, le=24 * 3660,
        description="How far after the server's clock a scored_at / observed_at may lie.",
    )
    sqlite_synchronous: str = Field(
        "FULL",
        description="SQLite synchronous PRAGMA: FULL survives power loss, NORMAL only crashes.",
    )
    sqlite_cache_mib: int = Field(64, ge=1, description="SQLite page cache per connection.")
    db_pool_size: int = Field(5, ge=1, description="Connections kept per process (PostgreSQL).")
    request_seconds: float = Field(
        6.0, gt=0, le=300,
        description="Deadline of a request's database work; past it the request answers 503 with "
        "Retry-After and its connection is closed (a stalled network is invisible to the server).",
    )
    job_seconds: float = Field(
        3600.0, gt=0, le=7 * 86_400,
        description="Deadline of one transaction of a background job (long enough for the largest "
        "refresh step); past it the connection is closed and the job retries later.",
    )
    db_connect_seconds: int = Field(
        5, ge=2, le=300, description="Longest wait to open a database connection (PostgreSQL)."
    )
    db_statement_seconds: float = Field(
        3600.0, gt=0, le=7 * 86_400,
        description="Server-side limit of one SQL statement (PostgreSQL statement_timeout).",
    )
    db_lock_seconds: float = Field(
        5.0, gt=0, le=3600,
        description="Longest wait for a lock: PostgreSQL lock_timeout, SQLite busy timeout.",
    )
    retry_after_seconds: int = Field(
        5, ge=1, le=3600, description="Retry-After of a 503 when the database is down, stalled or locked."
    )
    postgres_prepared_statements: bool = Field(
        True,
        description="Let psycopg prepare repeated statements on the server; false behind a "
        "transaction-mode pooler that cannot keep them (PgBouncer before 1.21).",
    )
    log_level: str = Field("info", description="uvicorn/app log level.")
    log_format: str = Field("text", description="text, or json: one JSON object per log line.")
    workers: int = Field(
        1, ge=1, le=64, description="Server processes of `calibrant serve`; more than 1 needs PostgreSQL."
    )
    jobs_in_server: bool = Field(
        True,
        description="Run the scheduled jobs inside each `calibrant serve` process (false: run "
        "`calibrant scheduler` once, elsewhere).",
    )
    metrics_granularity: str = Field(
        "week", description="Period of the figures GET /metrics shows: day, week or month (UTC)."
    )
    metrics_label_sets: int = Field(
        50, ge=1, le=1000, description="Most label sets (whole model, then segment values) per model "
        "in GET /metrics.",
    )
    refresh_seconds: float = Field(
        60.0, gt=0, le=86_400, description="Interval of the scheduled jobs (refresh, delivery)."
    )
    refresh_job_lease_seconds: float = Field(
        120.0, ge=10, le=86_400,
        description="A refresh job whose runner wrote no heartbeat for this long (its process died) "
        "is marked abandoned, and the next POST /v1/refresh starts a new one. The runner beats every second.",
    )
    job_retry_base_seconds: float = Field(
        60.0, ge=1, le=86_400,
        description="After a job fails on one model, how long before it tries that model again; doubles "
        "per failed attempt (the other models go on meanwhile).",
    )
    job_retry_max_seconds: float = Field(
        3600.0, ge=1, le=7 * 86_400,
        description="Longest wait between two attempts of a job on a failing model.",
    )
    job_quarantine_after: int = Field(
        6, ge=1, le=1000,
        description="Failed attempts of a job on one model after which the model is quarantined: the job "
        "skips it until an admin resumes it (POST /v1/models/{model}/resume).",
    )
    webhook_allow_private: bool = Field(
        False,
        description="Permit webhook targets on private and loopback addresses (never link-local "
        "or cloud metadata ones).",
    )
    page_session_hours: float = Field(
        12.0, gt=0, le=24 * 30, description="How long a page sign-in lasts before the reader signs in again."
    )
    webhook_sender: str = Field("http", description="http (deliver) or log (only log each request).")
    webhook_timeout_seconds: float = Field(10.0, gt=0, le=120, description="Per webhook attempt.")
    webhook_retry_base_seconds: float = Field(
        30.0, ge=1, description="Delay before the first retry; doubles per attempt, with jitter."
    )
    webhook_retry_max_interval_seconds: float = Field(
        6 * 3600.0, ge=1, description="Longest delay between two attempts."
    )
    webhook_retry_window_hours: float = Field(
        24.0, ge=1 / 60, description="How long after an event its delivery is retried before giving up."
    )
    webhook_failing_after: int = Field(
        5, ge=1, description="Consecutive failed attempts after which a target is reported failing."
    )
    webhook_retention_days: int | None = Field(
        None, ge=1, le=36_500,
        description="Days delivered webhook deliveries (and events left without any) are kept; "
        "unset keeps them for ever. Pending and failed ones always stay.",
    )
    audit_retention_days: int | None = Field(
        None, ge=1, le=36_500, description="Days audit events are kept; unset keeps them for ever."
    )
    retention_batch_rows: int = Field(
        5_000, ge=1, le=1_000_000,
        description="Rows the retention job removes per transaction (short transactions, no long locks).",
    )
    webhook_batch_size: int = Field(20, ge=1, le=1000, description="Deliveries claimed at a time.")
    webhook_claim_seconds: float = Field(
        120.0, ge=1, description="How long a worker holds a claimed delivery before others may take it."
    )

    @field_validator("database_url")
    @classmethod
    def _known_dialect(cls, value: str) -> str:
        if not value.startswith(("sqlite", "postgresql")):
            raise ValueError(
                "must be a SQLAlchemy URL for SQLite (sqlite:///path.db) or PostgreSQL "
                "(postgresql+psycopg://user@host:5432/db)"
            )
        if value.startswith("postgresql://"):
            # Plain postgresql:// would pick psycopg2, which we do not ship.
            value = "postgresql+psycopg://" + value.removeprefix("postgresql://")
        return value

    @field_validator("earliest_instant")
    @classmethod
    def _aware_and_plausible(cls, value: datetime) -> datetime:
        if value.tzinfo is None:
            raise ValueError("needs a UTC offset, e.g. 2000-01-01T00:00:00Z")
        if not 1900 <= value.astimezone(UTC).year <= 2999:
            raise ValueError("must lie in the years 1900 to 2999")
        return value.astimezone(UTC)

    @field_validator("sqlite_synchronous")
    @classmethod
    def _sync_mode(cls, value: str) -> str:
        upper = value.upper()
        if upper not in {"FULL", "NORMAL", "EXTRA"}:
            raise ValueError("must be FULL, NORMAL or EXTRA")
        return upper

    @field_validator("log_format")
    @classmethod
    def _known_log_format(cls, value: str) -> str:
        if value not in {"text", "json"}:
            raise ValueError("must be text or json")
        return value

    @field_validator("metrics_granularity")
    @classmethod
    def _known_granularity(cls, value: str) -> str:
        if value not in {"day", "week", "month"}:
            raise ValueError("must be day, week or month")
        return value

    @field_validator("workers")
    @classmethod
    def _one_writer_on_sqlite(cls, value: int, info: ValidationInfo) -> int:
        url = str(info.data.get("database_url", ""))
        if value > 1 and url.startswith("sqlite"):
            raise ValueError(
                f"{value} workers refused on SQLite: SQLite lets one process write at a time, so extra "
                "workers would only queue on its lock; use 1 worker, or PostgreSQL "
                "(CALIBRANT_DATABASE_URL=postgresql+psycopg://...) for more"
            )
        return value

    @field_validator("webhook_sender")
    @classmethod
    def _known_sender(cls, value: str) -> str:
        if value not in {"http", "log"}:
            raise ValueError("must be http or log")
        return value

    @model_validator(mode="after")
    def _claim_outlasts_attempt(self) -> Settings:
        # A claim renewed before each attempt must outlive that attempt, or a second
        # worker could take the delivery over while the first is still sending it.
        if self.webhook_claim_seconds <= self.webhook_timeout_seconds + 5:
            raise ValueError("webhook_claim_seconds must exceed webhook_timeout_seconds by more than 5")
        return self

    @model_validator(mode="after")
    def _refuse_open_public(self) -> Settings:
        if self.auth is AuthMode.OFF and not is_loopback(self.host) and not self.allow_open_public:
            raise ValueError(
                f"auth=off on the non-loopback address {self.host!r} would let anyone write "
                "and read data; create a key with `calibrant keys create` instead, or set "
                "CALIBRANT_ALLOW_OPEN_PUBLIC=true if a proxy in front does the checking"
            )
        return self

    @property
    def keys_required(self) -> bool:
        if self.auth is AuthMode.AUTO:
            return not is_loopback(self.host)
        return self.auth is AuthMode.REQUIRED


def is_loopback(host: str) -> bool:
    """True when ``host`` can only be reached from this machine."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False
