"""The worker running real jobs: score and compare through the store, errors, stop, lease loss."""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
import xarray as xr
from run_support import run_options
from sqlalchemy import update

from app.errors import ResultNotReady
from app.jobs.handlers import JobContext, run_score
from app.jobs.worker import Worker, start_worker_thread
from app.runs.options import RunOptions
from app.runs.scoring import score_files
from app.store import Store, comparison_rows, experiment_rows, job_rows
from app.store.models import Job

OPTIONS = run_options(resamples=50, seed=11)


def _direct(sample_files: dict[str, Any], options: RunOptions = OPTIONS) -> Any:
    """The same scoring without the service (what `landlift score` runs)."""
    return score_files(
        sample_files["realistic"],
        sample_files["scrambled"],
        sample_files["observations"],
        sample_files["land_state"],
        options=options,
    )


def _numbers(curves: list[dict[str, Any]]) -> list[Any]:
    """Every number of the skill curves (names and identity fields dropped)."""
    out = []
    for curve in curves:
        for w in curve["windows"]:
            out.append(
                [w["label"], w["n_years"], w["n_samples"]]
                + [w[k][f] for k in ("acc_realistic", "acc_scrambled") for f in ("value", "low", "high")]
                + [w["gain"][f] for f in ("value", "low", "high", "p_value")]
            )
    return out


def test_score_job_gives_the_engine_numbers(
    store: Store,
    ingest_sample: Callable[..., dict[str, str]],
    sample_files: dict[str, Any],
    check_artifacts: Callable[[], int],
) -> None:
    ids = ingest_sample()
    exp = experiment_rows.create_experiment(
        store, name="sample", options=OPTIONS.dump(), **ids
    )
    assert Worker(store).run(drain=True) == 1
    job = job_rows.get_job(store, exp["job"]["id"])
    assert (job["status"], job["progress"], job["attempts"], job["error"]) == (
        "done", 1.0, 1, None,
    )
    result = experiment_rows.load_result(store, exp["id"])
    reference = _direct(sample_files)
    assert _numbers(result.curves) == _numbers(reference.curves)
    xr.testing.assert_allclose(result.maps, reference.maps, rtol=0, atol=0)
    assert set(experiment_rows.result_files(store, exp["id"])) >= {"skill.json", "maps.nc", "result.json"}
    skill = json.loads(experiment_rows.result_files(store, exp["id"])["skill.json"].read_text())
    assert skill[0]["seed"] == 11 and skill[0]["resamples"] == 50
    finished = experiment_rows.get_experiment(store, exp["id"])
    assert finished["status"] == "done" and finished["finished_at"] is not None
    assert finished["provenance"]["result"]["seed"] == 11
    assert len(finished["result_digest"]) == 64
    assert check_artifacts() >= 4 + 3  # four inputs, three or four result files


def test_progress_is_reported_in_order(
    store: Store, ingest_sample: Callable[..., dict[str, str]]
) -> None:
    exp = experiment_rows.create_experiment(
        store, name="progress", options=OPTIONS.dump(), **ingest_sample()
    )
    seen: list[float] = []

    def watched(ctx: JobContext) -> Any:
        inner = ctx.progress

        def progress(fraction: float, message: str = "") -> None:
            inner(fraction, message)
            seen.append(job_rows.get_job(store, ctx.claim.job_id)["progress"])

        ctx.progress = progress
        return run_score(ctx)

    Worker(store, handlers={"score": watched}, progress_interval=0.0).run(drain=True)
    assert job_rows.get_job(store, exp["job"]["id"])["status"] == "done"
    assert len(seen) >= 3 and seen == sorted(seen) and 0.0 < seen[-2] < 1.0


def test_options_are_checked_once_and_reloaded_unchanged(
    store: Store, ingest_sample: Callable[..., dict[str, str]]
) -> None:
    """Bad options never reach the queue (the run layer checks them when the request is
    parsed); a job reloads the stored dump as it was, without a second check."""
    from app.errors import ParameterError
    from app.runs.submission import submit_experiment

    ids = ingest_sample(("realistic", "scrambled", "observations"))
    with pytest.raises(ParameterError, match="bootstrap.resamples: must be an integer in 1..10000, got 0"):
        submit_experiment(store, name="bad", datasets=ids, options=run_options(resamples=0))
    with store.db.read() as session:
        assert session.query(Job).count() == 0
    exp = submit_experiment(store, name="good", datasets=ids, options=OPTIONS)
    with store.db.read() as session:
        payload = session.get(Job, exp["job"]["id"]).payload  # type: ignore[union-attr]
    assert RunOptions.reload(payload["options"]) == OPTIONS
    assert RunOptions.reload(payload["options"]).scoring() == OPTIONS.scoring()


def test_unexpected_errors_are_retried_then_failed(
    store: Store, ingest_sample: Callable[..., dict[str, str]]
) -> None:
    exp = experiment_rows.create_experiment(
        store, name="flaky", options=OPTIONS.dump(),
        **ingest_sample(("realistic", "scrambled", "observations")),
    )
    calls: list[int] = []

    def broken(ctx: JobContext) -> Any:
        calls.append(ctx.claim.attempt)
        raise OSError(f"disk full on attempt {ctx.claim.attempt}")

    worker = Worker(store, handlers={"score": broken})
    deadline = time.monotonic() + 30
    while job_rows.get_job(store, exp["job"]["id"])["status"] != "failed":
        worker.run(drain=True)
        assert time.monotonic() < deadline
        time.sleep(0.05)
    job = job_rows.get_job(store, exp["job"]["id"])
    assert calls == [1, 2, 3] and job["attempts"] == 3
    assert job["error"] == "OSError: disk full on attempt 3"
    outcomes = [a["outcome"] for a in job_rows.job_attempts(store, exp["job"]["id"])]
    assert outcomes == ["retry", "retry", "failed"]


def test_stopping_hands_the_job_back(
    store: Store, ingest_sample: Callable[..., dict[str, str]]
) -> None:
    exp = experiment_rows.create_experiment(
        store, name="stop", options=OPTIONS.dump(),
        **ingest_sample(("realistic", "scrambled", "observations")),
    )
    started = threading.Event()

    def slow(ctx: JobContext) -> Any:
        started.set()
        for i in range(600):
            ctx.progress(i / 600, "working")
            time.sleep(0.05)
        raise AssertionError("the worker did not stop")

    stop = threading.Event()
    worker = Worker(store, stop_event=stop, handlers={"score": slow})
    thread = threading.Thread(target=worker.run)
    thread.start()
    assert started.wait(20)
    stop.set()
    thread.join(10)
    assert not thread.is_alive()
    job = job_rows.get_job(store, exp["job"]["id"])
    assert (job["status"], job["attempts"]) == ("queued", 0)
    assert [a["outcome"] for a in job_rows.job_attempts(store, job["id"])] == ["released"]


def test_a_worker_that_lost_its_job_records_nothing(
    store: Store, ingest_sample: Callable[..., dict[str, str]]
) -> None:
    exp = experiment_rows.create_experiment(
        store, name="stolen", options=OPTIONS.dump(),
        **ingest_sample(("realistic", "scrambled", "observations")),
    )
    outcome: list[str] = []

    def robbed(ctx: JobContext) -> Any:
        # another worker takes the job over (what a takeover after an expired lease does)
        with store.db.write() as session:
            session.execute(
                update(Job).where(Job.id == ctx.claim.job_id).values(owner_token="f" * 32)
            )
        for _ in range(100):  # the next heartbeat notices; progress then raises LeaseLost
            ctx.progress(0.5, "still computing")
            time.sleep(0.1)
        outcome.append("kept running")
        return run_score(ctx)

    worker = Worker(store, handlers={"score": robbed}, heartbeat_seconds=0.2)
    claimed = worker.run(once=True)
    assert claimed == 1 and outcome == []
    job = job_rows.get_job(store, exp["job"]["id"])
    assert job["status"] == "running"  # still the thief's, untouched by the robbed worker
    with pytest.raises(ResultNotReady):
        experiment_rows.result_files(store, exp["id"])


def test_compare_job(
    store: Store,
    ingest_sample: Callable[..., dict[str, str]],
    check_artifacts: Callable[[], int],
) -> None:
    from run_support import comparison_options

    from app.runs.compare import compare_experiments

    ids = ingest_sample()
    a = experiment_rows.create_experiment(store, name="a", options=OPTIONS.dump(), **ids)
    b = experiment_rows.create_experiment(
        store, name="b", options=run_options(resamples=50, seed=12).dump(), **ids
    )
    Worker(store).run(drain=True)
    cmp = comparison_rows.create_comparison(
        store, baseline=a["id"], candidate=b["id"],
        options=comparison_options(resamples=50, seed=5).dump(),
    )
    Worker(store).run(drain=True)
    done = comparison_rows.get_comparison(store, cmp["id"])
    assert done["status"] == "done", done["job"]
    expected = compare_experiments(experiment_rows.load_result(store, a["id"]), experiment_rows.load_result(store, b["id"]), options=comparison_options(resamples=50, seed=5, confidence=0.95))
    assert done["result"] == json.loads(json.dumps(expected, sort_keys=True))
    check_artifacts()


def test_in_process_worker_thread(
    settings: Any, store: Store, ingest_sample: Callable[..., dict[str, str]]
) -> None:
    exp = experiment_rows.create_experiment(store, name="thread", options=OPTIONS.dump(), **ingest_sample())
    stop = threading.Event()
    thread = start_worker_thread(settings, stop_event=stop)
    try:
        deadline = time.monotonic() + 60
        while job_rows.get_job(store, exp["job"]["id"])["status"] != "done":
            assert time.monotonic() < deadline
            time.sleep(0.1)
    finally:
        stop.set()
        thread.join(10)
    assert not thread.is_alive()
    assert np.isfinite(experiment_rows.load_result(store, exp["id"]).curve()["windows"][0]["gain"]["value"])


def test_score_job_on_a_dask_cluster(
    settings: Any,
    ingest_sample: Callable[..., dict[str, str]],
    sample_files: dict[str, Any],
    store: Store,
) -> None:
    from distributed import LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                      dashboard_address=None) as cluster:
        on_cluster = Store(
            db=store.db,
            artifacts=store.artifacts,
            settings=settings.model_copy(update={"dask_scheduler": cluster.scheduler_address}),
        )
        exp = experiment_rows.create_experiment(
            on_cluster, name="dask", options=OPTIONS.dump(), **ingest_sample()
        )
        Worker(on_cluster).run(drain=True)
        # the tile tasks went through this scheduler
        assert cluster.scheduler.task_prefixes
    job = job_rows.get_job(store, exp["job"]["id"])
    assert job["status"] == "done", job["error"]
    assert _numbers(experiment_rows.load_result(store, exp["id"]).curves) == _numbers(
        _direct(sample_files).curves
    )
