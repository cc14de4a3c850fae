"""``/v1/experiments`` and ``/v1/jobs``: create (check the inputs, queue the job), list, read."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Body, Query, Request, Response
from pydantic import BaseModel

from app.api.caching import LIVE_CACHE, cache_headers, make_etag, not_modified
from app.api.deps import ReadAccess, StoreDep, WriteAccess
from app.api.schemas import ExperimentIn, ExperimentOut, ExperimentPage, JobOut, JobStatus
from app.runs.options import MAX_NAME_CHARS, Name, Variable
from app.runs.submission import SLOTS, submit_experiment
from app.store import experiment_rows, job_rows
from app.store.experiment_rows import MAX_LIMIT, MAX_OFFSET

router = APIRouter(tags=["experiments"])


def experiment_view(exp: dict[str, Any]) -> ExperimentOut:
    """The stored experiment plus the job progress and links to its results (validated)."""
    out = dict(exp)
    out["progress"] = exp["job"]["progress"]
    base = f"/v1/experiments/{exp['id']}"
    out["links"] = {
        "self": base,
        "job": f"/v1/jobs/{exp['job']['id']}",
        "skill": f"{base}/skill",
        "conditional": f"{base}/conditional",
        "maps": f"{base}/maps/{{window}}",
    }
    return ExperimentOut.model_validate(out)


def live(request: Request, model: BaseModel, status: int = 200, headers: dict[str, str] | None = None) -> Response:
    """A validated JSON answer about live state: ETag of its content, ``private, no-cache``."""
    body = model.model_dump_json().encode()
    all_headers = cache_headers(make_etag("live", body.decode()), LIVE_CACHE)
    all_headers.update(headers or {})
    cached = not_modified(request, all_headers) if status == 200 else None
    if cached is not None:
        return cached
    return Response(body, status_code=status, media_type="application/json", headers=all_headers)


@router.post(
    "/v1/experiments",
    status_code=202,
    response_model=ExperimentOut,
    responses={202: {"description": "accepted: the score job is queued"}},
)
def create_experiment(
    body: Annotated[ExperimentIn, Body()], request: Request, store: StoreDep, _: WriteAccess
) -> Response:
    """Check that the datasets fit together, then queue the score job: 202 with the job."""
    exp = submit_experiment(
        store,
        name=body.name,
        datasets={slot: getattr(body, slot) for slot in SLOTS},
        options=body,
        parameters=body.model_dump(mode="json", exclude_none=True),
    )
    view = experiment_view(exp)
    return live(request, view, status=202, headers={"Location": view.links["self"]})


@router.get(
    "/v1/experiments", response_model=ExperimentPage, responses={304: {"description": "not modified"}}
)
def list_experiments(
    request: Request,
    store: StoreDep,
    _: ReadAccess,
    variable: Annotated[Variable | None, Query()] = None,
    name: Annotated[Name | None, Query(max_length=MAX_NAME_CHARS)] = None,
    status: Annotated[JobStatus | None, Query()] = None,
    limit: Annotated[int, Query(ge=1, le=MAX_LIMIT)] = 50,
    offset: Annotated[int, Query(ge=0, le=MAX_OFFSET)] = 0,
) -> Response:
    """Experiments, newest first; filter by ``variable``, ``name``, ``status``; paginated."""
    page = experiment_rows.list_experiments(
        store, variable=variable, name=name, status=status, limit=limit, offset=offset
    )
    page["items"] = [experiment_view(e) for e in page["items"]]
    return live(request, ExperimentPage.model_validate(page))


@router.get(
    "/v1/experiments/{experiment_id}",
    response_model=ExperimentOut,
    responses={304: {"description": "not modified"}},
)
def get_experiment(
    experiment_id: str, request: Request, store: StoreDep, _: ReadAccess
) -> Response:
    """Parameters, status, provenance (input sha256s, code version, seed)."""
    return live(request, experiment_view(experiment_rows.get_experiment(store, experiment_id)))


@router.get("/v1/jobs/{job_id}", response_model=JobOut, responses={304: {"description": "not modified"}})
def get_job(job_id: str, request: Request, store: StoreDep, _: ReadAccess) -> Response:
    """``{"id", "status", "progress", "message", "error", ...}`` with ``private, no-cache``."""
    return live(request, JobOut.model_validate(job_rows.get_job(store, job_id)))
