"""``/v1/comparisons``: version comparison of two finished experiments (a queued job)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Body, Request, Response

from app.api.caching import RESULT_CACHE, cache_headers, make_etag, not_modified
from app.api.deps import ReadAccess, StoreDep, WriteAccess
from app.api.routes.experiments import live
from app.api.schemas import ComparisonIn, ComparisonOut
from app.runs.submission import submit_comparison
from app.store import comparison_rows

router = APIRouter(prefix="/v1/comparisons", tags=["comparisons"])


def _view(cmp: dict[str, Any]) -> ComparisonOut:
    out = {k: v for k, v in cmp.items() if k != "result_sha256"}
    out["links"] = {"self": f"/v1/comparisons/{cmp['id']}", "job": f"/v1/jobs/{cmp['job']['id']}"}
    return ComparisonOut.model_validate(out)


@router.post("", status_code=202, response_model=ComparisonOut)
def create_comparison(
    body: Annotated[ComparisonIn, Body()], request: Request, store: StoreDep, _: WriteAccess
) -> Response:
    """Queue the comparison of ``candidate`` against ``baseline``: 202 with the job."""
    cmp = submit_comparison(store, baseline=body.baseline, candidate=body.candidate, options=body)
    view = _view(cmp)
    return live(request, view, status=202, headers={"Location": view.links["self"]})


@router.get("/{comparison_id}", response_model=ComparisonOut, responses={304: {"description": "not modified"}})
def get_comparison(
    comparison_id: str, request: Request, store: StoreDep, _: ReadAccess
) -> Response:
    """The comparison, its job, and once done its result (DESIGN 3.9)."""
    cmp = comparison_rows.get_comparison(store, comparison_id)
    view = _view(cmp)
    if cmp["status"] == "done" and cmp.get("result_sha256"):
        headers = cache_headers(make_etag("comparison", cmp["result_sha256"]), RESULT_CACHE)
        cached = not_modified(request, headers)
        if cached is not None:
            return cached
        return Response(view.model_dump_json(), media_type="application/json", headers=headers)
    return live(request, view)
