"""SQLAlchemy 2 models: the tables the service keeps.

Every timestamp is stored as naive UTC (so comparisons in SQL behave the same on SQLite and
PostgreSQL) and comes back as an aware UTC ``datetime``. Ids are short prefixed random strings
(``ds_``, ``ex_``, ``job_``, ``cmp_``, ``tok_``).
"""

from __future__ import annotations

import secrets
from datetime import UTC, datetime
from typing import Any

from sqlalchemy import (
    JSON,
    BigInteger,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.dialects.postgresql import JSONB
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column
from sqlalchemy.types import TypeDecorator

JOB_STATES = ("queued", "running", "done", "failed")
JOB_KINDS = ("score", "compare")
DATASET_SOURCES = ("upload", "register")
TOKEN_SCOPES = ("read", "write", "admin")

NAMING = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


def utcnow() -> datetime:
    return datetime.now(UTC)


def new_id(prefix: str) -> str:
    return f"{prefix}_{secrets.token_hex(8)}"


class UTCDateTime(TypeDecorator[datetime]):
    """Aware UTC datetimes in, stored naive UTC, aware UTC out."""

    impl = DateTime(timezone=False)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Any) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError(f"naive datetime {value!r}: pass an aware UTC datetime")
        return value.astimezone(UTC).replace(tzinfo=None)

    def process_result_value(self, value: datetime | None, dialect: Any) -> datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=UTC)


JSONType = JSON().with_variant(JSONB(), "postgresql")


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING)


class Artifact(Base):
    """A whole file in the content-addressed store (inserted only after the file is complete)."""

    __tablename__ = "artifacts"

    sha256: Mapped[str] = mapped_column(String(64), primary_key=True)
    size_bytes: Mapped[int] = mapped_column(BigInteger)
    media_type: Mapped[str] = mapped_column(String(100))
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)


class Dataset(Base):
    __tablename__ = "datasets"

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    sha256: Mapped[str] = mapped_column(String(64), unique=True)
    role: Mapped[str] = mapped_column(String(20))
    source: Mapped[str] = mapped_column(String(10))
    artifact_sha256: Mapped[str | None] = mapped_column(
        ForeignKey("artifacts.sha256"), nullable=True
    )
    uri: Mapped[str | None] = mapped_column(Text, nullable=True)
    filename: Mapped[str | None] = mapped_column(String(255), nullable=True)
    size_bytes: Mapped[int] = mapped_column(BigInteger)
    description: Mapped[dict[str, Any]] = mapped_column(JSONType)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)


class Job(Base):
    __tablename__ = "jobs"
    __table_args__ = (
        Index("ix_jobs_status_available", "status", "available_at"),
        Index("ix_jobs_status_lease", "status", "lease_expires_at"),
    )

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    kind: Mapped[str] = mapped_column(String(20))
    status: Mapped[str] = mapped_column(String(10), default="queued")
    payload: Mapped[dict[str, Any]] = mapped_column(JSONType)
    progress: Mapped[float] = mapped_column(Float, default=0.0)
    message: Mapped[str | None] = mapped_column(Text, nullable=True)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    max_attempts: Mapped[int] = mapped_column(Integer, default=3)
    owner_token: Mapped[str | None] = mapped_column(String(64), nullable=True)
    worker: Mapped[str | None] = mapped_column(String(200), nullable=True)
    lease_expires_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    heartbeat_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    available_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    started_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)


class JobAttempt(Base):
    """One claim of a job by one worker: the owner/attempt history."""

    __tablename__ = "job_attempts"
    __table_args__ = (UniqueConstraint("job_id", "attempt"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    job_id: Mapped[str] = mapped_column(ForeignKey("jobs.id", ondelete="CASCADE"), index=True)
    attempt: Mapped[int] = mapped_column(Integer)
    owner_token: Mapped[str] = mapped_column(String(64))
    worker: Mapped[str] = mapped_column(String(200))
    claimed_at: Mapped[datetime] = mapped_column(UTCDateTime)
    #: the lease end this owner last held (renewed with each heartbeat)
    lease_expires_at: Mapped[datetime] = mapped_column(UTCDateTime)
    ended_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    #: done, failed (error in the job), retry (error, requeued), expired (lease ran out),
    #: released (worker stopped and gave the job back)
    outcome: Mapped[str | None] = mapped_column(String(10), nullable=True)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)


class Experiment(Base):
    __tablename__ = "experiments"

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    name: Mapped[str] = mapped_column(String(200), index=True)
    variable: Mapped[str | None] = mapped_column(String(100), index=True, nullable=True)
    realistic_id: Mapped[str] = mapped_column(ForeignKey("datasets.id"))
    scrambled_id: Mapped[str] = mapped_column(ForeignKey("datasets.id"))
    observations_id: Mapped[str] = mapped_column(ForeignKey("datasets.id"))
    land_state_id: Mapped[str | None] = mapped_column(ForeignKey("datasets.id"), nullable=True)
    options: Mapped[dict[str, Any]] = mapped_column(JSONType)
    parameters: Mapped[dict[str, Any]] = mapped_column(JSONType)
    provenance: Mapped[dict[str, Any] | None] = mapped_column(JSONType, nullable=True)
    result_digest: Mapped[str | None] = mapped_column(String(64), nullable=True)
    job_id: Mapped[str] = mapped_column(ForeignKey("jobs.id"), unique=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)


class ResultFile(Base):
    """One file of a finished experiment's result (skill.json, maps.nc, ...)."""

    __tablename__ = "result_files"

    experiment_id: Mapped[str] = mapped_column(
        ForeignKey("experiments.id", ondelete="CASCADE"), primary_key=True
    )
    name: Mapped[str] = mapped_column(String(100), primary_key=True)
    artifact_sha256: Mapped[str] = mapped_column(ForeignKey("artifacts.sha256"))


class Comparison(Base):
    __tablename__ = "comparisons"

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    baseline_id: Mapped[str] = mapped_column(ForeignKey("experiments.id"))
    candidate_id: Mapped[str] = mapped_column(ForeignKey("experiments.id"))
    parameters: Mapped[dict[str, Any]] = mapped_column(JSONType)
    job_id: Mapped[str] = mapped_column(ForeignKey("jobs.id"), unique=True)
    result_sha256: Mapped[str | None] = mapped_column(
        ForeignKey("artifacts.sha256"), nullable=True
    )
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)


class CachedArtifact(Base):
    """A derived file kept once rendered (PNG figures, NetCDF map extracts): key -> artifact."""

    __tablename__ = "cached_artifacts"

    key: Mapped[str] = mapped_column(String(400), primary_key=True)
    artifact_sha256: Mapped[str] = mapped_column(ForeignKey("artifacts.sha256"))
    media_type: Mapped[str] = mapped_column(String(100))
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)


class Token(Base):
    __tablename__ = "tokens"

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    name: Mapped[str] = mapped_column(String(200))
    scope: Mapped[str] = mapped_column(String(10))
    prefix: Mapped[str] = mapped_column(String(20), index=True)
    token_hash: Mapped[str] = mapped_column(String(64), unique=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, default=utcnow)
    last_used_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
    revoked_at: Mapped[datetime | None] = mapped_column(UTCDateTime, nullable=True)
