"""Jobs as the service reads them, beside the one write outside the queue: a new queued job.

The owner-checked writes of a running job (claim, heartbeat, progress, complete, fail) are the
queue's (:mod:`app.jobs.queue`); a job is created here, inside the same transaction as its
experiment or comparison.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.errors import NotFoundError, ParameterError
from app.store import Store
from app.store.common import iso
from app.store.models import JOB_STATES, Job, JobAttempt, new_id, utcnow


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
