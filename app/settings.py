"""Service settings: one validated class, read from ``LANDLIFT_*`` environment variables.

This is the only place that reads a ``LANDLIFT_*`` variable: the CLI, the API and the workers
build a ``Settings`` and pass its values on as arguments.

``Settings()`` reads the environment (and keyword arguments, which win); every value is checked
when the object is built, so a bad setting stops the server or worker at start with a message
that names the variable, the bad value and what is accepted.
"""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import Field, field_validator, model_validator
from pydantic_settings import BaseSettings, NoDecode, SettingsConfigDict

from app.sizes import MIN_MEMORY_BUDGET, parse_size  # (parse_size re-exported)

__all__ = ["Settings", "parse_size"]

def _split_paths(value: Any) -> Any:
    if isinstance(value, str):
        parts = [p.strip() for chunk in value.split(os.pathsep) for p in chunk.split(",")]
        return [p for p in parts if p]
    return value


class Settings(BaseSettings):
    """Everything the service, the workers and the CLI can be configured with."""

    model_config = SettingsConfigDict(
        env_prefix="LANDLIFT_", extra="forbid", validate_default=True, frozen=True
    )

    data_dir: Path = Field(
        default=Path("./landlift-data"),
        description="Folder holding the SQLite database (by default) and the artifact store.",
    )
    database_url: str | None = Field(
        default=None,
        description="SQLAlchemy URL; default SQLite at DATA_DIR/landlift.db. PostgreSQL: "
        "postgresql+psycopg://user@host:5432/db",
    )
    data_roots: Annotated[list[Path], NoDecode] = Field(
        default_factory=list,
        description="Folders that POST /v1/datasets/register may read (os.pathsep or comma "
        "separated in the environment).",
    )
    public_read: bool = Field(default=False, description="Allow GET under /v1 without a token.")
    max_upload_bytes: int = Field(default=4 * 1024**3, description="Upload byte cap.")
    memory_budget: int | None = Field(
        default=None, description='Memory budget for scoring, e.g. "512MiB" or "2GiB".'
    )
    dask_scheduler: str | None = Field(default=None, description="dask scheduler address.")
    lease_seconds: float = Field(default=60.0, description="How long a job claim lasts unrenewed.")
    heartbeat_seconds: float = Field(default=15.0, description="How often a worker renews.")
    max_attempts: int = Field(default=3, description="Claims of one job before it is failed.")
    poll_seconds: float = Field(default=1.0, description="Worker wait between empty claims.")
    retry_delay_seconds: float = Field(
        default=5.0, description="Wait before retrying a job whose attempt raised an error "
        "(doubled with each attempt)."
    )
    validation_timeout_seconds: float = Field(
        default=120.0, description="Wall-clock limit of the upload validation process."
    )
    validation_memory_bytes: int = Field(
        default=2 * 1024**3, description="Address-space limit of the upload validation process."
    )
    validation_cpu_seconds: float = Field(
        default=120.0, description="CPU-time limit (RLIMIT_CPU) of the validation process."
    )
    max_concurrent_validations: int = Field(
        default=2,
        description="Validations (upload, register) running at once; more wait briefly, then "
        "get 503 with Retry-After.",
    )
    max_decompressed_bytes: int = Field(
        default=64 * 1024**3,
        description="Largest declared (uncompressed) size of a dataset's variables; a file that "
        "declares more is refused before its data are read.",
    )
    max_register_bytes: int = Field(
        default=64 * 1024**3,
        description="Largest file or Zarr store that POST /v1/datasets/register hashes and admits.",
    )
    max_json_body_bytes: int = Field(
        default=1024**2, description="Largest JSON request body (413 beyond)."
    )
    derived_cache_items: int = Field(
        default=512, description="Derived result files (rendered curves, maps) kept, least "
        "recently used dropped first."
    )
    derived_cache_bytes: int = Field(
        default=256 * 1024**2, description="Bytes of derived result files kept (LRU)."
    )
    temp_max_age_seconds: float = Field(
        default=3600.0, description="Temporary upload files older than this are swept (at start "
        "and periodically); a live upload rewrites its file continuously."
    )
    retry_after_seconds: int = Field(
        default=5, description="Retry-After of 503 and 429 answers."
    )
    validation_fault: Literal["", "abort", "segfault", "sleep", "allocate"] = Field(
        default="",
        description="Test hook: make every validation child crash, hang or over-allocate "
        "(the fault tests prove that the server survives it). Leave empty.",
    )

    @field_validator("data_dir", mode="after")
    @classmethod
    def _expand_data_dir(cls, value: Path) -> Path:
        return value.expanduser()

    @field_validator("data_roots", mode="before")
    @classmethod
    def _parse_roots(cls, value: Any) -> Any:
        return _split_paths(value)

    @field_validator("data_roots", mode="after")
    @classmethod
    def _resolve_roots(cls, value: list[Path]) -> list[Path]:
        return [p.expanduser().resolve() for p in value]

    @field_validator(
        "max_upload_bytes", "validation_memory_bytes", "max_decompressed_bytes",
        "max_register_bytes", "max_json_body_bytes", "derived_cache_bytes", mode="before",
    )
    @classmethod
    def _parse_required_size(cls, value: Any) -> Any:
        if isinstance(value, str | float) and not isinstance(value, bool):
            return parse_size(value)
        return value

    @field_validator("memory_budget", mode="before")
    @classmethod
    def _parse_optional_size(cls, value: Any) -> Any:
        if value is None or (isinstance(value, str) and value.strip().lower() in ("", "none")):
            return None
        if isinstance(value, str | float) and not isinstance(value, bool):
            return parse_size(value)
        return value

    @field_validator("dask_scheduler", "database_url", mode="before")
    @classmethod
    def _blank_is_none(cls, value: Any) -> Any:
        if isinstance(value, str) and not value.strip():
            return None
        return value

    @model_validator(mode="after")
    def _check(self) -> Settings:
        for name in (
            "max_upload_bytes", "validation_memory_bytes", "memory_budget", "max_decompressed_bytes",
            "max_register_bytes", "max_json_body_bytes", "derived_cache_bytes",
        ):
            size = getattr(self, name)
            if size is not None and size <= 0:
                raise ValueError(f"{name} = {size} must be a positive number of bytes")
        if self.memory_budget is not None and self.memory_budget < MIN_MEMORY_BUDGET:
            raise ValueError(
                f"memory_budget = {self.memory_budget} bytes is below the minimum of "
                f"{MIN_MEMORY_BUDGET} (16MiB)"
            )
        for name in (
            "lease_seconds",
            "heartbeat_seconds",
            "poll_seconds",
            "validation_timeout_seconds",
            "validation_cpu_seconds",
            "temp_max_age_seconds",
        ):
            if getattr(self, name) <= 0:
                raise ValueError(f"{name} = {getattr(self, name)} must be > 0")
        if self.retry_delay_seconds < 0:
            raise ValueError(f"retry_delay_seconds = {self.retry_delay_seconds} must be >= 0")
        if self.heartbeat_seconds >= self.lease_seconds:
            raise ValueError(
                f"heartbeat_seconds = {self.heartbeat_seconds} must be shorter than "
                f"lease_seconds = {self.lease_seconds}, or a live worker would lose its lease"
            )
        if self.max_attempts < 1:
            raise ValueError(f"max_attempts = {self.max_attempts} must be >= 1")
        for name in ("max_concurrent_validations", "derived_cache_items", "retry_after_seconds"):
            if getattr(self, name) < 1:
                raise ValueError(f"{name} = {getattr(self, name)} must be >= 1")
        if self.database_url is None:
            path = (self.data_dir / "landlift.db").resolve()
            object.__setattr__(self, "database_url", f"sqlite:///{path}")
        elif not re.match(r"^(sqlite|postgresql)(\+\w+)?://", self.database_url):
            raise ValueError(
                f"database_url {self.database_url!r} is not supported: use sqlite:///PATH or "
                "postgresql+psycopg://USER@HOST:PORT/DB"
            )
        return self

    @property
    def url(self) -> str:
        """The database URL (always set after validation)."""
        assert self.database_url is not None
        return self.database_url

    @property
    def artifacts_dir(self) -> Path:
        """Root of the content-addressed artifact store."""
        return self.data_dir / "artifacts"

    @property
    def is_sqlite(self) -> bool:
        return self.url.startswith("sqlite")
