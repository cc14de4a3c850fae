"""Open routes: ``/healthz``, ``/metrics`` and the dashboard page ``/``."""

from __future__ import annotations

from pathlib import Path

from fastapi import APIRouter, Request, Response
from fastapi.responses import FileResponse, JSONResponse
from prometheus_client import CONTENT_TYPE_LATEST, generate_latest

from app.api.deps import StoreDep
from app.store import repo

router = APIRouter(tags=["operations"])

STATIC_DIR = Path(__file__).resolve().parents[1] / "static"


def version() -> str:
    try:
        from importlib.metadata import version as _version

        return _version("landlift")
    except Exception:  # pragma: no cover - not installed
        return "unknown"


@router.get("/healthz")
def healthz(store: StoreDep) -> JSONResponse:
    """``{"status": "ok", "database": "ok", "version"}``; 503 when the database does not answer."""
    try:
        ok = repo.ping(store)
        problem = None if ok else "no answer"
    except Exception as exc:
        ok, problem = False, type(exc).__name__
    body = {
        "status": "ok" if ok else "unavailable",
        "database": "ok" if ok else f"error: {problem}",
        "version": version(),
    }
    return JSONResponse(
        body, status_code=200 if ok else 503, headers={"Cache-Control": "no-store"}
    )


@router.get("/metrics", response_class=Response)
def metrics(request: Request) -> Response:
    """Prometheus text format."""
    registry = request.app.state.metrics.registry
    return Response(generate_latest(registry), media_type=CONTENT_TYPE_LATEST)


@router.get("/", include_in_schema=False)
def dashboard() -> FileResponse:
    return FileResponse(STATIC_DIR / "index.html", media_type="text/html")
