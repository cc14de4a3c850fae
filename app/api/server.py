"""``run_server``: uvicorn with the API and, optionally, an in-process worker thread.

This is what ``landlift serve`` runs (the embedded default: one process serving HTTP and running
jobs). The database schema is upgraded on start for SQLite (the embedded case); a PostgreSQL
database shared by several nodes is upgraded once with ``landlift db upgrade`` before the nodes
start, and the server refuses to start on an out-of-date schema.
"""

from __future__ import annotations

import logging
import threading

from app.errors import LandliftError
from app.settings import Settings

log = logging.getLogger("landlift.api.server")


def run_server(
    settings: Settings,
    *,
    host: str = "127.0.0.1",
    port: int = 8000,
    with_worker: bool = True,
    log_level: str = "info",
) -> None:
    """Serve the API on ``host:port`` until interrupted (SIGINT/SIGTERM)."""
    import uvicorn

    from app.api.app import create_app
    from app.api.logs import configure_logging
    from app.store.migrate import current_revision, head_revision, upgrade

    configure_logging(log_level.upper())
    settings.data_dir.mkdir(parents=True, exist_ok=True)
    if settings.is_sqlite:
        revision = upgrade(settings.url)
        log.info("database schema at revision %s", revision)
    else:
        current, head = current_revision(settings.url), head_revision()
        if current != head:
            raise LandliftError(
                f"database schema is at revision {current}, the code needs {head}: "
                "run `landlift db upgrade` first",
                code="schema_out_of_date",
            )
    app = create_app(settings)
    stop = threading.Event()
    worker: threading.Thread | None = None
    if with_worker:
        from app.jobs.worker import start_worker_thread

        worker = start_worker_thread(settings, stop_event=stop, name=f"serve-{port}")
        log.info("in-process worker started")
    config = uvicorn.Config(
        app,
        host=host,
        port=port,
        log_config=None,
        access_log=False,
        log_level=log_level,
        timeout_graceful_shutdown=10,
    )
    server = uvicorn.Server(config)
    log.info("serving on http://%s:%d", host, port)
    try:
        server.run()
    finally:
        stop.set()
        if worker is not None:
            worker.join(timeout=max(30.0, settings.lease_seconds))
            if worker.is_alive():
                log.warning("worker thread did not stop in time; its job returns to the queue")
