"""Runtime settings: one object, read from the environment (prefix ``MARGINAL_``)."""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path
from typing import Literal

from pydantic import Field, SecretStr
from pydantic_settings import BaseSettings, SettingsConfigDict


class Settings(BaseSettings):
    """Everything configurable about a running Marginal instance."""

    model_config = SettingsConfigDict(env_prefix="MARGINAL_", env_file=None, extra="ignore")

    database_url: str = Field(
        default=f"sqlite:///{Path('var') / 'marginal.db'}",
        description="SQLAlchemy URL: sqlite:///path or postgresql+psycopg://user@host/db",
    )
    database_schema: str | None = Field(
        default=None, description="PostgreSQL schema to use (search_path); default: public"
    )
    host: str = "127.0.0.1"
    port: int = 8000
    workers: int = 1
    log_level: Literal["debug", "info", "warning", "error"] = "info"
    body_limit_bytes: int = Field(
        default=1_048_576, description="Largest JSON request body accepted (413 beyond it)"
    )
    import_limit_bytes: int = Field(
        default=256 * 1_048_576, description="Largest CSV import body accepted (413 beyond it)"
    )
    sqlite_busy_timeout_ms: int = 30_000
    database_pool_size: int = Field(
        default=10, ge=1, description="Connections each server process keeps open"
    )
    auth_cache_seconds: float = Field(
        default=1.0,
        ge=0,
        description="How long a server process trusts an API key it has verified before "
        "looking it up again; a key revoked through another process stops working within "
        "this time (0: look up on every request)",
    )
    import_chunk_rows: int = Field(
        default=20_000, description="Rows written per batch during a CSV import"
    )

    gate_min_observations: int = Field(
        default=30, description="Quality gate: fewest observations an active fit may rest on"
    )
    gate_holdout_margin: float = Field(
        default=0.10,
        description="Quality gate: a new fit's hold-out WAPE may exceed the active fit's by "
        "at most this fraction",
    )

    worker_enabled: bool = Field(
        default=True, description="Run queued jobs in a thread of the service process"
    )
    scheduler_enabled: bool = Field(
        default=True, description="Start scheduled jobs from this process (safe on replicas)"
    )
    job_batch_size: int = Field(
        default=500, ge=1, description="Products a job fits and commits together"
    )
    job_read_processes: int = Field(
        default=2,
        ge=0,
        description="SQLite: processes that read a refit job's histories while the job "
        "fits and writes (SQLite's driver holds the job's interpreter for every row it "
        "reads); 0: the job's own process reads, fits and writes in turn",
    )
    worker_poll_seconds: float = 1.0
    cluster: str = Field(
        default="",
        pattern=r"^(|local:[1-9][0-9]{0,2}|tcp://[^\s/]+:[0-9]{1,5})$",
        description="Where refit and reprice jobs run: empty = in this process; "
        "tcp://HOST:8786 = on that Dask scheduler's workers; local:N = on a local cluster "
        "of N worker processes started for the job. PostgreSQL only",
    )
    job_partition_size: int = Field(
        default=20_000,
        ge=1,
        description="Cluster jobs: products per partition (a range of product ids that one "
        "worker reads, fits and writes)",
    )
    cluster_connect_seconds: float = Field(
        default=10.0, gt=0, description="How long a job waits to reach its Dask scheduler"
    )
    cluster_retries: int = Field(
        default=2,
        ge=0,
        description="Times a partition that raised is run again before the job fails (a "
        "partition whose worker died is rerun by the scheduler regardless)",
    )
    scheduler_tick_seconds: float = 15.0
    job_stale_seconds: float = Field(
        default=300.0,
        description="A running job whose worker has not reported for this long is failed",
    )
    cors_origins: list[str] = Field(
        default_factory=list,
        description="Browser origins allowed to call the API (CORS); empty: CORS off",
    )
    metrics_public: bool = Field(
        default=True, description="Serve /metrics without an API key (else: admin scope)"
    )

    session_secret: SecretStr | None = Field(
        default=None,
        description="Key that signs the analyst pages' session cookie; give every host the "
        "same value. Unset: read from session_secret_file, which is created on first use",
    )
    session_secret_file: Path = Field(
        default=Path("var") / "session-secret",
        description="Where the cookie-signing key is kept when session_secret is unset "
        "(shared by the workers of one host)",
    )
    session_max_age_seconds: int = Field(
        default=8 * 3600, ge=60, description="How long a sign-in to the analyst pages lasts"
    )
    session_cookie_secure: Literal["auto", "always", "never"] = Field(
        default="auto",
        description="Mark the session cookie Secure: auto = when the request came over HTTPS; "
        "use always behind a proxy that terminates TLS",
    )

    @property
    def is_sqlite(self) -> bool:
        return self.database_url.startswith("sqlite")


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process-wide settings, built on first use (tests override by passing their own)."""
    return Settings()
