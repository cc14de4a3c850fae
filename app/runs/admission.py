"""Admitting datasets: the one path that uploads, registrations and ``landlift demo`` share.

A file arrives in the artifact store's writer (fsynced under a temporary name, hashed); it is
then checked for emptiness and a NetCDF/HDF5 signature, deduplicated by SHA-256, validated in a
spawned child process with a time and memory limit (:mod:`app.runs.sandbox`), and only then
renamed into the store and recorded as a row. Any failure leaves neither a file nor a row.

A registration names a file or Zarr store under a configured data root
(:mod:`app.runs.paths`); it is hashed with the same checksum as an upload
(:func:`app.provenance.content_sha256`), validated the same way, and recorded without a copy.
Every refusal is a domain error (:mod:`app.errors`) that names the file and the problem.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from app.errors import ConflictError, InputError, ParameterError
from app.provenance import content_sha256, content_size
from app.runs.paths import resolve_register_path
from app.runs.sandbox import validate_file
from app.settings import Settings
from app.store import Store, dataset_rows
from app.store.artifacts import ArtifactWriter

NETCDF_MEDIA = "application/x-netcdf"
CHUNK = 1 << 20
ROLES: tuple[str, ...] = ("hindcast", "observations", "land_state")

#: File signatures: NetCDF classic (CDF-1), 64-bit offset (CDF-2), 64-bit data (CDF-5), HDF5.
SIGNATURES: dict[bytes, str] = {
    b"CDF\x01": "netcdf3-classic",
    b"CDF\x02": "netcdf3-64bit-offset",
    b"CDF\x05": "netcdf3-64bit-data",
    b"\x89HDF\r\n\x1a\n": "hdf5",
}


def sniff_format(head: bytes) -> str | None:
    """Name the container format from the first bytes of a file, or ``None`` if not NetCDF/HDF5."""
    for magic, name in SIGNATURES.items():
        if head.startswith(magic):
            return name
    return None


def check_role(role: str | None) -> str:
    """The dataset role, or a 422 naming the choices."""
    if role is None:
        raise ParameterError(
            f"form field 'role' is missing: choose one of {', '.join(ROLES)}",
            code="invalid_request", choices=list(ROLES),
        )
    if role not in ROLES:
        raise ParameterError(
            f"role {role!r} is not known: choose one of {', '.join(ROLES)}",
            code="invalid_request", role=role, choices=list(ROLES),
        )
    return role


@dataclass
class ReceivedFile:
    """A file received whole into the artifact store's writer, not yet published."""

    writer: ArtifactWriter
    size: int
    sha256: str
    head: bytes
    filename: str | None

    @property
    def path(self) -> Path:
        return self.writer.temp_path

    def discard(self) -> None:
        with contextlib.suppress(OSError):
            self.writer.abort()


def _check_signature(head: bytes, *, size: int, shown: str) -> None:
    if size == 0:
        raise InputError("is empty", file=shown, code="empty_file")
    if sniff_format(head) is None:
        raise InputError(
            "is not NetCDF: it starts with neither a NetCDF classic ('CDF\\x01', 'CDF\\x02', "
            "'CDF\\x05') nor an HDF5 signature",
            file=shown, code="not_netcdf", first_bytes=head[:8].hex(),
        )


def _same_role(existing: dict[str, Any], role: str) -> dict[str, Any]:
    if existing["role"] != role:
        raise ConflictError(
            f"these bytes are already dataset {existing['id']} with role "
            f"{existing['role']!r}, not {role!r}",
            dataset=existing["id"],
            role=existing["role"],
        )
    return existing


def _validate(settings: Settings, path: Path, *, role: str, variable: str | None, shown: str) -> dict[str, Any]:
    return validate_file(
        path,
        role=role,
        variable=variable,
        timeout=settings.validation_timeout_seconds,
        memory_bytes=settings.validation_memory_bytes,
        display_name=shown,
        fault=settings.validation_fault,
    )


def admit_received(
    store: Store, settings: Settings, received: ReceivedFile, *, role: str, variable: str | None = None
) -> tuple[dict[str, Any], bool]:
    """Validate and publish a received file (blocking); ``(dataset, created)``."""
    shown = received.filename or "upload"
    _check_signature(received.head, size=received.size, shown=shown)
    existing = dataset_rows.find_dataset(store, received.sha256)
    if existing is not None:
        return _same_role(existing, role), False
    description = _validate(settings, received.path, role=role, variable=variable, shown=shown)
    ref = received.writer.commit()
    return dataset_rows.create_dataset(
        store,
        role=role,
        sha256=received.sha256,
        size_bytes=received.size,
        description=description,
        source="upload",
        artifact=ref,
        filename=received.filename,
    )


def ingest_file(
    store: Store, settings: Settings, path: str | Path, *, role: str, variable: str | None = None
) -> tuple[dict[str, Any], bool]:
    """Admit a local file exactly as an upload of its bytes would be admitted."""
    p = Path(path)
    writer = store.artifacts.open_writer(media_type=NETCDF_MEDIA, max_bytes=settings.max_upload_bytes)
    head, size = b"", 0
    try:
        with p.open("rb") as fh:
            while block := fh.read(CHUNK):
                if len(head) < 16:
                    head += block[: 16 - len(head)]
                writer.write(block)
                size += len(block)
        received = ReceivedFile(writer=writer, size=size, sha256=writer.finish(), head=head, filename=p.name)
        return admit_received(store, settings, received, role=role, variable=variable)
    finally:
        writer.abort()  # removes the temporary file unless it was committed into the store


def register_path(
    store: Store, settings: Settings, uri: str, *, role: str, variable: str | None = None
) -> tuple[dict[str, Any], bool]:
    """Register a file or Zarr store under a data root (no copy is made); ``(dataset, created)``."""
    path = resolve_register_path(uri, list(settings.data_roots))
    if path.is_file():
        with path.open("rb") as fh:
            head = fh.read(16)
        _check_signature(head, size=len(head), shown=path.name)
    digest = content_sha256(path)
    existing = dataset_rows.find_dataset(store, digest)
    if existing is not None and existing["role"] == role:
        return existing, False
    description = _validate(settings, path, role=role, variable=variable, shown=path.name)
    return dataset_rows.create_dataset(
        store,
        role=role,
        sha256=digest,
        size_bytes=content_size(path),
        description=description,
        source="register",
        uri=str(path),
        filename=path.name,
    )
