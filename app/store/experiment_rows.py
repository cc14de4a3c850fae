"""Experiments: a scoring request, its queued job, and once done its result files.

An experiment and its score job are created in one transaction; its result rows are written by
the worker inside the owner-checked transaction that marks the job done. Reading the result of
an unfinished experiment raises :class:`app.errors.ResultNotReady` (HTTP 409).
"""

from __future__ import annotations

import hashlib
import threading
from collections import OrderedDict
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.errors import NotFoundError, ParameterError, ResultNotReady
from app.provenance import code_version
from app.store import Store
from app.store.artifacts import ArtifactRef
from app.store.common import iso, job_brief, record_artifact
from app.store.dataset_rows import SLOT_ROLES, row_path
from app.store.job_rows import new_job
from app.store.models import JOB_STATES, Dataset, Experiment, Job, ResultFile, new_id, utcnow

if TYPE_CHECKING:
    from app.results.result import ScoreResult

#: listing bounds (the API declares the same ones on its query parameters)
MAX_LIMIT = 500
MAX_OFFSET = 10**9


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
        "job": job_brief(job),
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
    (NotFoundError) and have the role of its slot (ParameterError). ``options`` is the run
    layer's ``RunOptions`` dumped (already validated); ``parameters`` is the request as the
    client sent it (shown back by GET). The job payload carries the datasets' paths and the
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
                "path": str(row_path(store, row)),
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
                "seed": (options.get("bootstrap") or {}).get("seed"),
                "code_version": code_version(),
            },
            job_id=job.id,
            created_at=utcnow(),
        )
        session.add(experiment)
        session.flush()
        return _experiment_dict(experiment, job)

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

    ``name`` matches exactly; ``status`` is a job state; ``limit`` 1..MAX_LIMIT, ``offset``
    0..MAX_OFFSET.
    """
    if status is not None and status not in JOB_STATES:
        raise ParameterError(
            f"status {status!r} is not a job state: use one of {list(JOB_STATES)}", status=status
        )
    if not 1 <= limit <= MAX_LIMIT:
        raise ParameterError(f"limit {limit} is out of range: allow 1..{MAX_LIMIT}", limit=limit)
    if not 0 <= offset <= MAX_OFFSET:
        raise ParameterError(f"offset {offset} is out of range: allow 0..{MAX_OFFSET}", offset=offset)
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


def require_done(session: Session, job_id: str, what: str) -> None:
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
        require_done(session, row.job_id, f"experiment {experiment_id}")
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
        require_done(session, row.job_id, f"experiment {experiment_id}")
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
