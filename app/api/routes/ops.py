"""Open routes: ``/healthz``, ``/metrics`` and the dashboard page ``/``."""

from __future__ import annotations

from pathlib import Path

from fastapi import APIRouter, Request, Response
from fastapi.responses import FileResponse, JSONResponse
from prometheus_client import CONTENT_TYPE_LATEST, generate_latest

from app.api.deps import StoreDep
from app.api.schemas import Health
from app.provenance import code_version

router = APIRouter(tags=["operations"])

STATIC_DIR = Path(__file__).resolve().parents[1] / "static"


@router.get("/healthz", response_model=Health, responses={503: {"model": Health}})
def healthz(store: StoreDep) -> JSONResponse:
    """``{"status": "ok", "database": "ok", "version"}``; 503 when the database does not answer."""
    try:
        ok = store.db.ping()
        problem = None if ok else "no answer"
    except Exception as exc:
        ok, problem = False, type(exc).__name__
    body = Health(
        status="ok" if ok else "unavailable",
        database="ok" if ok else f"error: {problem}",
        version=code_version(),
    )
    return JSONResponse(
        body.model_dump(), status_code=200 if ok else 503, headers={"Cache-Control": "no-store"}
    )


@router.get("/metrics", response_class=Response)
def metrics(request: Request) -> Response:
    """Prometheus text format."""
    registry = request.app.state.metrics.registry
    return Response(generate_latest(registry), media_type=CONTENT_TYPE_LATEST)


@router.get("/", include_in_schema=False)
def dashboard() -> FileResponse:
    return FileResponse(STATIC_DIR / "index.html", media_type="text/html")
