"""``/v1/datasets``: streamed uploads, registration under data roots, reads."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Body, Request, Response
from starlette.concurrency import run_in_threadpool

from app.api.caching import RESULT_CACHE, cache_headers, make_etag, not_modified
from app.api.deps import ReadAccess, SettingsDep, StoreDep, WriteAccess
from app.api.schemas import DatasetOut, RegisterIn
from app.api.upload import receive_upload
from app.runs.admission import NETCDF_MEDIA, ROLES, admit_received, check_role, register_path
from app.store import dataset_rows

router = APIRouter(prefix="/v1/datasets", tags=["datasets"])

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


def _answer(response: Response, dataset: dict[str, Any], created: bool) -> DatasetOut:
    response.status_code = 201 if created else 200
    response.headers["Location"] = f"/v1/datasets/{dataset['id']}"
    return DatasetOut.model_validate(dataset)


@router.post(
    "",
    status_code=201,
    response_model=DatasetOut,
    openapi_extra=_UPLOAD_DOC,
    responses={200: {"model": DatasetOut, "description": "the same bytes were uploaded before"}},
)
async def upload_dataset(
    request: Request, response: Response, store: StoreDep, settings: SettingsDep, _: WriteAccess
) -> DatasetOut:
    """Upload a NetCDF file (multipart ``file`` + ``role``): 201 new, 200 same bytes again."""
    upload = await receive_upload(
        request,
        open_writer=lambda: store.artifacts.open_writer(media_type=NETCDF_MEDIA),
        max_bytes=settings.max_upload_bytes,
    )
    try:
        role = check_role(upload.fields.get("role"))
        variable = upload.fields.get("variable") or None
        dataset, created = await run_in_threadpool(
            lambda: admit_received(store, settings, upload.file, role=role, variable=variable)
        )
        return _answer(response, dataset, created)
    finally:
        upload.discard()  # no-op once committed


@router.post(
    "/register",
    status_code=201,
    response_model=DatasetOut,
    responses={200: {"model": DatasetOut, "description": "already registered (same content, same role)"}},
)
def register_dataset(
    body: Annotated[RegisterIn, Body()],
    response: Response,
    store: StoreDep,
    settings: SettingsDep,
    _: WriteAccess,
) -> DatasetOut:
    """Register a file or Zarr store under a configured data root (no copy is made)."""
    dataset, created = register_path(store, settings, body.uri, role=body.role, variable=body.variable)
    return _answer(response, dataset, created)


@router.get("/{dataset_id}", response_model=DatasetOut, responses={304: {"description": "not modified"}})
def get_dataset(
    dataset_id: str, request: Request, response: Response, store: StoreDep, _: ReadAccess
) -> Any:
    """Id, role, sha256, variables, dims and sizes, units, init dates, members, lead days, grid."""
    dataset = dataset_rows.get_dataset(store, dataset_id)
    headers = cache_headers(make_etag("dataset", dataset["id"], dataset["sha256"]), RESULT_CACHE)
    cached = not_modified(request, headers)
    if cached is not None:
        return cached
    response.headers.update(headers)
    return DatasetOut.model_validate(dataset)
