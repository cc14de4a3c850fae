"""Schema migrations: ``upgrade(database_url)`` brings a database to the newest revision.

The alembic scripts live at the repository root (``migrations/``, ``alembic.ini``); the server
calls :func:`upgrade` on start and ``landlift db upgrade`` calls it on demand. Running it on an
up-to-date database does nothing; concurrent runs are serialised (BEGIN IMMEDIATE on SQLite,
an advisory lock on PostgreSQL).
"""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory

from app.store.db import Database

REPO_ROOT = Path(__file__).resolve().parents[2]
MIGRATIONS_DIR = REPO_ROOT / "migrations"
ALEMBIC_INI = REPO_ROOT / "alembic.ini"


def alembic_config(database_url: str) -> Config:
    if not (MIGRATIONS_DIR / "env.py").is_file():
        raise RuntimeError(
            f"alembic migrations not found at {MIGRATIONS_DIR}: landlift must run from a "
            "checkout or an editable install"
        )
    config = Config(str(ALEMBIC_INI)) if ALEMBIC_INI.is_file() else Config()
    config.set_main_option("script_location", str(MIGRATIONS_DIR))
    config.attributes["database_url"] = database_url
    return config


def upgrade(database_url: str, *, revision: str = "head") -> str | None:
    """Upgrade the database at ``database_url`` to ``revision``; return the revision reached."""
    command.upgrade(alembic_config(database_url), revision)
    return current_revision(database_url)


def head_revision() -> str | None:
    return ScriptDirectory.from_config(alembic_config("sqlite:///unused.db")).get_current_head()


def current_revision(database_url: str) -> str | None:
    db = Database(database_url)
    try:
        with db.engine.connect() as conn:
            return MigrationContext.configure(conn).get_current_revision()
    finally:
        db.dispose()


def is_up_to_date(database_url: str) -> bool:
    return current_revision(database_url) == head_revision()
