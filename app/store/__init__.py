"""Storage layer: the database (SQLAlchemy 2) and the content-addressed artifact store.

``Store.open(settings)`` gives the pair the API, the workers and the CLI share. The functions on
it are grouped by aggregate: :mod:`~app.store.dataset_rows`, :mod:`~app.store.experiment_rows`,
:mod:`~app.store.comparison_rows`, :mod:`~app.store.job_rows` (reads, and the queued job an experiment
or comparison creates; the queue's owner-checked writes are :mod:`app.jobs.queue`),
:mod:`~app.store.token_rows` and :mod:`~app.store.derived_files` (cached renderings of results).
"""

from __future__ import annotations

from dataclasses import dataclass

from app.settings import Settings
from app.store.artifacts import ArtifactRef, ArtifactStore, ArtifactTooLarge
from app.store.db import Database

__all__ = ["ArtifactRef", "ArtifactStore", "ArtifactTooLarge", "Database", "Store"]


@dataclass
class Store:
    """A database plus an artifact store (and the settings they came from)."""

    db: Database
    artifacts: ArtifactStore
    settings: Settings

    @classmethod
    def open(cls, settings: Settings, *, upgrade_schema: bool = False) -> Store:
        """Open the database and artifact store of ``settings``.

        ``upgrade_schema=True`` runs the alembic migrations first (what ``landlift serve`` does).
        """
        if upgrade_schema:
            from app.store.migrate import upgrade

            upgrade(settings.url)
        settings.data_dir.mkdir(parents=True, exist_ok=True)
        return cls(Database(settings.url), ArtifactStore(settings.artifacts_dir), settings)

    def close(self) -> None:
        self.db.dispose()
