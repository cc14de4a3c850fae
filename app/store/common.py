"""Helpers every storage aggregate shares: timestamps, media types, artifact rows, upserts."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path
from typing import Any

from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.orm import Session

from app.store.artifacts import ArtifactRef
from app.store.models import Artifact, Job, utcnow

MEDIA_TYPES = {
    ".json": "application/json",
    ".nc": "application/x-netcdf",
    ".png": "image/png",
    ".csv": "text/csv",
}


def iso(value: datetime | None) -> str | None:
    if value is None:
        return None
    return value.isoformat().replace("+00:00", "Z")


def media_type_for(name: str) -> str:
    return MEDIA_TYPES.get(Path(name).suffix.lower(), "application/octet-stream")


def insert_ignore(session: Session, model: type[Any], values: dict[str, Any], key: str) -> None:
    dialect = session.get_bind().dialect.name
    insert = pg_insert if dialect == "postgresql" else sqlite_insert
    session.execute(insert(model).values(**values).on_conflict_do_nothing(index_elements=[key]))


def record_artifact(session: Session, ref: ArtifactRef) -> None:
    """Insert the artifact row for a whole file (inside the caller's write transaction).

    Refuses a ref whose file is missing or has another size: a row never points at a missing or
    partial file.
    """
    path = Path(ref.path)
    if not path.is_file():
        raise RuntimeError(f"artifact {ref.sha256} is not in the store at {path}")
    size = path.stat().st_size
    if size != ref.size_bytes:
        raise RuntimeError(
            f"artifact {ref.sha256} at {path} has {size} bytes, expected {ref.size_bytes}"
        )
    insert_ignore(
        session,
        Artifact,
        {
            "sha256": ref.sha256,
            "size_bytes": ref.size_bytes,
            "media_type": ref.media_type,
            "created_at": utcnow(),
        },
        "sha256",
    )


def job_brief(job: Job) -> dict[str, Any]:
    """The short job view that experiments and comparisons embed."""
    return {
        "id": job.id,
        "status": job.status,
        "progress": float(job.progress),
        "message": job.message,
        "error": job.error,
    }
