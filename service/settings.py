"""Service settings: one typed object read from the environment, served by a cached dependency.

Every setting has a default that works on a fresh machine (embedded SQLite under ``./var/``,
local worker processes). ``TRAILCAST_<NAME>`` environment variables override them, read and
checked by pydantic-settings (a wrong value stops the start-up with a message naming the
variable). Tests override :func:`get_settings` through FastAPI's dependency overrides or build
the app with explicit settings (``Settings(...)`` ignores nothing: explicit values win over the
environment).
"""

import os
from functools import lru_cache
from pathlib import Path

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict


class Settings(BaseSettings):
    """Runtime configuration (environment variable in brackets)."""

    model_config = SettingsConfigDict(
        env_prefix="TRAILCAST_", env_ignore_empty=True, extra="ignore", frozen=True
    )

    data_dir: Path = Field(
        Path("var"),
        description="Folder for the SQLite database and job files [TRAILCAST_DATA_DIR].",
    )
    api_token: str | None = Field(
        None, description="Bearer token required for POST/DELETE when set [TRAILCAST_API_TOKEN]."
    )
    max_body_bytes: int = Field(
        1_000_000, description="Largest accepted request body [TRAILCAST_MAX_BODY_BYTES]."
    )
    workers: int = Field(
        0,
        description="Local worker processes for forecasts; 0 = one per CPU core [TRAILCAST_WORKERS].",
    )
    dask_scheduler: str | None = Field(
        None,
        description="Dask scheduler address, e.g. tcp://host:8786; local processes when unset [TRAILCAST_DASK_SCHEDULER].",
    )
    job_runners: int = Field(
        1,
        ge=0,
        le=16,
        description="Forecast jobs run at the same time by this process; 0 = accept and store jobs but run none (API-only replica) [TRAILCAST_JOB_RUNNERS].",
    )
    max_particles_per_job: int = Field(
        5_000,
        ge=3,
        description="Largest `particles` (meteoroids per trail and Earth passage) a job may ask for [TRAILCAST_MAX_PARTICLES_PER_JOB].",
    )
    max_years_per_job: int = Field(
        20,
        ge=1,
        description="Most calendar years one job may cover [TRAILCAST_MAX_YEARS_PER_JOB].",
    )
    max_orbits_per_screening: int = Field(
        1000,
        ge=1,
        description="Most orbits one POST /v1/screenings may carry [TRAILCAST_MAX_ORBITS_PER_SCREENING].",
    )
    max_queued_jobs: int = Field(
        50,
        ge=1,
        description="Queued jobs above which new submissions get 429 [TRAILCAST_MAX_QUEUED_JOBS].",
    )
    max_job_attempts: int = Field(
        3,
        ge=1,
        description="A job whose process died this many times while running it is marked failed [TRAILCAST_MAX_JOB_ATTEMPTS].",
    )
    job_lease_seconds: float = Field(
        60.0,
        gt=0,
        description="A running job whose runner has not reported for this long (s) is re-queued [TRAILCAST_JOB_LEASE_SECONDS].",
    )
    job_max_seconds: float = Field(
        3600.0,
        gt=0,
        description="Wall-clock limit of one job run (s); a job still running then is stopped and failed [TRAILCAST_JOB_MAX_SECONDS].",
    )
    job_retention_days: float | None = Field(
        90.0,
        gt=0,
        description="Finished jobs (done, failed, cancelled) older than this many days are deleted with their results; unset to keep them [TRAILCAST_JOB_RETENTION_DAYS].",
    )
    job_retention_count: int | None = Field(
        10_000,
        ge=1,
        description="At most this many finished jobs are kept (the newest); unset for no limit [TRAILCAST_JOB_RETENTION_COUNT].",
    )
    request_max_seconds: float = Field(
        60.0,
        gt=0,
        description="Wall-clock limit of one synchronous computation (POST /v1/geometry) (s); answered 422 past it [TRAILCAST_REQUEST_MAX_SECONDS].",
    )

    @property
    def database_path(self) -> Path:
        return self.data_dir / "trailcast.sqlite3"

    @property
    def forecast_workers(self) -> int:
        """Worker processes per forecast: ``workers``, or one per CPU core when 0."""
        return self.workers if self.workers > 0 else (os.cpu_count() or 1)

    @classmethod
    def from_env(cls, env=None) -> "Settings":
        """Settings from ``env`` (a mapping of ``TRAILCAST_*`` variables; default: the process
        environment)."""
        if env is None:
            return cls()
        values = {}
        for name in cls.model_fields:
            key = f"TRAILCAST_{name.upper()}"
            if env.get(key) not in (None, ""):
                values[name] = env[key]
        return cls.model_validate(values)


@lru_cache
def get_settings() -> Settings:
    """The process-wide settings (cached; tests override this dependency)."""
    return Settings()
