"""``/v1/experiments`` and ``/v1/jobs``: create (check the inputs, queue the job), list, read."""

from __future__ import annotations

import json
from typing import TYPE_CHECKING, Annotated, Any

from fastapi import APIRouter, Body, Query, Request, Response
from fastapi.responses import JSONResponse

from app.api.caching import LIVE_CACHE, cache_headers, make_etag, not_modified
from app.api.deps import ReadAccess, StoreDep, WriteAccess
from app.api.ingest import submit_experiment
from app.api.schemas import ExperimentIn, ExperimentOut, ExperimentPage, JobOut, JobStatus
from app.errors import ParameterError
from app.store import repo

if TYPE_CHECKING:
    from app.cube.engine import ScoreOptions

router = APIRouter(tags=["experiments"])

SLOTS = ("realistic", "scrambled", "observations", "land_state")


def check_region_name(region: str) -> str:
    """Region names come from clients: refuse anything that could name a server file."""
    text = region.strip()
    if not text or "/" in text or "\\" in text or text.lower().endswith((".json", ".geojson")):
        raise ParameterError(
            f"region {region!r} is not a region name; use 'all', 'box:LAT0,LAT1,LON0,LON1', "
            "an id from GET /v1/regions, or give a GeoJSON polygon as {\"name\", \"geojson\"}",
            region=region,
        )
    return text


def experiment_view(exp: dict[str, Any]) -> dict[str, Any]:
    """The repo's experiment dict plus the job progress and links to its results."""
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
    return out


def _live(request: Request, payload: dict[str, Any], status: int = 200) -> Response:
    """A JSON answer about live state: ETag of its content, ``private, no-cache``."""
    body = json.dumps(payload, sort_keys=True, default=str).encode()
    headers = cache_headers(make_etag("live", body.decode()), LIVE_CACHE)
    cached = not_modified(request, headers) if status == 200 else None
    if cached is not None:
        return cached
    return Response(body, status_code=status, media_type="application/json", headers=headers)


def _options(body: ExperimentIn) -> ScoreOptions:
    from app.cube.engine import ScoreOptions  # the engine's imports are heavy: load on use

    boot = body.bootstrap
    regions: list[Any] | None = None
    if body.regions is not None:
        regions = [
            check_region_name(r) if isinstance(r, str) else r.model_dump() for r in body.regions
        ]
    options = ScoreOptions(
        variable=body.variable,
        lead_windows=[w.model_dump() for w in body.lead_windows] if body.lead_windows else None,
        regions=regions,
        equalize_members=body.equalize_members,
    )
    if boot is not None:
        options.resamples, options.seed, options.confidence = (
            boot.resamples,
            boot.seed,
            boot.confidence,
        )
    if body.fdr_alpha is not None:
        options.fdr_alpha = body.fdr_alpha
    return options.validate()


@router.post(
    "/v1/experiments",
    status_code=202,
    response_model=ExperimentOut,
    responses={202: {"description": "accepted: the score job is queued"}},
)
def create_experiment(
    body: Annotated[ExperimentIn, Body()], store: StoreDep, _: WriteAccess
) -> JSONResponse:
    """Check that the datasets fit together, then queue the score job: 202 with the job."""
    options = _options(body)
    exp = submit_experiment(
        store,
        name=body.name,
        datasets={slot: getattr(body, slot) for slot in SLOTS},
        options=options,
        parameters=body.model_dump(exclude_none=True),
    )
    view = experiment_view(exp)
    return JSONResponse(
        view,
        status_code=202,
        headers={"Location": view["links"]["self"], "Cache-Control": LIVE_CACHE},
    )


@router.get("/v1/experiments", response_model=ExperimentPage)
def list_experiments(
    request: Request,
    store: StoreDep,
    _: ReadAccess,
    variable: Annotated[str | None, Query(max_length=100)] = None,
    name: Annotated[str | None, Query(max_length=200)] = None,
    status: Annotated[JobStatus | None, Query()] = None,
    limit: Annotated[int, Query(ge=1, le=500)] = 50,
    offset: Annotated[int, Query(ge=0)] = 0,
) -> Response:
    """Experiments, newest first; filter by ``variable``, ``name``, ``status``; paginated."""
    page = repo.list_experiments(
        store, variable=variable, name=name, status=status, limit=limit, offset=offset
    )
    page["items"] = [experiment_view(e) for e in page["items"]]
    return _live(request, page)


@router.get("/v1/experiments/{experiment_id}", response_model=ExperimentOut)
def get_experiment(
    experiment_id: str, request: Request, store: StoreDep, _: ReadAccess
) -> Response:
    """Parameters, status, provenance (input sha256s, code version, seed)."""
    return _live(request, experiment_view(repo.get_experiment(store, experiment_id)))


@router.get("/v1/jobs/{job_id}", response_model=JobOut)
def get_job(job_id: str, request: Request, store: StoreDep, _: ReadAccess) -> Response:
    """``{"id", "status", "progress", "message", "error", ...}`` with ``private, no-cache``."""
    return _live(request, repo.get_job(store, job_id))
