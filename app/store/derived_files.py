"""Derived files of finished results (rendered PNGs, CSVs, extracted maps) kept by key."""

from __future__ import annotations

from pathlib import Path

from app.errors import ParameterError
from app.store import Store
from app.store.common import insert_ignore, record_artifact
from app.store.models import CachedArtifact, utcnow


def get_cached(store: Store, key: str) -> tuple[Path, str] | None:
    """A derived file kept under ``key`` (e.g. a rendered PNG): ``(path, media_type)`` or None."""
    with store.db.read() as session:
        row = session.get(CachedArtifact, key)
        if row is None:
            return None
        path = store.artifacts.path_for(row.artifact_sha256)
        return (path, row.media_type) if path.is_file() else None


def put_cached(store: Store, key: str, data: bytes, *, media_type: str) -> Path:
    """Store ``data`` in the artifact store and remember it under ``key``; return its path.

    If another process stored the same key first, the first one wins (results are immutable, so
    both are the same picture).
    """
    if not key or len(key) > 400:
        raise ParameterError(f"cache key {key!r} must be 1..400 characters")
    ref = store.artifacts.put_bytes(data, media_type=media_type)
    with store.db.write() as session:
        record_artifact(session, ref)
        insert_ignore(
            session,
            CachedArtifact,
            {
                "key": key,
                "artifact_sha256": ref.sha256,
                "media_type": media_type,
                "created_at": utcnow(),
            },
            "key",
        )
    found = get_cached(store, key)
    assert found is not None
    return found[0]
