"""Service settings: one typed object read from the environment, served by a cached dependency.

Every setting has a default that works on a fresh machine (embedded SQLite under ``./var/``,
local worker processes). Tests override :func:`get_settings` through FastAPI's dependency
overrides or by building the app with explicit settings.
"""

import os
from functools import lru_cache
from pathlib import Path

from pydantic import BaseModel, Field


class Settings(BaseModel):
    """Runtime configuration (environment variable in brackets)."""

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

    @property
    def database_path(self) -> Path:
        return self.data_dir / "trailcast.sqlite3"

    @classmethod
    def from_env(cls, env=None) -> "Settings":
        env = os.environ if env is None else env
        values = {}
        for name in cls.model_fields:
            key = f"TRAILCAST_{name.upper()}"
            if env.get(key) not in (None, ""):
                values[name] = env[key]
        return cls(**values)


@lru_cache
def get_settings() -> Settings:
    """The process-wide settings (cached; tests override this dependency)."""
    return Settings.from_env()
