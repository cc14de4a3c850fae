"""Version comparisons of two finished experiments: a queued job and its JSON result."""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

from sqlalchemy.orm import Session

from app.errors import NotFoundError, ParameterError
from app.store import Store
from app.store.artifacts import ArtifactRef
from app.store.common import iso, job_brief, record_artifact
from app.store.experiment_rows import require_done
from app.store.job_rows import new_job
from app.store.models import Comparison, Experiment, Job, new_id, utcnow


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
        "job": job_brief(job),
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
    options: Mapping[str, Any] | None = None,
    max_attempts: int | None = None,
) -> dict[str, Any]:
    """Queue a version comparison of two finished experiments (one transaction).

    ``options`` are the run layer's validated comparison options (``ComparisonOptions``
    dumped), kept as the comparison's parameters and handed to its job. NotFoundError for an
    unknown experiment, ResultNotReady when one is not done yet, ParameterError when baseline
    and candidate are the same experiment.
    """
    if baseline == candidate:
        raise ParameterError(
            f"baseline and candidate are the same experiment {baseline!r}", baseline=baseline
        )
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
            require_done(session, exp.job_id, f"{role} experiment {exp.id}")
        comparison_id = new_id("cmp")
        parameters = dict(options or {})
        job = new_job(
            session,
            kind="compare",
            payload={
                "comparison_id": comparison_id,
                "baseline": baseline,
                "candidate": candidate,
                "options": parameters,
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
