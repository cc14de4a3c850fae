"""Workers killed with SIGKILL in the middle of a score job.

Real worker processes (``run_worker`` with the real ``score`` handler, slowed down at one progress
call so that the kill lands inside the engine run) on the test database. Short leases: 3 s, with a
heartbeat every 0.5 s.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
import xarray as xr
from run_support import run_options

from app.errors import ResultNotReady
from app.runs.scoring import score_files
from app.store import Store, experiment_rows, job_rows

REPO_ROOT = Path(__file__).resolve().parents[2]
LEASE = 3.0
OPTIONS = run_options(resamples=50, seed=21)

WORKER = r"""
import os, sys, time
from app.settings import Settings
from app.jobs.handlers import run_score
from app.jobs.worker import run_worker

events, name, pause_at, pause = sys.argv[1], sys.argv[2], float(sys.argv[3]), float(sys.argv[4])

def note(event):
    with open(events, "a") as fh:
        fh.write(f"{time.time():.6f} {name} {os.getpid()} {event}\n")
        fh.flush()
        os.fsync(fh.fileno())

def slowed_score(ctx):
    inner = ctx.progress
    def progress(fraction, message=""):
        inner(fraction, message)
        note(f"progress {fraction:.3f}")
        if pause and fraction >= pause_at:
            time.sleep(pause)  # the heartbeat thread keeps the lease alive meanwhile
    ctx.progress = progress
    note(f"start attempt {ctx.claim.attempt}")
    record = run_score(ctx)
    note("end")
    return record

run_worker(Settings(), handlers={"score": slowed_score}, max_jobs=1, name=name)
"""


def _events(path: Path) -> list[tuple[float, str, int, str]]:
    if not path.exists():
        return []
    rows = []
    for line in path.read_text().splitlines():
        t, name, pid, event = line.split(" ", 3)
        rows.append((float(t), name, int(pid), event))
    return rows


def _wait(predicate: Callable[[], bool], timeout: float, what: str) -> None:
    deadline = time.monotonic() + timeout
    while not predicate():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}")
        time.sleep(0.05)


@pytest.fixture
def worker_env(settings_env: dict[str, str]) -> dict[str, str]:
    return {
        **settings_env,
        "LANDLIFT_LEASE_SECONDS": str(LEASE),
        "LANDLIFT_HEARTBEAT_SECONDS": "0.5",
        "LANDLIFT_POLL_SECONDS": "0.1",
    }


def _spawn(env: dict[str, str], events: Path, name: str, *, pause: float) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-c", WORKER, str(events), name, "0.3", str(pause)],
        cwd=REPO_ROOT,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
    )


def _mid_job(events: Path, name: str) -> Callable[[], bool]:
    # a progress call at >= 0.3 comes from inside the engine run (after the input reduction)
    return lambda: any(
        n == name and e.startswith("progress") and float(e.split()[1]) >= 0.3
        for _, n, _, e in _events(events)
    )


def _kill(proc: subprocess.Popen) -> float:
    os.kill(proc.pid, signal.SIGKILL)
    killed_at = time.time()
    proc.wait(timeout=10)
    assert proc.returncode == -signal.SIGKILL
    return killed_at


def test_killed_worker_is_taken_over_with_the_same_numbers(
    store: Store,
    worker_env: dict[str, str],
    ingest_sample: Callable[..., dict[str, str]],
    sample_files: dict[str, Any],
    check_artifacts: Callable[[], int],
    tmp_path: Path,
) -> None:
    exp = experiment_rows.create_experiment(
        store, name="killed", options=OPTIONS.dump(), **ingest_sample()
    )
    job_id = exp["job"]["id"]
    events = tmp_path / "events.log"
    first = _spawn(worker_env, events, "first", pause=120)
    procs = [first]
    try:
        _wait(_mid_job(events, "first"), 60, "the first worker to be inside the engine")
        second = _spawn(worker_env, events, "second", pause=0)
        procs.append(second)
        # both alive for longer than a lease: the heartbeat keeps the job with the first worker
        time.sleep(LEASE + 1.5)
        assert not [e for e in _events(events) if e[1] == "second"]
        job = job_rows.get_job(store, job_id)
        assert (job["status"], job["attempts"]) == ("running", 1)
        killed_at = _kill(first)
        second.wait(timeout=90)
        assert second.returncode == 0, second.stderr.read() if second.stderr else ""
    finally:
        for proc in procs:
            if proc.poll() is None:
                proc.kill()
                proc.wait()

    job = job_rows.get_job(store, job_id)
    assert (job["status"], job["attempts"], job["error"]) == ("done", 2, None)
    history = job_rows.job_attempts(store, job_id)
    assert [(h["attempt"], h["worker"], h["outcome"]) for h in history] == [
        (1, "first", "expired"),
        (2, "second", "done"),
    ]
    # never two owners at once: the second claim came after the first owner's last lease ended,
    # and the second worker's first step came after the first worker died
    assert history[1]["claimed_at"] >= history[0]["lease_expires_at"]
    # renewed until the kill (a heartbeat every 0.5 s pushes the end LEASE seconds ahead)
    assert history[0]["lease_expires_at"].timestamp() >= killed_at + LEASE - 1.0
    assert history[1]["claimed_at"].timestamp() >= killed_at
    second_start = min(t for t, n, _, e in _events(events) if n == "second")
    assert second_start > killed_at
    assert [e for _, n, _, e in _events(events) if n == "first" and e == "end"] == []

    # the same numbers as an uninterrupted run of the engine with the same seed
    result = experiment_rows.load_result(store, exp["id"])
    reference = score_files(
        sample_files["realistic"], sample_files["scrambled"], sample_files["observations"],
        sample_files["land_state"], options=OPTIONS,
    )
    assert result.curves[0]["windows"] == reference.curves[0]["windows"]
    xr.testing.assert_allclose(result.maps, reference.maps, rtol=0, atol=0)
    check_artifacts()


def test_killed_on_every_attempt_then_failed(
    store: Store,
    worker_env: dict[str, str],
    ingest_sample: Callable[..., dict[str, str]],
    tmp_path: Path,
) -> None:
    exp = experiment_rows.create_experiment(
        store, name="doomed", options=OPTIONS.dump(), max_attempts=2,
        **ingest_sample(("realistic", "scrambled", "observations")),
    )
    job_id = exp["job"]["id"]
    events = tmp_path / "events.log"
    for name in ("one", "two"):
        proc = _spawn(worker_env, events, name, pause=120)
        try:
            _wait(_mid_job(events, name), 60, f"worker {name} inside the engine")
            _kill(proc)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
        # the next worker can take over only once the lease has run out
        time.sleep(LEASE + 0.5)
    last = _spawn(worker_env, events, "three", pause=0)
    try:
        _wait(lambda: job_rows.get_job(store, job_id)["status"] == "failed", 30, "the job to fail")
    finally:
        last.kill()
        last.wait()
    job = job_rows.get_job(store, job_id)
    assert job["attempts"] == 2
    assert job["error"].startswith("gave up after 2 attempts: worker two stopped renewing")
    assert [(h["worker"], h["outcome"]) for h in job_rows.job_attempts(store, job_id)] == [
        ("one", "expired"),
        ("two", "expired"),
    ]
    assert not [e for e in _events(events) if e[1] == "three"]
    with pytest.raises(ResultNotReady):
        experiment_rows.result_files(store, exp["id"])
