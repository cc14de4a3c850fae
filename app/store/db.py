"""Database engine factory and transaction helpers.

SQLite (the embedded default) gets, on every new DBAPI connection: WAL journal, a busy timeout,
foreign keys on, ``synchronous=NORMAL``. pysqlite's own transaction handling is switched off
(``isolation_level = None``) and SQLAlchemy emits ``BEGIN`` itself from the ``begin`` event:
``BEGIN IMMEDIATE`` for write transactions (so two writers queue on the busy timeout instead of
failing on a lock upgrade), plain deferred ``BEGIN`` for reads. This is the recipe documented in
SQLAlchemy's SQLite dialect notes ("Using SQLAlchemy to emit BEGIN in lieu of SQLite's
transaction control").

PostgreSQL is used through its URL (``postgresql+psycopg://...``) with the default READ COMMITTED
isolation; the job claim uses ``FOR UPDATE SKIP LOCKED`` there.

Use :meth:`Database.write` for every transaction that writes and :meth:`Database.read` for the
rest.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from sqlalchemy import Engine, create_engine, event, text
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker
from sqlalchemy.pool import QueuePool

#: execution option that marks a connection's transactions as writes (BEGIN IMMEDIATE on SQLite)
WRITE_OPTION = "landlift_write"

DEFAULT_BUSY_TIMEOUT_MS = 30_000


def is_sqlite_url(url: str) -> bool:
    return make_url(url).get_backend_name() == "sqlite"


def make_engine(url: str, *, busy_timeout_ms: int = DEFAULT_BUSY_TIMEOUT_MS, echo: bool = False,
                pool_size: int = 5) -> Engine:
    """Create the SQLAlchemy engine for ``url`` with landlift's connection settings.

    On SQLite the database file's parent folder is created if missing. ``:memory:`` databases
    are refused: several connections must see the same data.
    """
    parsed = make_url(url)
    if parsed.get_backend_name() == "sqlite":
        database = parsed.database or ""
        if database in ("", ":memory:") or database.startswith("file:"):
            raise ValueError(
                f"database_url {url!r}: an SQLite database must be a file path "
                "(sqlite:///path/to/landlift.db)"
            )
        from pathlib import Path

        Path(database).expanduser().resolve().parent.mkdir(parents=True, exist_ok=True)
        engine = create_engine(
            url,
            echo=echo,
            # pooled connections (each used by one thread at a time)
            poolclass=QueuePool, pool_size=8, max_overflow=24,
            connect_args={"timeout": busy_timeout_ms / 1000.0, "check_same_thread": False},
        )
        _install_sqlite_hooks(engine, busy_timeout_ms=busy_timeout_ms)
        return engine
    if parsed.get_backend_name() == "postgresql":
        return create_engine(
            url, echo=echo, pool_pre_ping=True, pool_size=pool_size, max_overflow=10
        )
    raise ValueError(
        f"database_url {url!r}: backend {parsed.get_backend_name()!r} is not supported; "
        "use sqlite or postgresql"
    )


def _install_sqlite_hooks(engine: Engine, *, busy_timeout_ms: int) -> None:
    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection: Any, _record: Any) -> None:
        # switch pysqlite's implicit BEGIN off; SQLAlchemy emits BEGIN in _on_begin
        dbapi_connection.isolation_level = None
        cursor = dbapi_connection.cursor()
        try:
            cursor.execute(f"PRAGMA busy_timeout = {int(busy_timeout_ms)}")
            cursor.execute("PRAGMA journal_mode = WAL")
            cursor.execute("PRAGMA foreign_keys = ON")
            cursor.execute("PRAGMA synchronous = NORMAL")
        finally:
            cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Any) -> None:
        if conn.get_execution_options().get(WRITE_OPTION):
            conn.exec_driver_sql("BEGIN IMMEDIATE")
        else:
            conn.exec_driver_sql("BEGIN")


class Database:
    """An engine plus read and write session factories.

    ``with db.write() as session:`` opens a write transaction (``BEGIN IMMEDIATE`` on SQLite) that
    commits when the block ends and rolls back on an exception; ``with db.read() as session:``
    opens a read transaction that is always rolled back.
    """

    def __init__(self, url: str, *, busy_timeout_ms: int = DEFAULT_BUSY_TIMEOUT_MS,
                 echo: bool = False) -> None:
        self.url = url
        self.engine = make_engine(url, busy_timeout_ms=busy_timeout_ms, echo=echo)
        self.is_sqlite = self.engine.dialect.name == "sqlite"
        self.is_postgresql = self.engine.dialect.name == "postgresql"
        self._write_engine = self.engine.execution_options(**{WRITE_OPTION: True})
        self._read_sessions = sessionmaker(bind=self.engine, expire_on_commit=False)
        self._write_sessions = sessionmaker(bind=self._write_engine, expire_on_commit=False)

    @contextmanager
    def write(self) -> Iterator[Session]:
        session = self._write_sessions()
        try:
            with session.begin():
                yield session
        finally:
            session.close()

    @contextmanager
    def read(self) -> Iterator[Session]:
        session = self._read_sessions()
        try:
            yield session
        finally:
            session.rollback()
            session.close()

    def ping(self) -> bool:
        """True when a trivial query succeeds (for ``/healthz``)."""
        with self.engine.connect() as conn:
            return conn.execute(text("SELECT 1")).scalar() == 1

    def dispose(self) -> None:
        self.engine.dispose()

    def __repr__(self) -> str:
        return f"Database({make_url(self.url).render_as_string(hide_password=True)!r})"

