"""``/v1/comparisons``: version comparison of two finished experiments (a queued job)."""

from __future__ import annotations

import json
from typing import Annotated, Any

from fastapi import APIRouter, Body, Request, Response
from fastapi.responses import JSONResponse

from app.api.caching import LIVE_CACHE, RESULT_CACHE, cache_headers, make_etag, not_modified
from app.api.deps import ReadAccess, StoreDep, WriteAccess
from app.api.schemas import BootstrapIn, ComparisonIn, ComparisonOut
from app.store import repo

router = APIRouter(prefix="/v1/comparisons", tags=["comparisons"])


def _view(cmp: dict[str, Any]) -> dict[str, Any]:
    out = {k: v for k, v in cmp.items() if k != "result_sha256"}
    out["links"] = {"self": f"/v1/comparisons/{cmp['id']}", "job": f"/v1/jobs/{cmp['job']['id']}"}
    return out


@router.post("", status_code=202, response_model=ComparisonOut)
def create_comparison(
    body: Annotated[ComparisonIn, Body()], store: StoreDep, _: WriteAccess
) -> JSONResponse:
    """Queue the comparison of ``candidate`` against ``baseline``: 202 with the job."""
    boot = body.bootstrap if body.bootstrap is not None else BootstrapIn()
    cmp = repo.create_comparison(
        store,
        baseline=body.baseline,
        candidate=body.candidate,
        resamples=boot.resamples,
        seed=boot.seed,
        confidence=boot.confidence,
    )
    view = _view(cmp)
    return JSONResponse(
        view,
        status_code=202,
        headers={"Location": view["links"]["self"], "Cache-Control": LIVE_CACHE},
    )


@router.get("/{comparison_id}", response_model=ComparisonOut)
def get_comparison(
    comparison_id: str, request: Request, store: StoreDep, _: ReadAccess
) -> Response:
    """The comparison, its job, and once done its result (DESIGN 3.9)."""
    cmp = repo.get_comparison(store, comparison_id)
    if cmp["status"] == "done" and cmp.get("result_sha256"):
        headers = cache_headers(make_etag("comparison", cmp["result_sha256"]), RESULT_CACHE)
    else:
        body_text = json.dumps(cmp, sort_keys=True, default=str)
        headers = cache_headers(make_etag("live", body_text), LIVE_CACHE)
    cached = not_modified(request, headers)
    if cached is not None:
        return cached
    return JSONResponse(_view(cmp), headers=headers)
