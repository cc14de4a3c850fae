"""Datasets: uploaded files and registered files or Zarr stores, one row per content hash.

Unknown ids raise :class:`app.errors.NotFoundError`; the same bytes posted with another role
raise :class:`app.errors.ConflictError`. A row points at an artifact only after the artifact is
whole in the store (:func:`app.store.common.record_artifact` checks it).
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError

from app.errors import ConflictError, NotFoundError, ParameterError
from app.store import Store
from app.store.artifacts import ArtifactRef
from app.store.common import iso, record_artifact
from app.store.models import DATASET_SOURCES, Dataset, new_id, utcnow

#: the slots of an experiment and the dataset role each one needs
SLOT_ROLES: dict[str, str] = {
    "realistic": "hindcast",
    "scrambled": "hindcast",
    "observations": "observations",
    "land_state": "land_state",
}


def _dataset_dict(row: Dataset) -> dict[str, Any]:
    out: dict[str, Any] = dict(row.description or {})
    out.update(
        {
            "id": row.id,
            "role": row.role,
            "sha256": row.sha256,
            "source": row.source,
            "uri": row.uri,
            "filename": row.filename,
            "size_bytes": row.size_bytes,
            "created_at": iso(row.created_at),
        }
    )
    return out


def create_dataset(
    store: Store,
    *,
    role: str,
    sha256: str,
    size_bytes: int,
    description: Mapping[str, Any],
    source: str = "upload",
    artifact: ArtifactRef | None = None,
    uri: str | None = None,
    filename: str | None = None,
) -> tuple[dict[str, Any], bool]:
    """Create a dataset, or return the existing one with the same sha256.

    Returns ``(dataset, created)``. An upload (``source="upload"``) needs the committed
    ``artifact``; a registration (``source="register"``) needs ``uri``. The same bytes posted
    with another role raise :class:`ConflictError`.
    """
    if role not in SLOT_ROLES.values():
        raise ParameterError(
            f"role {role!r} is not known: use one of {sorted(set(SLOT_ROLES.values()))}",
            role=role,
        )
    if source not in DATASET_SOURCES:
        raise ParameterError(f"source {source!r}: use one of {list(DATASET_SOURCES)}")
    if source == "upload" and artifact is None:
        raise ParameterError("an uploaded dataset needs its stored artifact")
    if source == "register" and not uri:
        raise ParameterError("a registered dataset needs its uri")
    if artifact is not None and artifact.sha256 != sha256:
        raise ParameterError(f"artifact {artifact.sha256} does not match sha256 {sha256}")
    existing = find_dataset(store, sha256)
    if existing is not None:
        _check_same_role(existing, role)
        return existing, False
    try:
        with store.db.write() as session:
            if artifact is not None:
                record_artifact(session, artifact)
            row = Dataset(
                id=new_id("ds"),
                sha256=sha256,
                role=role,
                source=source,
                artifact_sha256=artifact.sha256 if artifact is not None else None,
                uri=uri,
                filename=filename,
                size_bytes=size_bytes,
                description=dict(description),
                created_at=utcnow(),
            )
            session.add(row)
            session.flush()
            result = _dataset_dict(row)
        return result, True
    except IntegrityError:
        # a concurrent request stored the same bytes first
        existing = find_dataset(store, sha256)
        if existing is None:
            raise
        _check_same_role(existing, role)
        return existing, False


def _check_same_role(existing: dict[str, Any], role: str) -> None:
    if existing["role"] != role:
        raise ConflictError(
            f"these bytes are already dataset {existing['id']} with role {existing['role']!r}, "
            f"not {role!r}",
            dataset=existing["id"],
            role=existing["role"],
        )


def find_dataset(store: Store, sha256: str) -> dict[str, Any] | None:
    """The dataset with this content hash, or None."""
    with store.db.read() as session:
        row = session.scalars(select(Dataset).where(Dataset.sha256 == sha256)).first()
        return _dataset_dict(row) if row is not None else None


def get_dataset(store: Store, dataset_id: str) -> dict[str, Any]:
    with store.db.read() as session:
        row = session.get(Dataset, dataset_id)
        if row is None:
            raise NotFoundError(f"dataset {dataset_id!r} does not exist", dataset=dataset_id)
        return _dataset_dict(row)


def row_path(store: Store, row: Dataset) -> Path:
    if row.artifact_sha256 is not None:
        return store.artifacts.path(row.artifact_sha256)
    assert row.uri is not None
    return Path(row.uri)


def dataset_path(store: Store, dataset_id: str) -> Path:
    """Where the dataset's data is: its artifact file, or the registered file / Zarr store."""
    with store.db.read() as session:
        row = session.get(Dataset, dataset_id)
        if row is None:
            raise NotFoundError(f"dataset {dataset_id!r} does not exist", dataset=dataset_id)
        return row_path(store, row)
