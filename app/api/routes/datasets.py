"""``/v1/datasets``: streamed uploads, registration under data roots, reads."""

from __future__ import annotations

from typing import Annotated, Any

import anyio
from fastapi import APIRouter, Body, Request, Response

from app.api.caching import RESULT_CACHE, cache_headers, make_etag, not_modified
from app.api.deps import ReadAccess, SettingsDep, StoreDep, WriteAccess
from app.api.errors import ApiError
from app.api.ingest import NETCDF_MEDIA, admit_upload
from app.api.paths import resolve_register_path
from app.api.schemas import DatasetOut, RegisterIn
from app.api.upload import receive_upload, sniff_format
from app.api.validation import ValidationFailure, validate_file
from app.store import repo

router = APIRouter(prefix="/v1/datasets", tags=["datasets"])

ROLES = ("hindcast", "observations", "land_state")

_UPLOAD_DOC = {
    "requestBody": {
        "required": True,
        "content": {
            "multipart/form-data": {
                "schema": {
                    "type": "object",
                    "required": ["file", "role"],
                    "properties": {
                        "file": {"type": "string", "format": "binary"},
                        "role": {"type": "string", "enum": list(ROLES)},
                        "variable": {"type": "string"},
                    },
                }
            }
        },
    }
}


def _check_role(role: str | None) -> str:
    if role is None:
        raise ApiError(
            422,
            "invalid_request",
            f"form field 'role' is missing: choose one of {', '.join(ROLES)}",
            detail={"choices": list(ROLES)},
        )
    if role not in ROLES:
        raise ApiError(
            422,
            "invalid_request",
            f"role {role!r} is not known: choose one of {', '.join(ROLES)}",
            detail={"role": role, "choices": list(ROLES)},
        )
    return role


def _failure(exc: ValidationFailure) -> ApiError:
    return ApiError(exc.status, exc.code, exc.message, detail=exc.detail)


@router.post(
    "",
    status_code=201,
    response_model=DatasetOut,
    openapi_extra=_UPLOAD_DOC,
    responses={200: {"description": "the same bytes were uploaded before"}},
)
async def upload_dataset(
    request: Request, response: Response, store: StoreDep, settings: SettingsDep, _: WriteAccess
) -> dict[str, Any]:
    """Upload a NetCDF file (multipart ``file`` + ``role``): 201 new, 200 same bytes again."""
    upload = await receive_upload(
        request,
        open_writer=lambda: store.artifacts.open_writer(media_type=NETCDF_MEDIA),
        max_bytes=settings.max_upload_bytes,
    )
    try:
        role = _check_role(upload.fields.get("role"))
        variable = upload.fields.get("variable") or None
        dataset, created = await anyio.to_thread.run_sync(
            lambda: admit_upload(store, settings, upload, role=role, variable=variable)
        )
        response.status_code = 201 if created else 200
        response.headers["Location"] = f"/v1/datasets/{dataset['id']}"
        return dataset
    finally:
        upload.discard()  # no-op once committed


@router.post("/register", status_code=201, response_model=DatasetOut)
def register_dataset(
    body: Annotated[RegisterIn, Body()],
    response: Response,
    store: StoreDep,
    settings: SettingsDep,
    _: WriteAccess,
) -> dict[str, Any]:
    """Register a file or Zarr store under a configured data root (no copy is made)."""
    path = resolve_register_path(body.uri, list(settings.data_roots))
    if path.is_file():
        with path.open("rb") as fh:
            head = fh.read(16)
        if not head:
            raise ApiError(422, "empty_file", f"file {path.name} is empty", detail={"uri": body.uri})
        if sniff_format(head) is None:
            raise ApiError(
                422,
                "not_netcdf",
                f"file {path.name} is neither NetCDF nor HDF5 (and not a Zarr store)",
                detail={"uri": body.uri, "first_bytes": head[:8].hex()},
            )
    digest = _identity(path)
    existing = repo.find_dataset(store, digest)
    if existing is not None and existing["role"] == body.role:
        response.status_code = 200
        return existing
    try:
        description = validate_file(
            path,
            role=body.role,
            variable=body.variable,
            timeout=settings.validation_timeout_seconds,
            memory_bytes=settings.validation_memory_bytes,
            display_name=path.name,
        )
    except ValidationFailure as exc:
        raise _failure(exc) from None
    dataset, created = repo.create_dataset(
        store,
        role=body.role,
        sha256=digest,
        size_bytes=_size(path),
        description=description,
        source="register",
        uri=str(path),
        filename=path.name,
    )
    response.status_code = 201 if created else 200
    response.headers["Location"] = f"/v1/datasets/{dataset['id']}"
    return dataset


def _size(path: Any) -> int:
    if path.is_file():
        return int(path.stat().st_size)
    return int(sum(p.stat().st_size for p in path.rglob("*") if p.is_file()))


def _identity(path: Any) -> str:
    """SHA-256 of a file's bytes; for a Zarr store, of its members' names and bytes in order."""
    import hashlib

    digest = hashlib.sha256()
    if path.is_file():
        with path.open("rb") as fh:
            while chunk := fh.read(1 << 20):
                digest.update(chunk)
        return digest.hexdigest()
    for member in sorted(p for p in path.rglob("*") if p.is_file()):
        digest.update(str(member.relative_to(path)).encode() + b"\0")
        with member.open("rb") as fh:
            while chunk := fh.read(1 << 20):
                digest.update(chunk)
        digest.update(b"\0")
    return digest.hexdigest()


@router.get("/{dataset_id}", response_model=DatasetOut)
def get_dataset(
    dataset_id: str, request: Request, response: Response, store: StoreDep, _: ReadAccess
) -> Any:
    """Id, role, sha256, variables, dims and sizes, units, init dates, members, lead days, grid."""
    dataset = repo.get_dataset(store, dataset_id)
    headers = cache_headers(make_etag("dataset", dataset["id"], dataset["sha256"]), RESULT_CACHE)
    cached = not_modified(request, headers)
    if cached is not None:
        return cached
    response.headers.update(headers)
    return dataset
