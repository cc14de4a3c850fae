"""Alembic environment for landlift (run through app.store.migrate.upgrade or `alembic`)."""

from __future__ import annotations

from alembic import context
from sqlalchemy import text

from app.store.db import Database
from app.store.models import Base

# a constant key for PostgreSQL's advisory lock, so concurrent upgrades (several API nodes
# starting at once) run one after the other
_ADVISORY_KEY = 7_340_112_911

config = context.config
target_metadata = Base.metadata


def _url() -> str:
    url = config.attributes.get("database_url") or config.get_main_option("sqlalchemy.url")
    if not url:
        from app.settings import Settings

        url = Settings().url
    return str(url)


def run_migrations_offline() -> None:
    context.configure(
        url=_url(),
        target_metadata=target_metadata,
        literal_binds=True,
        render_as_batch=True,
        dialect_opts={"paramstyle": "named"},
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    db = Database(_url())
    try:
        # the write engine: BEGIN IMMEDIATE on SQLite, so two upgraders queue instead of racing
        with db._write_engine.connect() as connection:
            context.configure(
                connection=connection,
                target_metadata=target_metadata,
                render_as_batch=db.is_sqlite,
                compare_type=True,
            )
            with context.begin_transaction():
                if db.is_postgresql:
                    connection.execute(
                        text("SELECT pg_advisory_xact_lock(:key)"), {"key": _ADVISORY_KEY}
                    )
                context.run_migrations()
    finally:
        db.dispose()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
