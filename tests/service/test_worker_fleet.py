"""Several ``landlift worker`` processes side by side share one queue (issue 4, item 4).

Real processes, the real database (SQLite file and PostgreSQL), the real scoring engine: three
workers drain a batch of jobs; every job is done exactly once, by exactly one worker, and the
numbers equal a direct run of the engine with the same seed.
"""

from __future__ import annotations

import subprocess
import sys
from collections import Counter
from collections.abc import Callable
from pathlib import Path

from run_support import run_options

from app.runs.scoring import score_files
from app.store import Store, experiment_rows, job_rows

REPO_ROOT = Path(__file__).resolve().parents[2]
N_JOBS = 8
N_WORKERS = 3


def test_workers_side_by_side_share_a_batch(
    settings_env: dict[str, str],
    store: Store,
    sample_files: dict[str, Path],
    ingest_sample: Callable[..., dict[str, str]],
) -> None:
    ids = ingest_sample(("realistic", "scrambled", "observations"))
    seeds = list(range(N_JOBS))
    exps = [
        experiment_rows.create_experiment(store, name=f"batch {s}", options=run_options(resamples=40, seed=s).dump(), **ids)
        for s in seeds
    ]
    workers = [
        subprocess.Popen(
            [sys.executable, "-m", "app.cli", "worker", "--drain", "--name", f"fleet-{k}"],
            cwd=REPO_ROOT, env=settings_env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )
        for k in range(N_WORKERS)
    ]
    outputs = [w.communicate(timeout=300) for w in workers]
    for w, (_, err) in zip(workers, outputs, strict=True):
        assert w.returncode == 0, err

    owners: Counter[str] = Counter()
    for exp in exps:
        job = job_rows.get_job(store, exp["job"]["id"])
        assert (job["status"], job["attempts"]) == ("done", 1), job
        history = job_rows.job_attempts(store, exp["job"]["id"])
        assert len(history) == 1 and history[0]["outcome"] == "done"
        owners[history[0]["worker"]] += 1
    assert sum(owners.values()) == N_JOBS
    print("jobs per worker:", dict(owners))
    # the processed counts the workers print add up to the batch: nothing ran twice
    processed = sum(int(err.split(" job(s) processed")[0].split()[-1]) for _, err in outputs)
    assert processed == N_JOBS
    # a retried or shared job would change nothing either: results equal a direct engine run
    for seed in (seeds[0], seeds[-1]):
        stored = experiment_rows.load_result(store, exps[seed]["id"])
        direct = score_files(
            sample_files["realistic"], sample_files["scrambled"], sample_files["observations"],
            options=run_options(resamples=40, seed=seed),
        )
        assert stored.curves[0]["windows"] == direct.curves[0]["windows"]
