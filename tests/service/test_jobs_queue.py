"""The durable queue: claims, leases, owner tokens, retries, concurrent claimers."""

from __future__ import annotations

import json
import subprocess
import sys
import threading
import time
from collections import Counter
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import select

from app.jobs import queue
from app.jobs.queue import Claim, LeaseLost
from app.store import Store, job_rows
from app.store.models import Job, JobAttempt

REPO_ROOT = Path(__file__).resolve().parents[2]


def _enqueue(store: Store, n: int, *, kind: str = "score", max_attempts: int = 3) -> list[str]:
    ids = []
    for i in range(n):
        with store.db.write() as session:
            ids.append(
                job_rows.new_job(session, kind=kind, payload={"n": i}, max_attempts=max_attempts).id
            )
    return ids


def _history(store: Store, job_id: str) -> list[tuple[int, str, str | None]]:
    return [(a["attempt"], a["worker"], a["outcome"]) for a in job_rows.job_attempts(store, job_id)]


def _forged(claim: Claim) -> Claim:
    return Claim(**{**claim.__dict__, "token": "0" * 32})


def test_claim_takes_the_oldest_and_commits_at_once(store: Store) -> None:
    ids = _enqueue(store, 3)
    first = queue.claim_next(store, worker="w1")
    assert first is not None
    assert (first.job_id, first.kind, first.payload, first.attempt, first.sequence) == (
        ids[0], "score", {"n": 0}, 1, 1,
    )
    # the claim is committed: another connection sees it now, and can write
    job = job_rows.get_job(store, ids[0])
    assert job["status"] == "running" and job["attempts"] == 1
    with store.db.write() as session:
        row = session.get(Job, ids[0])
        assert row is not None and row.owner_token == first.token and row.worker == "w1"
        lease_left = (row.lease_expires_at - row.heartbeat_at).total_seconds()  # type: ignore[operator]
    assert lease_left == pytest.approx(store.settings.lease_seconds, abs=0.01)
    second = queue.claim_next(store, worker="w2")
    third = queue.claim_next(store, worker="w3")
    assert second is not None and third is not None
    assert [second.job_id, third.job_id] == ids[1:]
    assert len({first.token, second.token, third.token}) == 3
    assert queue.claim_next(store, worker="w4") is None


def test_kinds_filter(store: Store) -> None:
    (score_id,) = _enqueue(store, 1, kind="score")
    (compare_id,) = _enqueue(store, 1, kind="compare")
    got = queue.claim_next(store, worker="w", kinds=["compare"])
    assert got is not None and got.job_id == compare_id
    assert queue.claim_next(store, worker="w", kinds=["compare"]) is None
    got = queue.claim_next(store, worker="w", kinds=["score", "compare"])
    assert got is not None and got.job_id == score_id


def test_every_update_checks_the_owner_token(store: Store) -> None:
    (job_id,) = _enqueue(store, 1)
    claim = queue.claim_next(store, worker="w1")
    assert claim is not None
    forged = _forged(claim)
    recorded: list[str] = []
    with pytest.raises(LeaseLost):
        queue.heartbeat(store, forged)
    with pytest.raises(LeaseLost):
        queue.report_progress(store, forged, 0.9, "forged")
    with pytest.raises(LeaseLost):
        queue.complete(store, forged, lambda session: recorded.append("forged"))
    with pytest.raises(LeaseLost):
        queue.fail(store, forged, "forged", retry=False)
    with pytest.raises(LeaseLost):
        queue.release(store, forged)
    job = job_rows.get_job(store, job_id)
    assert (job["status"], job["progress"], job["error"]) == ("running", 0.0, None)
    assert recorded == []
    queue.report_progress(store, claim, 0.25, "reduced 3/12 rows")
    assert job_rows.get_job(store, job_id)["progress"] == 0.25
    assert job_rows.get_job(store, job_id)["message"] == "reduced 3/12 rows"
    queue.report_progress(store, claim, 7.0)  # clipped into 0..1
    assert job_rows.get_job(store, job_id)["progress"] == 1.0
    queue.complete(store, claim, lambda session: recorded.append("owner"))
    assert recorded == ["owner"]
    job = job_rows.get_job(store, job_id)
    assert job["status"] == "done" and job["finished_at"] is not None
    with pytest.raises(LeaseLost):  # done is final: the old claim can do nothing more
        queue.report_progress(store, claim, 0.5)


def test_expired_lease_is_taken_over_and_the_old_owner_is_fenced(store: Store) -> None:
    (job_id,) = _enqueue(store, 1)
    old = queue.claim_next(store, worker="old", lease_seconds=0.4)
    assert old is not None
    assert queue.claim_next(store, worker="early", lease_seconds=0.4) is None
    time.sleep(0.6)
    new = queue.claim_next(store, worker="new", lease_seconds=30)
    assert new is not None and new.job_id == job_id
    assert (new.attempt, new.sequence) == (2, 2) and new.token != old.token
    recorded: list[str] = []
    for call in (
        lambda: queue.heartbeat(store, old),
        lambda: queue.report_progress(store, old, 0.5),
        lambda: queue.complete(store, old, lambda s: recorded.append("old")),
    ):
        with pytest.raises(LeaseLost):
            call()
    queue.complete(store, new, lambda s: recorded.append("new"))
    assert recorded == ["new"]
    assert _history(store, job_id) == [(1, "old", "expired"), (2, "new", "done")]
    attempts = job_rows.job_attempts(store, job_id)
    # the takeover happened only after the first owner's lease had ended
    assert attempts[1]["claimed_at"] >= attempts[0]["claimed_at"]
    with store.db.read() as session:
        first = session.scalars(
            select(JobAttempt).where(JobAttempt.job_id == job_id, JobAttempt.attempt == 1)
        ).one()
        assert attempts[1]["claimed_at"] >= first.lease_expires_at


def test_heartbeat_keeps_the_job(store: Store) -> None:
    (job_id,) = _enqueue(store, 1)
    claim = queue.claim_next(store, worker="alive", lease_seconds=0.6)
    assert claim is not None
    for _ in range(6):  # 1.2 s in all, twice the lease
        time.sleep(0.2)
        queue.heartbeat(store, claim)
        assert queue.claim_next(store, worker="thief", lease_seconds=0.6) is None
    with store.db.read() as session:
        attempt = session.scalars(select(JobAttempt).where(JobAttempt.job_id == job_id)).one()
        job = session.get(Job, job_id)
        assert job is not None and attempt.lease_expires_at == job.lease_expires_at
    time.sleep(0.8)
    taken = queue.claim_next(store, worker="thief", lease_seconds=5)
    assert taken is not None and taken.job_id == job_id


def test_expired_leases_up_to_max_attempts_then_failed(store: Store) -> None:
    (job_id,) = _enqueue(store, 1, max_attempts=2)
    for worker in ("a", "b"):
        claim = queue.claim_next(store, worker=worker, lease_seconds=0.3)
        assert claim is not None and claim.job_id == job_id
        time.sleep(0.45)
    assert queue.claim_next(store, worker="c", lease_seconds=0.3) is None
    job = job_rows.get_job(store, job_id)
    assert job["status"] == "failed" and job["attempts"] == 2
    assert "gave up after 2 attempts" in job["error"]
    assert "worker b stopped renewing its lease" in job["error"]
    assert _history(store, job_id) == [(1, "a", "expired"), (2, "b", "expired")]


def test_errors_are_retried_then_failed_with_the_error(store: Store) -> None:
    (job_id,) = _enqueue(store, 1, max_attempts=3)
    outcomes = []
    for i in range(3):
        claim = queue.claim_next(store, worker=f"w{i}")
        assert claim is not None and claim.attempt == i + 1
        outcomes.append(
            queue.fail(store, claim, f"OSError: disk hiccup {i}", retry=True,
                       retry_delay_seconds=0)
        )
        if i < 2:
            assert "retrying" in job_rows.get_job(store, job_id)["message"]
    assert outcomes == ["queued", "queued", "failed"]
    job = job_rows.get_job(store, job_id)
    assert job["status"] == "failed" and job["error"] == "OSError: disk hiccup 2"
    assert [h[2] for h in _history(store, job_id)] == ["retry", "retry", "failed"]


def test_retry_waits_for_its_delay(store: Store) -> None:
    (job_id,) = _enqueue(store, 1)
    claim = queue.claim_next(store, worker="w")
    assert claim is not None
    assert queue.fail(store, claim, "boom", retry=True, retry_delay_seconds=0.5) == "queued"
    assert queue.claim_next(store, worker="w") is None
    time.sleep(0.6)
    again = queue.claim_next(store, worker="w")
    assert again is not None and again.job_id == job_id


def test_error_without_retry_fails_at_once(store: Store) -> None:
    (job_id,) = _enqueue(store, 1, max_attempts=5)
    claim = queue.claim_next(store, worker="w")
    assert claim is not None
    assert queue.fail(store, claim, "invalid_input: no overlap", retry=False) == "failed"
    job = job_rows.get_job(store, job_id)
    assert (job["status"], job["attempts"], job["error"]) == (
        "failed", 1, "invalid_input: no overlap",
    )


def test_release_does_not_count_as_an_attempt(store: Store) -> None:
    (job_id,) = _enqueue(store, 1, max_attempts=1)
    claim = queue.claim_next(store, worker="stopping")
    assert claim is not None
    queue.release(store, claim)
    assert job_rows.get_job(store, job_id)["status"] == "queued"
    again = queue.claim_next(store, worker="next")
    assert again is not None and (again.attempt, again.sequence) == (1, 2)
    queue.complete(store, again)
    assert _history(store, job_id) == [(1, "stopping", "released"), (2, "next", "done")]


# ----------------------------------------------------------------------------- concurrency


def test_concurrent_threads_never_share_a_job(store: Store) -> None:
    ids = _enqueue(store, 120)
    taken: list[tuple[str, str]] = []
    errors: list[BaseException] = []
    lock = threading.Lock()
    barrier = threading.Barrier(8)

    def hammer(name: str) -> None:
        try:
            barrier.wait()
            while True:
                claim = queue.claim_next(store, worker=name)
                if claim is None:
                    return
                with lock:
                    taken.append((claim.job_id, name))
                queue.complete(store, claim)
        except BaseException as exc:  # collected for the assertion
            errors.append(exc)

    threads = [threading.Thread(target=hammer, args=(f"t{i}",)) for i in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert errors == []
    counts = Counter(job for job, _ in taken)
    assert sorted(counts) == sorted(ids) and set(counts.values()) == {1}
    assert len({w for _, w in taken}) > 1  # the claims really were spread over threads
    assert job_rows.job_counts(store)["done"] == 120
    with store.db.read() as session:
        attempts = session.scalars(select(JobAttempt)).all()
        assert len(attempts) == 120 and {a.attempt for a in attempts} == {1}


CLAIMER = """
import json, sys, time
from app.settings import Settings
from app.store import Store
from app.jobs import queue
store = Store.open(Settings(data_dir=sys.argv[1], database_url=sys.argv[2]))
name = sys.argv[3]
time.sleep(max(0.0, float(sys.argv[4]) - time.time()))  # all processes start together
got = []
while True:
    claim = queue.claim_next(store, worker=name)
    if claim is None:
        break
    got.append(claim.job_id)
    queue.complete(store, claim)
print(json.dumps(got))
"""


def test_concurrent_processes_never_share_a_job(store: Store) -> None:
    ids = _enqueue(store, 80)
    start = time.time() + 4.0
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", CLAIMER, str(store.settings.data_dir), store.settings.url,
             f"p{i}", str(start)],
            cwd=REPO_ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )
        for i in range(4)
    ]
    results: list[Any] = []
    for proc in procs:
        out, err = proc.communicate(timeout=180)
        assert proc.returncode == 0, err
        results.append(json.loads(out))
    claimed = [job for got in results for job in got]
    assert sorted(claimed) == sorted(ids)  # each job exactly once over all processes
    assert sum(1 for got in results if got) > 1  # several processes really competed
    assert job_rows.job_counts(store)["done"] == 80
