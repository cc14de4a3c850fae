"""The durable job queue: claim with a lease, heartbeat, owner-checked updates, retries.

A job row moves ``queued -> running -> done | failed``. :func:`claim_next` takes the oldest
claimable job (queued and available, or running with an expired lease) in one short write
transaction that is committed at once: ``SELECT ... FOR UPDATE SKIP LOCKED`` on PostgreSQL, a
``BEGIN IMMEDIATE`` transaction on SQLite (one writer at a time, so two claimers cannot both see
the row free). The claim sets a fresh random *owner token*, bumps ``attempts``, sets the lease and
appends a :class:`~app.store.models.JobAttempt` history row.

Every later update (:func:`heartbeat`, :func:`report_progress`, :func:`complete`, :func:`fail`,
:func:`release`) is an ``UPDATE ... WHERE id = :id AND owner_token = :token AND status =
'running'``; when it matches no row the worker has lost the job (its lease ran out and another
worker took it) and :class:`LeaseLost` is raised, so a stale worker can never overwrite the
progress or the result of the current owner.

A job whose lease expired is retried by the next claimer while ``attempts < max_attempts``; after
that it is ``failed`` with an error that says so (and the last recorded error, if any).
"""

from __future__ import annotations

import secrets
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Any

from sqlalchemy import and_, func, or_, select, update
from sqlalchemy.orm import Session

from app.store import Store
from app.store.models import Job, JobAttempt, utcnow


class LeaseLost(RuntimeError):
    """The worker no longer owns the job (lease expired and another worker claimed it)."""

    def __init__(self, job_id: str, attempt: int) -> None:
        super().__init__(f"job {job_id}: attempt {attempt} no longer owns the job")
        self.job_id = job_id
        self.attempt = attempt


@dataclass(frozen=True)
class Claim:
    """A worker's hold on one job."""

    job_id: str
    kind: str
    payload: dict[str, Any]
    token: str
    #: charged attempts so far, this one included (what max_attempts limits)
    attempt: int
    max_attempts: int
    #: number of this claim in the job's history (JobAttempt.attempt; released claims count)
    sequence: int
    worker: str
    lease_seconds: float
    extra: dict[str, Any] = field(default_factory=dict)


def _owned(claim: Claim) -> Any:
    return and_(Job.id == claim.job_id, Job.owner_token == claim.token, Job.status == "running")


def _end_attempt(
    session: Session, job_id: str, sequence: int | None, *, outcome: str, error: str | None
) -> None:
    """Close a history row (``sequence`` None: every open one of the job)."""
    query = update(JobAttempt).where(JobAttempt.job_id == job_id, JobAttempt.ended_at.is_(None))
    if sequence is not None:
        query = query.where(JobAttempt.attempt == sequence)
    session.execute(query.values(ended_at=utcnow(), outcome=outcome, error=error))


def _last_error(session: Session, job_id: str) -> str | None:
    return session.scalars(
        select(JobAttempt.error)
        .where(
            JobAttempt.job_id == job_id,
            JobAttempt.error.is_not(None),
            JobAttempt.outcome != "released",
        )
        .order_by(JobAttempt.attempt.desc())
        .limit(1)
    ).first()


def claim_next(
    store: Store,
    *,
    worker: str,
    lease_seconds: float | None = None,
    kinds: Sequence[str] | None = None,
) -> Claim | None:
    """Claim the oldest claimable job of ``kinds`` (all kinds when None); None when there is none.

    A running job whose lease has expired is either taken over (attempts left) or marked
    ``failed`` (no attempts left), and the search goes on.
    """
    lease = float(lease_seconds if lease_seconds is not None else store.settings.lease_seconds)
    while True:
        with store.db.write() as session:
            now = utcnow()
            query = select(Job).where(
                or_(
                    and_(Job.status == "queued", Job.available_at <= now),
                    and_(Job.status == "running", Job.lease_expires_at < now),
                )
            )
            if kinds is not None:
                query = query.where(Job.kind.in_(list(kinds)))
            query = query.order_by(Job.created_at, Job.id).limit(1)
            if store.db.is_postgresql:
                query = query.with_for_update(skip_locked=True)
            job = session.scalars(query).first()
            if job is None:
                return None
            if job.status == "running":
                lost = (
                    f"worker {job.worker} stopped renewing its lease "
                    f"(attempt {job.attempts} of {job.max_attempts})"
                )
                previous = _last_error(session, job.id)
                _end_attempt(session, job.id, None, outcome="expired", error=lost)
                if job.attempts >= job.max_attempts:
                    job.status = "failed"
                    job.error = (
                        f"gave up after {job.attempts} attempts: {lost}"
                        if previous is None
                        else f"gave up after {job.attempts} attempts: {lost}; earlier: {previous}"
                    )
                    job.message = "failed"
                    job.owner_token = None
                    job.lease_expires_at = None
                    job.finished_at = now
                    continue  # commits this transaction, then looks again
            token = secrets.token_hex(16)
            sequence = 1 + (
                session.scalar(
                    select(func.count()).select_from(JobAttempt).where(JobAttempt.job_id == job.id)
                )
                or 0
            )
            job.status = "running"
            job.attempts += 1
            job.owner_token = token
            job.worker = worker
            job.lease_expires_at = now + timedelta(seconds=lease)
            job.heartbeat_at = now
            job.started_at = now
            job.finished_at = None
            job.progress = 0.0
            job.message = f"started (attempt {job.attempts} of {job.max_attempts})"
            session.add(
                JobAttempt(
                    job_id=job.id,
                    attempt=sequence,
                    owner_token=token,
                    worker=worker,
                    claimed_at=now,
                    lease_expires_at=job.lease_expires_at,
                )
            )
            return Claim(
                job_id=job.id,
                kind=job.kind,
                payload=dict(job.payload),
                token=token,
                attempt=job.attempts,
                max_attempts=job.max_attempts,
                sequence=sequence,
                worker=worker,
                lease_seconds=lease,
            )


def heartbeat(store: Store, claim: Claim) -> None:
    """Renew the lease for another ``claim.lease_seconds``; LeaseLost if not the owner."""
    with store.db.write() as session:
        now = utcnow()
        expires = now + timedelta(seconds=claim.lease_seconds)
        result = session.execute(
            update(Job).where(_owned(claim)).values(lease_expires_at=expires, heartbeat_at=now)
        )
        if result.rowcount != 1:  # type: ignore[attr-defined]
            raise LeaseLost(claim.job_id, claim.attempt)
        session.execute(
            update(JobAttempt)
            .where(JobAttempt.job_id == claim.job_id, JobAttempt.attempt == claim.sequence)
            .values(lease_expires_at=expires)
        )


def report_progress(
    store: Store, claim: Claim, progress: float, message: str | None = None
) -> None:
    """Set progress (clipped to 0..1) and message; LeaseLost if not the owner."""
    value = min(1.0, max(0.0, float(progress)))
    values: dict[str, Any] = {"progress": value}
    if message is not None:
        values["message"] = str(message)[:2000]
    with store.db.write() as session:
        result = session.execute(update(Job).where(_owned(claim)).values(**values))
        if result.rowcount != 1:  # type: ignore[attr-defined]
            raise LeaseLost(claim.job_id, claim.attempt)


def complete(
    store: Store,
    claim: Claim,
    record: Callable[[Session], None] | None = None,
    *,
    message: str = "done",
) -> None:
    """Mark the job done and run ``record(session)`` (store the results) in ONE transaction.

    The ownership check comes first; if it fails nothing is written and LeaseLost is raised, so a
    result is recorded exactly once, by the current owner.
    """
    with store.db.write() as session:
        now = utcnow()
        result = session.execute(
            update(Job)
            .where(_owned(claim))
            .values(
                status="done",
                progress=1.0,
                message=message,
                error=None,
                owner_token=None,
                lease_expires_at=None,
                finished_at=now,
            )
        )
        if result.rowcount != 1:  # type: ignore[attr-defined]
            raise LeaseLost(claim.job_id, claim.attempt)
        _end_attempt(session, claim.job_id, claim.sequence, outcome="done", error=None)
        if record is not None:
            record(session)


def fail(
    store: Store,
    claim: Claim,
    error: str,
    *,
    retry: bool,
    retry_delay_seconds: float | None = None,
) -> str:
    """Record an error of this attempt. Returns the job's new status.

    ``retry=True`` and attempts left: back to ``queued`` after a delay (``retry_delay_seconds``
    doubled per attempt so far); otherwise ``failed`` with ``error``. LeaseLost if not the owner.
    """
    base = (
        retry_delay_seconds
        if retry_delay_seconds is not None
        else store.settings.retry_delay_seconds
    )
    text = str(error)[:8000]
    with store.db.write() as session:
        now = utcnow()
        again = retry and claim.attempt < claim.max_attempts
        if again:
            delay = base * (2 ** (claim.attempt - 1))
            values: dict[str, Any] = {
                "status": "queued",
                "available_at": now + timedelta(seconds=delay),
                "message": f"attempt {claim.attempt} failed, retrying in {delay:g} s: {text}"[
                    :2000
                ],
            }
        else:
            values = {"status": "failed", "error": text, "message": "failed", "finished_at": now}
        values.update(owner_token=None, lease_expires_at=None)
        result = session.execute(update(Job).where(_owned(claim)).values(**values))
        if result.rowcount != 1:  # type: ignore[attr-defined]
            raise LeaseLost(claim.job_id, claim.attempt)
        _end_attempt(
            session,
            claim.job_id,
            claim.sequence,
            outcome="retry" if again else "failed",
            error=text,
        )
        return "queued" if again else "failed"


def release(store: Store, claim: Claim, *, reason: str = "worker stopped") -> None:
    """Give the job back to the queue without counting this attempt (graceful shutdown)."""
    with store.db.write() as session:
        now = utcnow()
        result = session.execute(
            update(Job)
            .where(_owned(claim))
            .values(
                status="queued",
                attempts=Job.attempts - 1,
                owner_token=None,
                lease_expires_at=None,
                available_at=now,
                progress=0.0,
                message=f"requeued: {reason}",
            )
        )
        if result.rowcount != 1:  # type: ignore[attr-defined]
            raise LeaseLost(claim.job_id, claim.attempt)
        _end_attempt(session, claim.job_id, claim.sequence, outcome="released", error=reason)
