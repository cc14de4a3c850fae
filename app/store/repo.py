"""The storage functions the API, the workers and the CLI call.

Every function takes a :class:`app.store.Store` first and returns plain JSON-able dicts (ISO 8601
UTC timestamps with a ``Z``). Unknown ids raise :class:`app.errors.NotFoundError`; bad requests
raise :class:`app.errors.ParameterError`; reading the result of an unfinished experiment raises
:class:`ResultNotReady` (HTTP 409). Writes run in one transaction each (``BEGIN IMMEDIATE`` on
SQLite); an experiment and its job are created in the same transaction, and a row points at an
artifact only after the artifact is whole in the store (:func:`record_artifact` checks it).

The signatures are listed at the top of /work/briefs/SERVICE_API.md.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import secrets
import threading
from collections import OrderedDict
from collections.abc import Mapping
from datetime import datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sqlalchemy import func, select
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from app.errors import LandliftError, NotFoundError, ParameterError
from app.store import Store
from app.store.artifacts import ArtifactRef
from app.store.models import (
    DATASET_SOURCES,
    JOB_STATES,
    TOKEN_SCOPES,
    Artifact,
    CachedArtifact,
    Comparison,
    Dataset,
    Experiment,
    Job,
    JobAttempt,
    ResultFile,
    Token,
    new_id,
    utcnow,
)

if TYPE_CHECKING:
    from app.results.result import ScoreResult

#: the slots of an experiment and the dataset role each one needs
SLOT_ROLES: dict[str, str] = {
    "realistic": "hindcast",
    "scrambled": "hindcast",
    "observations": "observations",
    "land_state": "land_state",
}
#: the files of a score result (ScoreResult.save / ScoreResult.load names)
RESULT_FILES = ("skill.json", "maps.nc", "anomalies.nc", "result.json")
MEDIA_TYPES = {
    ".json": "application/json",
    ".nc": "application/x-netcdf",
    ".png": "image/png",
    ".csv": "text/csv",
}
TOKEN_PREFIX = "ll_"
_SCOPE_RANK = {scope: rank for rank, scope in enumerate(TOKEN_SCOPES)}
_TOUCH_EVERY = timedelta(seconds=60)


class ResultNotReady(LandliftError):
    """The experiment (or comparison) exists but its job has not finished successfully."""

    code = "not_ready"
    http_status = 409


class ConflictError(LandliftError):
    """The request conflicts with stored state (e.g. same bytes posted with another role)."""

    code = "conflict"
    http_status = 409


# --------------------------------------------------------------------------- helpers


def iso(value: datetime | None) -> str | None:
    if value is None:
        return None
    return value.isoformat().replace("+00:00", "Z")


def media_type_for(name: str) -> str:
    return MEDIA_TYPES.get(Path(name).suffix.lower(), "application/octet-stream")


def _insert_ignore(session: Session, model: type[Any], values: dict[str, Any], key: str) -> None:
    dialect = session.get_bind().dialect.name
    insert = pg_insert if dialect == "postgresql" else sqlite_insert
    session.execute(insert(model).values(**values).on_conflict_do_nothing(index_elements=[key]))


def record_artifact(session: Session, ref: ArtifactRef) -> None:
    """Insert the artifact row for a whole file (inside the caller's write transaction).

    Refuses a ref whose file is missing or has another size: a row never points at a missing or
    partial file.
    """
    path = Path(ref.path)
    if not path.is_file():
        raise RuntimeError(f"artifact {ref.sha256} is not in the store at {path}")
    size = path.stat().st_size
    if size != ref.size_bytes:
        raise RuntimeError(
            f"artifact {ref.sha256} at {path} has {size} bytes, expected {ref.size_bytes}"
        )
    _insert_ignore(
        session,
        Artifact,
        {
            "sha256": ref.sha256,
            "size_bytes": ref.size_bytes,
            "media_type": ref.media_type,
            "created_at": utcnow(),
        },
        "sha256",
    )


# --------------------------------------------------------------------------- datasets


def _dataset_dict(row: Dataset) -> dict[str, Any]:
    out: dict[str, Any] = dict(row.description or {})
    out.update(
        {
            "id": row.id,
            "role": row.role,
            "sha256": row.sha256,
            "source": row.source,
            "uri": row.uri,
            "filename": row.filename,
            "size_bytes": row.size_bytes,
            "created_at": iso(row.created_at),
        }
    )
    return out


def create_dataset(
    store: Store,
    *,
    role: str,
    sha256: str,
    size_bytes: int,
    description: Mapping[str, Any],
    source: str = "upload",
    artifact: ArtifactRef | None = None,
    uri: str | None = None,
    filename: str | None = None,
) -> tuple[dict[str, Any], bool]:
    """Create a dataset, or return the existing one with the same sha256.

    Returns ``(dataset, created)``. An upload (``source="upload"``) needs the committed
    ``artifact``; a registration (``source="register"``) needs ``uri``. The same bytes posted
    with another role raise :class:`ConflictError`.
    """
    if role not in SLOT_ROLES.values():
        raise ParameterError(
            f"role {role!r} is not known: use one of {sorted(set(SLOT_ROLES.values()))}",
            role=role,
        )
    if source not in DATASET_SOURCES:
        raise ParameterError(f"source {source!r}: use one of {list(DATASET_SOURCES)}")
    if source == "upload" and artifact is None:
        raise ParameterError("an uploaded dataset needs its stored artifact")
    if source == "register" and not uri:
        raise ParameterError("a registered dataset needs its uri")
    if artifact is not None and artifact.sha256 != sha256:
        raise ParameterError(f"artifact {artifact.sha256} does not match sha256 {sha256}")
    existing = find_dataset(store, sha256)
    if existing is not None:
        _check_same_role(existing, role)
        return existing, False
    try:
        with store.db.write() as session:
            if artifact is not None:
                record_artifact(session, artifact)
            row = Dataset(
                id=new_id("ds"),
                sha256=sha256,
                role=role,
                source=source,
                artifact_sha256=artifact.sha256 if artifact is not None else None,
                uri=uri,
                filename=filename,
                size_bytes=size_bytes,
                description=dict(description),
                created_at=utcnow(),
            )
            session.add(row)
            session.flush()
            result = _dataset_dict(row)
        return result, True
    except IntegrityError:
        # a concurrent request stored the same bytes first
        existing = find_dataset(store, sha256)
        if existing is None:
            raise
        _check_same_role(existing, role)
        return existing, False


def _check_same_role(existing: dict[str, Any], role: str) -> None:
    if existing["role"] != role:
        raise ConflictError(
            f"these bytes are already dataset {existing['id']} with role {existing['role']!r}, "
            f"not {role!r}",
            dataset=existing["id"],
            role=existing["role"],
        )


def find_dataset(store: Store, sha256: str) -> dict[str, Any] | None:
    """The dataset with this content hash, or None."""
    with store.db.read() as session:
        row = session.scalars(select(Dataset).where(Dataset.sha256 == sha256)).first()
        return _dataset_dict(row) if row is not None else None


def get_dataset(store: Store, dataset_id: str) -> dict[str, Any]:
    with store.db.read() as session:
        row = session.get(Dataset, dataset_id)
        if row is None:
            raise NotFoundError(f"dataset {dataset_id!r} does not exist", dataset=dataset_id)
        return _dataset_dict(row)


def _row_path(store: Store, row: Dataset) -> Path:
    if row.artifact_sha256 is not None:
        return store.artifacts.path(row.artifact_sha256)
    assert row.uri is not None
    return Path(row.uri)


def dataset_path(store: Store, dataset_id: str) -> Path:
    """Where the dataset's data is: its artifact file, or the registered file / Zarr store."""
    with store.db.read() as session:
        row = session.get(Dataset, dataset_id)
        if row is None:
            raise NotFoundError(f"dataset {dataset_id!r} does not exist", dataset=dataset_id)
        return _row_path(store, row)


# --------------------------------------------------------------------------- jobs


def _job_dict(row: Job) -> dict[str, Any]:
    payload = row.payload or {}
    return {
        "id": row.id,
        "kind": row.kind,
        "status": row.status,
        "progress": float(row.progress),
        "message": row.message,
        "error": row.error,
        "attempts": row.attempts,
        "max_attempts": row.max_attempts,
        "experiment_id": payload.get("experiment_id"),
        "comparison_id": payload.get("comparison_id"),
        "created_at": iso(row.created_at),
        "started_at": iso(row.started_at),
        "finished_at": iso(row.finished_at),
    }


def new_job(
    session: Session, *, kind: str, payload: dict[str, Any], max_attempts: int
) -> Job:
    """Add a queued job inside the caller's write transaction (so it commits with its subject)."""
    from app.store.models import JOB_KINDS

    if kind not in JOB_KINDS:
        raise ParameterError(f"job kind {kind!r} is not known: use one of {list(JOB_KINDS)}")
    if max_attempts < 1:
        raise ParameterError(f"max_attempts {max_attempts} must be >= 1")
    now = utcnow()
    job = Job(
        id=new_id("job"),
        kind=kind,
        status="queued",
        payload=payload,
        progress=0.0,
        attempts=0,
        max_attempts=max_attempts,
        available_at=now,
        created_at=now,
    )
    session.add(job)
    session.flush()
    return job


def get_job(store: Store, job_id: str) -> dict[str, Any]:
    """``{"id", "kind", "status", "progress", "message", "error", "attempts", ...}``."""
    with store.db.read() as session:
        row = session.get(Job, job_id)
        if row is None:
            raise NotFoundError(f"job {job_id!r} does not exist", job=job_id)
        return _job_dict(row)


def job_counts(store: Store) -> dict[str, int]:
    """Number of jobs in each state (every state present, zero when none)."""
    counts = dict.fromkeys(JOB_STATES, 0)
    with store.db.read() as session:
        for status, n in session.execute(select(Job.status, func.count()).group_by(Job.status)):
            counts[status] = int(n)
    return counts


def job_durations(store: Store, *, limit: int = 1000) -> list[dict[str, Any]]:
    """The most recently finished jobs: ``[{"id", "kind", "status", "seconds"}]``, newest first."""
    with store.db.read() as session:
        rows = session.scalars(
            select(Job)
            .where(Job.finished_at.is_not(None), Job.started_at.is_not(None))
            .order_by(Job.finished_at.desc())
            .limit(limit)
        ).all()
        return [
            {
                "id": r.id,
                "kind": r.kind,
                "status": r.status,
                "seconds": (r.finished_at - r.started_at).total_seconds(),  # type: ignore[operator]
            }
            for r in rows
        ]


def job_attempts(store: Store, job_id: str) -> list[dict[str, Any]]:
    """The claim history of a job: one entry per attempt, oldest first."""
    with store.db.read() as session:
        if session.get(Job, job_id) is None:
            raise NotFoundError(f"job {job_id!r} does not exist", job=job_id)
        rows = session.scalars(
            select(JobAttempt).where(JobAttempt.job_id == job_id).order_by(JobAttempt.attempt)
        ).all()
        return [
            {
                "attempt": r.attempt,
                "worker": r.worker,
                "owner_token": r.owner_token,
                "claimed_at": r.claimed_at,
                "lease_expires_at": r.lease_expires_at,
                "ended_at": r.ended_at,
                "outcome": r.outcome,
                "error": r.error,
            }
            for r in rows
        ]


# --------------------------------------------------------------------------- experiments


def _experiment_dict(row: Experiment, job: Job) -> dict[str, Any]:
    datasets = {
        "realistic": row.realistic_id,
        "scrambled": row.scrambled_id,
        "observations": row.observations_id,
        "land_state": row.land_state_id,
    }
    return {
        "id": row.id,
        "name": row.name,
        "variable": row.variable,
        "status": job.status,
        "job": {
            "id": job.id,
            "status": job.status,
            "progress": float(job.progress),
            "message": job.message,
            "error": job.error,
        },
        "datasets": datasets,
        "parameters": row.parameters,
        "options": row.options,
        "provenance": row.provenance,
        "result_digest": row.result_digest,
        "created_at": iso(row.created_at),
        "finished_at": iso(row.finished_at),
    }


def create_experiment(
    store: Store,
    *,
    name: str,
    realistic: str,
    scrambled: str,
    observations: str,
    land_state: str | None = None,
    options: Mapping[str, Any],
    parameters: Mapping[str, Any] | None = None,
    max_attempts: int | None = None,
) -> dict[str, Any]:
    """Create an experiment and queue its ``score`` job in one transaction.

    ``realistic``/``scrambled``/``observations``/``land_state`` are dataset ids; each must exist
    (NotFoundError) and have the role of its slot (ParameterError). ``options`` is
    ``ScoreOptions.to_dict()`` (already validated by the caller); ``parameters`` is the request as
    the client sent it (shown back by GET). The job payload carries the datasets' paths and the
    options. Returns the experiment dict (with ``job``).
    """
    if not name or not name.strip():
        raise ParameterError("experiment name must not be empty", name=name)
    ids = {
        "realistic": realistic,
        "scrambled": scrambled,
        "observations": observations,
        "land_state": land_state,
    }
    attempts = max_attempts if max_attempts is not None else store.settings.max_attempts
    with store.db.write() as session:
        inputs: dict[str, Any] = {}
        provenance_inputs: dict[str, Any] = {}
        rows: dict[str, Dataset] = {}
        for slot, dataset_id in ids.items():
            if dataset_id is None:
                continue
            row = session.get(Dataset, dataset_id)
            if row is None:
                raise NotFoundError(
                    f"{slot} dataset {dataset_id!r} does not exist", slot=slot, dataset=dataset_id
                )
            if row.role != SLOT_ROLES[slot]:
                raise ParameterError(
                    f"{slot} dataset {dataset_id!r} has role {row.role!r}; the {slot} slot needs "
                    f"a {SLOT_ROLES[slot]!r} dataset",
                    slot=slot,
                    dataset=dataset_id,
                    role=row.role,
                    expected=SLOT_ROLES[slot],
                )
            rows[slot] = row
            inputs[slot] = {
                "dataset_id": row.id,
                "path": str(_row_path(store, row)),
                "sha256": row.sha256,
            }
            provenance_inputs[slot] = {"dataset_id": row.id, "sha256": row.sha256}
        variable = options.get("variable") or rows["realistic"].description.get("variable")
        experiment_id = new_id("ex")
        job = new_job(
            session,
            kind="score",
            payload={"experiment_id": experiment_id, "inputs": inputs, "options": dict(options)},
            max_attempts=attempts,
        )
        experiment = Experiment(
            id=experiment_id,
            name=name.strip(),
            variable=variable,
            realistic_id=realistic,
            scrambled_id=scrambled,
            observations_id=observations,
            land_state_id=land_state,
            options=dict(options),
            parameters=dict(parameters or {}),
            provenance={
                "inputs": provenance_inputs,
                "seed": options.get("seed"),
                "code_version": _code_version(),
            },
            job_id=job.id,
            created_at=utcnow(),
        )
        session.add(experiment)
        session.flush()
        return _experiment_dict(experiment, job)


def _code_version() -> str:
    try:
        from importlib.metadata import version

        return version("landlift")
    except Exception:  # pragma: no cover - not installed
        return "unknown"


def get_experiment(store: Store, experiment_id: str) -> dict[str, Any]:
    """The experiment: parameters, options, status, job, provenance, timestamps."""
    with store.db.read() as session:
        row = session.get(Experiment, experiment_id)
        if row is None:
            raise NotFoundError(
                f"experiment {experiment_id!r} does not exist", experiment=experiment_id
            )
        job = session.get(Job, row.job_id)
        assert job is not None
        return _experiment_dict(row, job)


def list_experiments(
    store: Store,
    *,
    variable: str | None = None,
    name: str | None = None,
    status: str | None = None,
    limit: int = 50,
    offset: int = 0,
) -> dict[str, Any]:
    """``{"items": [...], "total", "limit", "offset"}``, newest first.

    ``name`` matches exactly; ``status`` is a job state. ``limit`` 1..500, ``offset`` >= 0.
    """
    if status is not None and status not in JOB_STATES:
        raise ParameterError(
            f"status {status!r} is not a job state: use one of {list(JOB_STATES)}", status=status
        )
    if not 1 <= limit <= 500:
        raise ParameterError(f"limit {limit} is out of range: allow 1..500", limit=limit)
    if offset < 0:
        raise ParameterError(f"offset {offset} must be >= 0", offset=offset)
    query = select(Experiment, Job).join(Job, Job.id == Experiment.job_id)
    if variable is not None:
        query = query.where(Experiment.variable == variable)
    if name is not None:
        query = query.where(Experiment.name == name)
    if status is not None:
        query = query.where(Job.status == status)
    with store.db.read() as session:
        total = session.scalar(select(func.count()).select_from(query.subquery())) or 0
        rows = session.execute(
            query.order_by(Experiment.created_at.desc(), Experiment.id.desc())
            .limit(limit)
            .offset(offset)
        ).all()
        items = [_experiment_dict(exp, job) for exp, job in rows]
    return {"items": items, "total": int(total), "limit": limit, "offset": offset}


def record_score_result(
    session: Session,
    *,
    experiment_id: str,
    files: Mapping[str, ArtifactRef],
    provenance: Mapping[str, Any] | None = None,
) -> str:
    """Record a finished score result inside the caller's (owner-checked) write transaction.

    Inserts the artifact rows (each file checked whole), the result_files rows and the result
    digest (the ETag identity: SHA-256 over the sorted ``name:sha256`` pairs); merges
    ``provenance`` into the experiment's. Returns the digest.
    """
    row = session.get(Experiment, experiment_id)
    if row is None:
        raise NotFoundError(f"experiment {experiment_id!r} does not exist")
    for name in sorted(files):
        ref = files[name]
        record_artifact(session, ref)
        existing = session.get(ResultFile, (experiment_id, name))
        if existing is None:
            session.add(
                ResultFile(experiment_id=experiment_id, name=name, artifact_sha256=ref.sha256)
            )
        else:
            existing.artifact_sha256 = ref.sha256
    digest = hashlib.sha256(
        "\n".join(f"{n}:{files[n].sha256}" for n in sorted(files)).encode()
    ).hexdigest()
    row.result_digest = digest
    merged = dict(row.provenance or {})
    if provenance:
        merged["result"] = dict(provenance)
    row.provenance = merged
    row.finished_at = utcnow()
    session.flush()
    return digest


def _require_done(session: Session, job_id: str, what: str) -> None:
    job = session.get(Job, job_id)
    assert job is not None
    if job.status != "done":
        raise ResultNotReady(
            f"{what} has no result yet: its job {job.id} is {job.status}",
            job=job.id,
            status=job.status,
            error=job.error,
        )


def result_files(store: Store, experiment_id: str) -> dict[str, Path]:
    """``{"skill.json": path, "maps.nc": path, ...}`` of a finished experiment.

    NotFoundError for an unknown experiment, ResultNotReady while its job is not done. The
    mapping is what ``ScoreResult.load`` takes.
    """
    with store.db.read() as session:
        row = session.get(Experiment, experiment_id)
        if row is None:
            raise NotFoundError(
                f"experiment {experiment_id!r} does not exist", experiment=experiment_id
            )
        _require_done(session, row.job_id, f"experiment {experiment_id}")
        files = session.scalars(
            select(ResultFile).where(ResultFile.experiment_id == experiment_id)
        ).all()
        return {f.name: store.artifacts.path(f.artifact_sha256) for f in files}


def result_digest(store: Store, experiment_id: str) -> str:
    """The identity of a finished experiment's result (use it for ETags)."""
    with store.db.read() as session:
        row = session.get(Experiment, experiment_id)
        if row is None:
            raise NotFoundError(
                f"experiment {experiment_id!r} does not exist", experiment=experiment_id
            )
        _require_done(session, row.job_id, f"experiment {experiment_id}")
        assert row.result_digest is not None
        return row.result_digest


_result_cache: OrderedDict[str, ScoreResult] = OrderedDict()
_result_lock = threading.Lock()
_RESULT_CACHE_SIZE = 8


def load_result(store: Store, experiment_id: str) -> ScoreResult:
    """The finished experiment's ``ScoreResult`` (a small in-process cache by result digest)."""
    from app.results.result import ScoreResult

    digest = result_digest(store, experiment_id)
    key = f"{store.artifacts.root}:{digest}"
    with _result_lock:
        cached = _result_cache.get(key)
        if cached is not None:
            _result_cache.move_to_end(key)
            return cached
    files = result_files(store, experiment_id)
    result = ScoreResult.load({name: path for name, path in files.items()})
    with _result_lock:
        _result_cache[key] = result
        while len(_result_cache) > _RESULT_CACHE_SIZE:
            _result_cache.popitem(last=False)
    return result


# --------------------------------------------------------------------------- comparisons


def _comparison_dict(store: Store, row: Comparison, job: Job) -> dict[str, Any]:
    result = None
    if row.result_sha256 is not None and job.status == "done":
        result = json.loads(store.artifacts.read_bytes(row.result_sha256))
    return {
        "id": row.id,
        "baseline": row.baseline_id,
        "candidate": row.candidate_id,
        "parameters": row.parameters,
        "status": job.status,
        "job": {
            "id": job.id,
            "status": job.status,
            "progress": float(job.progress),
            "message": job.message,
            "error": job.error,
        },
        "result": result,
        "result_sha256": row.result_sha256,
        "created_at": iso(row.created_at),
        "finished_at": iso(row.finished_at),
    }


def create_comparison(
    store: Store,
    *,
    baseline: str,
    candidate: str,
    resamples: int = 1000,
    seed: int = 1234,
    confidence: float = 0.95,
    region: str = "all",
    max_attempts: int | None = None,
) -> dict[str, Any]:
    """Queue a version comparison of two finished experiments (one transaction).

    NotFoundError for an unknown experiment, ResultNotReady when one is not done yet,
    ParameterError for resamples outside 1..10000, confidence outside (0, 1) or baseline ==
    candidate.
    """
    if baseline == candidate:
        raise ParameterError(
            f"baseline and candidate are the same experiment {baseline!r}", baseline=baseline
        )
    if not isinstance(resamples, int) or not 1 <= resamples <= 10000:
        raise ParameterError(f"resamples {resamples!r} is out of range: allow 1..10000")
    if not 0.0 < float(confidence) < 1.0:
        raise ParameterError(f"confidence {confidence!r} must be between 0 and 1")
    attempts = max_attempts if max_attempts is not None else store.settings.max_attempts
    with store.db.write() as session:
        found: list[tuple[str, Experiment]] = []
        for role, exp_id in (("baseline", baseline), ("candidate", candidate)):
            exp = session.get(Experiment, exp_id)
            if exp is None:
                raise NotFoundError(
                    f"{role} experiment {exp_id!r} does not exist", role=role, experiment=exp_id
                )
            found.append((role, exp))
        for role, exp in found:
            _require_done(session, exp.job_id, f"{role} experiment {exp.id}")
        comparison_id = new_id("cmp")
        parameters = {
            "resamples": resamples,
            "seed": seed,
            "confidence": float(confidence),
            "region": region,
        }
        job = new_job(
            session,
            kind="compare",
            payload={
                "comparison_id": comparison_id,
                "baseline": baseline,
                "candidate": candidate,
                **parameters,
            },
            max_attempts=attempts,
        )
        row = Comparison(
            id=comparison_id,
            baseline_id=baseline,
            candidate_id=candidate,
            parameters=parameters,
            job_id=job.id,
            created_at=utcnow(),
        )
        session.add(row)
        session.flush()
        return _comparison_dict(store, row, job)


def get_comparison(store: Store, comparison_id: str) -> dict[str, Any]:
    """The comparison with its job and, once done, its ``result`` (compare_results' dict)."""
    with store.db.read() as session:
        row = session.get(Comparison, comparison_id)
        if row is None:
            raise NotFoundError(
                f"comparison {comparison_id!r} does not exist", comparison=comparison_id
            )
        job = session.get(Job, row.job_id)
        assert job is not None
        return _comparison_dict(store, row, job)


def record_comparison_result(session: Session, *, comparison_id: str, ref: ArtifactRef) -> None:
    """Record a finished comparison's JSON artifact (inside the owner-checked transaction)."""
    row = session.get(Comparison, comparison_id)
    if row is None:
        raise NotFoundError(f"comparison {comparison_id!r} does not exist")
    record_artifact(session, ref)
    row.result_sha256 = ref.sha256
    row.finished_at = utcnow()
    session.flush()


# --------------------------------------------------------------------------- derived files


def get_cached(store: Store, key: str) -> tuple[Path, str] | None:
    """A derived file kept under ``key`` (e.g. a rendered PNG): ``(path, media_type)`` or None."""
    with store.db.read() as session:
        row = session.get(CachedArtifact, key)
        if row is None:
            return None
        path = store.artifacts.path_for(row.artifact_sha256)
        return (path, row.media_type) if path.is_file() else None


def put_cached(store: Store, key: str, data: bytes, *, media_type: str) -> Path:
    """Store ``data`` in the artifact store and remember it under ``key``; return its path.

    If another process stored the same key first, the first one wins (results are immutable, so
    both are the same picture).
    """
    if not key or len(key) > 400:
        raise ParameterError(f"cache key {key!r} must be 1..400 characters")
    ref = store.artifacts.put_bytes(data, media_type=media_type)
    with store.db.write() as session:
        record_artifact(session, ref)
        _insert_ignore(
            session,
            CachedArtifact,
            {
                "key": key,
                "artifact_sha256": ref.sha256,
                "media_type": media_type,
                "created_at": utcnow(),
            },
            "key",
        )
    found = get_cached(store, key)
    assert found is not None
    return found[0]


# --------------------------------------------------------------------------- tokens


def _hash_token(token: str) -> str:
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


def _token_dict(row: Token) -> dict[str, Any]:
    return {
        "id": row.id,
        "name": row.name,
        "scope": row.scope,
        "prefix": row.prefix,
        "created_at": iso(row.created_at),
        "last_used_at": iso(row.last_used_at),
        "revoked_at": iso(row.revoked_at),
    }


def create_token(store: Store, *, name: str, scope: str) -> tuple[str, dict[str, Any]]:
    """Create an API token; return ``(token, info)``. The token itself is not stored (only its
    SHA-256 and a display prefix), so this is the only time it is seen."""
    if scope not in TOKEN_SCOPES:
        raise ParameterError(
            f"scope {scope!r} is not known: use one of {list(TOKEN_SCOPES)}", scope=scope
        )
    if not name or not name.strip() or len(name) > 200:
        raise ParameterError(f"token name {name!r} must be 1..200 characters", name=name)
    token = TOKEN_PREFIX + secrets.token_urlsafe(32)
    row = Token(
        id=new_id("tok"),
        name=name.strip(),
        scope=scope,
        prefix=token[: len(TOKEN_PREFIX) + 8],
        token_hash=_hash_token(token),
        created_at=utcnow(),
    )
    with store.db.write() as session:
        session.add(row)
        session.flush()
        info = _token_dict(row)
    return token, info


def verify_token(store: Store, token: str | None) -> dict[str, Any] | None:
    """The token's ``{"id", "name", "scope", "prefix", ...}`` if it is valid and not revoked.

    Looks candidates up by display prefix and compares SHA-256 digests with
    ``hmac.compare_digest`` (constant time). Returns None for a missing, malformed, unknown or
    revoked token.
    """
    candidate = _hash_token(token or "")
    if not token or not token.startswith(TOKEN_PREFIX) or len(token) > 200:
        hmac.compare_digest(candidate, candidate)
        return None
    prefix = token[: len(TOKEN_PREFIX) + 8]
    with store.db.read() as session:
        rows = session.scalars(select(Token).where(Token.prefix == prefix)).all()
        match = None
        for row in rows:
            if hmac.compare_digest(row.token_hash, candidate) and row.revoked_at is None:
                match = row
        if match is None:
            return None
        info = _token_dict(match)
        stale = match.last_used_at is None or utcnow() - match.last_used_at > _TOUCH_EVERY
    if stale:
        try:
            with store.db.write() as session:
                used = session.get(Token, info["id"])
                if used is not None:
                    used.last_used_at = utcnow()
        except Exception:  # pragma: no cover - a busy database must not fail the request
            pass
    return info


def scope_allows(scope: str, required: str) -> bool:
    """``read`` < ``write`` < ``admin``: whether a token of ``scope`` may do ``required``."""
    if required not in _SCOPE_RANK:
        raise ParameterError(f"scope {required!r} is not known: use one of {list(TOKEN_SCOPES)}")
    return _SCOPE_RANK.get(scope, -1) >= _SCOPE_RANK[required]


def list_tokens(store: Store) -> list[dict[str, Any]]:
    with store.db.read() as session:
        rows = session.scalars(select(Token).order_by(Token.created_at)).all()
        return [_token_dict(r) for r in rows]


def revoke_token(store: Store, token_id: str) -> dict[str, Any]:
    with store.db.write() as session:
        row = session.get(Token, token_id)
        if row is None:
            raise NotFoundError(f"token {token_id!r} does not exist", token=token_id)
        if row.revoked_at is None:
            row.revoked_at = utcnow()
        session.flush()
        return _token_dict(row)


def ping(store: Store) -> bool:
    """True when the database answers (``/healthz``)."""
    return store.db.ping()
