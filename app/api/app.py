"""The FastAPI application factory."""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI
from fastapi.staticfiles import StaticFiles

from app.api.error_handlers import install_error_handlers
from app.api.logs import log_request
from app.api.metrics import MeasureMiddleware, Metrics
from app.api.routes import comparisons, datasets, experiments, ops, results, tokens
from app.api.routes.ops import STATIC_DIR
from app.api.schemas import error_responses
from app.provenance import code_version
from app.settings import Settings
from app.store import Store, job_rows


def create_app(settings: Settings, *, store: Store | None = None) -> FastAPI:
    """The landlift HTTP API on ``settings`` (or on an already open ``store``).

    The database must be migrated already (``run_server`` and ``landlift db upgrade`` do it).
    """
    own_store = store is None
    opened = store if store is not None else Store.open(settings)

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        try:
            yield
        finally:
            if own_store:
                opened.close()

    app = FastAPI(
        title="landlift",
        version=code_version(),
        summary="Verification of land-initialisation skill gain in sub-seasonal hindcasts",
        lifespan=lifespan,
    )
    app.state.settings = settings
    app.state.store = opened
    metrics = Metrics()

    def job_stats() -> tuple[dict[str, int], list[float]]:
        durations = [float(j["seconds"]) for j in job_rows.job_durations(opened)]
        return job_rows.job_counts(opened), durations

    metrics.add_job_collector(job_stats)
    app.state.metrics = metrics

    install_error_handlers(app)
    app.add_middleware(MeasureMiddleware, metrics=metrics, log_request=log_request)
    app.include_router(ops.router, responses=error_responses(400, 503))
    for module in (datasets, experiments, results, comparisons, tokens):
        app.include_router(module.router, responses=error_responses())
    app.mount("/static", StaticFiles(directory=STATIC_DIR), name="static")
    return app
