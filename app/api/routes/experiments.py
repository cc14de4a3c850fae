"""``/v1/experiments`` and ``/v1/jobs``: create (check the inputs, queue the job), list, read."""

from __future__ import annotations

import json
from typing import TYPE_CHECKING, Annotated, Any

from fastapi import APIRouter, Body, Query, Request, Response
from fastapi.responses import JSONResponse

from app.api.caching import LIVE_CACHE, cache_headers, make_etag, not_modified
from app.api.deps import ReadAccess, StoreDep, WriteAccess
from app.api.schemas import ExperimentIn, ExperimentOut, ExperimentPage, JobOut, JobStatus
from app.errors import LandliftError, ParameterError
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


def _renamed(exc: LandliftError, names: dict[str, str]) -> LandliftError:
    """The engine names stored files by their content address: name the datasets instead."""

    def fix(value: Any) -> Any:
        if isinstance(value, str):
            for stored, shown in names.items():
                value = value.replace(stored, shown)
        return value

    exc.message = fix(exc.message)
    exc.detail = {k: fix(v) for k, v in exc.detail.items()}
    exc.args = (exc.message,)
    return exc


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
    ids = {slot: getattr(body, slot) for slot in SLOTS}
    paths: dict[str, Any] = {}
    names: dict[str, str] = {}
    for slot, dataset_id in ids.items():
        if dataset_id is None:
            continue
        dataset = repo.get_dataset(store, dataset_id)  # 404 for an unknown id
        expected = repo.SLOT_ROLES[slot]
        if dataset["role"] != expected:
            raise ParameterError(
                f"{slot} dataset {dataset_id!r} has role {dataset['role']!r}; the {slot} slot "
                f"needs a {expected!r} dataset",
                slot=slot,
                dataset=dataset_id,
                role=dataset["role"],
                expected=expected,
            )
        paths[slot] = repo.dataset_path(store, dataset_id)
        shown = dataset.get("filename") or dataset_id
        names[paths[slot].name] = f"{shown} (dataset {dataset_id}, {slot})"
    from app.cube.engine import check_inputs

    try:
        check_inputs(
            paths["realistic"],
            paths["scrambled"],
            paths["observations"],
            paths.get("land_state"),
            variable=body.variable,
            lead_windows=options.lead_windows,
        )
    except LandliftError as exc:
        raise _renamed(exc, names) from None
    exp = repo.create_experiment(
        store,
        name=body.name,
        realistic=body.realistic,
        scrambled=body.scrambled,
        observations=body.observations,
        land_state=body.land_state,
        options=options.to_dict(),
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
