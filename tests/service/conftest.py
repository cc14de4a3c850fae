"""Shared fixtures for the service tests (store, jobs, worker and api).

``database_url`` is parametrised over ``sqlite`` and ``postgresql``: every test that uses it (or a
fixture built on it: ``settings``, ``db``, ``store_env`` ...) runs once per backend. On PostgreSQL
(127.0.0.1:5432, user postgres, no password) each test gets a fresh database named
``landlift_t_<session hex>_<n>``, created from the ``test`` database's server and dropped (WITH
FORCE, so killed workers' connections do not keep it alive) when the test ends; a session
finaliser drops anything left with the session prefix. The ``test`` database itself is only used
to issue CREATE/DROP DATABASE. PostgreSQL being down is a test failure, not a skip.

``LANDLIFT_TEST_BACKENDS=sqlite`` (or ``postgresql``) narrows the parametrisation for a quick
local run; CI leaves it unset.
"""

from __future__ import annotations

import itertools
import os
import secrets
import sys
from collections.abc import Callable, Iterator
from pathlib import Path

import psycopg
import pytest

from app.settings import Settings
from app.store import Store, dataset_rows, token_rows
from app.store.artifacts import ArtifactStore
from app.store.db import Database
from app.store.migrate import upgrade

PG_HOST = os.environ.get("LANDLIFT_TEST_PG_HOST", "127.0.0.1")
PG_PORT = int(os.environ.get("LANDLIFT_TEST_PG_PORT", "5432"))
PG_USER = os.environ.get("LANDLIFT_TEST_PG_USER", "postgres")
PG_ADMIN_DB = os.environ.get("LANDLIFT_TEST_PG_ADMIN_DB", "test")

REPO_ROOT = Path(__file__).resolve().parents[2]
SAMPLE_DIR = REPO_ROOT / "sample_data"
SAMPLE_FILES = ("realistic.nc", "scrambled.nc", "observations.nc", "land_state.nc")

_SESSION_PREFIX = f"landlift_t_{secrets.token_hex(4)}"
_counter = itertools.count(1)


def _backends() -> list[str]:
    wanted = os.environ.get("LANDLIFT_TEST_BACKENDS", "sqlite,postgresql")
    names = [b.strip() for b in wanted.split(",") if b.strip()]
    bad = [b for b in names if b not in ("sqlite", "postgresql")]
    if bad:
        raise ValueError(f"LANDLIFT_TEST_BACKENDS {bad!r}: use sqlite and/or postgresql")
    return names


def _pg_admin() -> psycopg.Connection:
    return psycopg.connect(
        host=PG_HOST, port=PG_PORT, user=PG_USER, dbname=PG_ADMIN_DB, autocommit=True,
        connect_timeout=10,
    )


def pg_url(dbname: str) -> str:
    return f"postgresql+psycopg://{PG_USER}@{PG_HOST}:{PG_PORT}/{dbname}"


def _drop_pg_database(name: str) -> None:
    with _pg_admin() as conn:
        conn.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


@pytest.fixture(scope="session", autouse=True)
def _drop_session_databases() -> Iterator[None]:
    yield
    if "postgresql" not in _backends():
        return
    try:
        with _pg_admin() as conn:
            rows = conn.execute(
                "SELECT datname FROM pg_database WHERE datname LIKE %s",
                (_SESSION_PREFIX + "%",),
            ).fetchall()
        for (name,) in rows:
            _drop_pg_database(name)
    except psycopg.OperationalError:
        pass


@pytest.fixture(params=_backends())
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    """A fresh, empty (not migrated) database URL: SQLite file or PostgreSQL database."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'db' / 'landlift.db'}"
        return
    name = f"{_SESSION_PREFIX}_{next(_counter)}"
    try:
        with _pg_admin() as conn:
            conn.execute(f'CREATE DATABASE "{name}"')
    except psycopg.OperationalError as exc:  # pragma: no cover - environment problem
        pytest.fail(f"PostgreSQL at {PG_HOST}:{PG_PORT} is not reachable: {exc}")
    try:
        yield pg_url(name)
    finally:
        _drop_pg_database(name)


@pytest.fixture
def backend(database_url: str) -> str:
    """'sqlite' or 'postgresql' for the current parametrisation."""
    return "sqlite" if database_url.startswith("sqlite") else "postgresql"


@pytest.fixture
def settings(tmp_path: Path, database_url: str) -> Settings:
    """Settings on a private data dir with short leases (fast retry tests)."""
    roots = tmp_path / "roots"
    roots.mkdir(exist_ok=True)
    return Settings(
        data_dir=tmp_path / "data",
        database_url=database_url,
        data_roots=[roots],
        lease_seconds=6.0,
        heartbeat_seconds=1.0,
        poll_seconds=0.1,
        retry_delay_seconds=0.2,
        max_attempts=3,
        validation_timeout_seconds=60.0,
    )


@pytest.fixture
def settings_env(settings: Settings) -> dict[str, str]:
    """The environment that gives a subprocess (server, worker, CLI) the same settings."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("LANDLIFT_")}
    env.update(
        {
            "LANDLIFT_DATA_DIR": str(settings.data_dir),
            "LANDLIFT_DATABASE_URL": settings.url,
            "LANDLIFT_DATA_ROOTS": os.pathsep.join(str(p) for p in settings.data_roots),
            "LANDLIFT_PUBLIC_READ": "true" if settings.public_read else "false",
            "LANDLIFT_MAX_UPLOAD_BYTES": str(settings.max_upload_bytes),
            "LANDLIFT_LEASE_SECONDS": str(settings.lease_seconds),
            "LANDLIFT_HEARTBEAT_SECONDS": str(settings.heartbeat_seconds),
            "LANDLIFT_POLL_SECONDS": str(settings.poll_seconds),
            "LANDLIFT_RETRY_DELAY_SECONDS": str(settings.retry_delay_seconds),
            "LANDLIFT_MAX_ATTEMPTS": str(settings.max_attempts),
            "LANDLIFT_VALIDATION_TIMEOUT_SECONDS": str(settings.validation_timeout_seconds),
            "LANDLIFT_VALIDATION_MEMORY_BYTES": str(settings.validation_memory_bytes),
            "PYTHONPATH": os.pathsep.join(
                [str(REPO_ROOT), *filter(None, [os.environ.get("PYTHONPATH")])]
            ),
        }
    )
    if settings.memory_budget is not None:
        env["LANDLIFT_MEMORY_BUDGET"] = str(settings.memory_budget)
    if settings.dask_scheduler:
        env["LANDLIFT_DASK_SCHEDULER"] = settings.dask_scheduler
    return env


@pytest.fixture
def db(settings: Settings) -> Iterator[Database]:
    """The migrated database of ``settings`` (alembic upgrade head)."""
    upgrade(settings.url)
    database = Database(settings.url)
    try:
        yield database
    finally:
        database.dispose()


@pytest.fixture
def artifact_store(settings: Settings) -> ArtifactStore:
    return ArtifactStore(settings.artifacts_dir)


@pytest.fixture
def store(db: Database, settings: Settings, artifact_store: ArtifactStore) -> Store:
    """Migrated database + artifact store of ``settings`` (what the API and workers use)."""
    return Store(db=db, artifacts=artifact_store, settings=settings)


@pytest.fixture
def make_token(store: Store) -> Callable[..., str]:
    """``make_token(scope="read", name=...)`` creates a token in the database, returns it."""

    def _make(scope: str = "read", name: str | None = None) -> str:
        token, _info = token_rows.create_token(store, name=name or f"test-{scope}", scope=scope)
        return token

    return _make


@pytest.fixture(scope="session")
def sample_files() -> dict[str, Path]:
    """The sample scenario files (role name -> path); a failure, not a skip, when missing."""
    paths = {name.removesuffix(".nc"): SAMPLE_DIR / name for name in SAMPLE_FILES}
    missing = [str(p) for p in paths.values() if not p.is_file()]
    if missing:
        pytest.fail(f"sample scenario files missing: {missing} (generate them in sample_data/)")
    return paths


@pytest.fixture(scope="session")
def python_exe() -> str:
    return sys.executable


@pytest.fixture
def ingest_sample(store: Store, sample_files: dict[str, Path]) -> Callable[..., dict[str, str]]:
    """``ingest_sample()`` stores the sample files as datasets (artifact + describe_dataset, the
    same steps as an upload) and returns ``{slot: dataset_id}`` for create_experiment."""
    from app.cube.sources import describe_dataset

    roles = {
        "realistic": "hindcast",
        "scrambled": "hindcast",
        "observations": "observations",
        "land_state": "land_state",
    }

    def _ingest(slots: tuple[str, ...] = tuple(roles)) -> dict[str, str]:
        ids: dict[str, str] = {}
        for slot in slots:
            ref = store.artifacts.put_file(sample_files[slot], media_type="application/x-netcdf")
            description = describe_dataset(ref.path, role=roles[slot])
            ds, _created = dataset_rows.create_dataset(
                store,
                role=roles[slot],
                sha256=ref.sha256,
                size_bytes=ref.size_bytes,
                description=description,
                artifact=ref,
                filename=sample_files[slot].name,
            )
            ids[slot] = ds["id"]
        return ids

    return _ingest


@pytest.fixture
def check_artifacts(store: Store) -> Callable[[], int]:
    """``check_artifacts()`` asserts that every artifact row points at a whole file (present,
    right size, SHA-256 of its content equal to its name) and that every row referring to an
    artifact has one; returns the number of artifacts checked."""
    from sqlalchemy import select

    from app.store.models import Artifact, CachedArtifact, Comparison, Dataset, ResultFile

    def _check() -> int:
        with store.db.read() as session:
            rows = [(a.sha256, a.size_bytes) for a in session.scalars(select(Artifact))]
            known = {sha for sha, _ in rows}
            refs = [
                *session.scalars(select(ResultFile.artifact_sha256)),
                *session.scalars(select(CachedArtifact.artifact_sha256)),
                *session.scalars(
                    select(Dataset.artifact_sha256).where(Dataset.artifact_sha256.is_not(None))
                ),
                *session.scalars(
                    select(Comparison.result_sha256).where(Comparison.result_sha256.is_not(None))
                ),
            ]
        assert set(refs) <= known
        for sha, size in rows:
            path = store.artifacts.path_for(sha)
            assert path.is_file(), f"artifact {sha} has a row but no file"
            assert path.stat().st_size == size, f"artifact {sha} is partial"
            assert store.artifacts.verify(sha), f"artifact {sha} does not hash to its name"
        return len(rows)

    return _check
