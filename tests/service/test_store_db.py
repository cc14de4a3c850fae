"""Engine factory, SQLite connection settings and transactions, alembic migrations."""

from __future__ import annotations

import sqlite3
import subprocess
import sys
import threading
from pathlib import Path

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import insert, inspect, select, text
from sqlalchemy.exc import IntegrityError

from app.store.db import Database, make_engine
from app.store.migrate import current_revision, head_revision, is_up_to_date, upgrade
from app.store.models import Artifact, Base, ResultFile, utcnow

REPO_ROOT = Path(__file__).resolve().parents[2]


def test_upgrade_builds_the_model_schema(database_url: str) -> None:
    assert current_revision(database_url) is None
    assert upgrade(database_url) == head_revision()
    assert is_up_to_date(database_url)
    db = Database(database_url)
    try:
        with db.engine.connect() as conn:
            diffs = compare_metadata(
                MigrationContext.configure(conn, opts={"compare_type": True}), Base.metadata
            )
            tables = set(inspect(conn).get_table_names())
        # the migration scripts and the models agree (alembic's own comparison)
        assert diffs == []
        assert set(Base.metadata.tables) <= tables
    finally:
        db.dispose()
    # a second upgrade is a no-op
    assert upgrade(database_url) == head_revision()


def test_concurrent_upgrades_from_several_processes(database_url: str) -> None:
    code = "import sys; from app.store.migrate import upgrade; print(upgrade(sys.argv[1]))"
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", code, database_url],
            cwd=REPO_ROOT,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for _ in range(3)
    ]
    outputs = [p.communicate(timeout=120) for p in procs]
    for proc, (out, err) in zip(procs, outputs, strict=True):
        assert proc.returncode == 0, err
        assert out.strip() == head_revision()
    assert is_up_to_date(database_url)


def test_postgresql_tests_use_a_private_database(database_url: str, backend: str) -> None:
    if backend != "postgresql":
        assert database_url.startswith("sqlite:///")
        return
    db = Database(database_url)
    try:
        with db.engine.connect() as conn:
            name = conn.execute(text("SELECT current_database()")).scalar()
        assert str(name).startswith("landlift_t_")
    finally:
        db.dispose()


def test_foreign_keys_are_enforced(database_url: str) -> None:
    upgrade(database_url)
    db = Database(database_url)
    try:
        with pytest.raises(IntegrityError), db.write() as session:
            # a result row pointing at an artifact that was never recorded
            session.execute(
                insert(ResultFile).values(experiment_id="ex_none", name="x", artifact_sha256="0" * 64)
            )
    finally:
        db.dispose()


# ----------------------------------------------------------------------------- SQLite only


@pytest.fixture
def sqlite_db(tmp_path: Path) -> Database:
    url = f"sqlite:///{tmp_path / 'x' / 'landlift.db'}"
    upgrade(url)
    db = Database(url)
    yield db
    db.dispose()


def test_sqlite_pragmas_on_every_connection(sqlite_db: Database) -> None:
    seen: list[tuple[str, int, int, int]] = []

    def probe() -> None:
        with sqlite_db.engine.connect() as conn:
            seen.append(
                (
                    conn.exec_driver_sql("PRAGMA journal_mode").scalar(),
                    conn.exec_driver_sql("PRAGMA busy_timeout").scalar(),
                    conn.exec_driver_sql("PRAGMA foreign_keys").scalar(),
                    conn.exec_driver_sql("PRAGMA synchronous").scalar(),
                )
            )

    for _ in range(3):
        probe()
    worker = threading.Thread(target=probe)
    worker.start()
    worker.join()
    # SQLite documents synchronous NORMAL as 1 (https://www.sqlite.org/pragma.html#pragma_synchronous)
    assert seen == [("wal", 30000, 1, 1)] * 4


def _raw(path: str) -> sqlite3.Connection:
    # the standard library driver, outside SQLAlchemy, as an independent observer
    conn = sqlite3.connect(path, timeout=0, isolation_level=None)
    return conn


def test_sqlite_write_transaction_takes_the_write_lock_at_begin(sqlite_db: Database) -> None:
    path = sqlite_db.engine.url.database
    assert path is not None
    observer = _raw(path)
    try:
        with sqlite_db.write() as session:
            # nothing written yet: only BEGIN IMMEDIATE can explain the lock being held
            session.execute(select(Artifact)).all()
            with pytest.raises(sqlite3.OperationalError, match="locked"):
                observer.execute("BEGIN IMMEDIATE")
            # WAL: readers still read while the writer holds its lock
            assert observer.execute("SELECT count(*) FROM artifacts").fetchone() == (0,)
        observer.execute("BEGIN IMMEDIATE")
        observer.execute("ROLLBACK")
        with sqlite_db.read() as session:
            session.execute(select(Artifact)).all()
            # a read transaction is deferred: it does not block writers
            observer.execute("BEGIN IMMEDIATE")
            observer.execute("ROLLBACK")
    finally:
        observer.close()


def test_sqlite_read_transaction_is_a_snapshot(sqlite_db: Database) -> None:
    """pysqlite's legacy mode would not BEGIN before a SELECT; the recipe makes reads repeatable."""
    path = sqlite_db.engine.url.database
    assert path is not None
    other = _raw(path)
    try:
        with sqlite_db.read() as session:
            before = session.scalar(text("SELECT count(*) FROM artifacts"))
            other.execute(
                "INSERT INTO artifacts (sha256, size_bytes, media_type, created_at) "
                "VALUES (?, 1, 'x', ?)",
                ("a" * 64, utcnow().replace(tzinfo=None).isoformat(sep=" ")),
            )
            during = session.scalar(text("SELECT count(*) FROM artifacts"))
        with sqlite_db.read() as session:
            after = session.scalar(text("SELECT count(*) FROM artifacts"))
        assert (before, during, after) == (0, 0, 1)
    finally:
        other.close()


def test_sqlite_write_rolls_back_on_error(sqlite_db: Database) -> None:
    with pytest.raises(RuntimeError), sqlite_db.write() as session:
        session.add(Artifact(sha256="b" * 64, size_bytes=1, media_type="x", created_at=utcnow()))
        session.flush()
        raise RuntimeError("boom")
    with sqlite_db.read() as session:
        assert session.scalar(text("SELECT count(*) FROM artifacts")) == 0


@pytest.mark.parametrize("url", ["sqlite://", "sqlite:///:memory:", "mysql://u@h/d"])
def test_unsupported_urls_are_refused(url: str) -> None:
    with pytest.raises(ValueError, match="database_url"):
        make_engine(url)
