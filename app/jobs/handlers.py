"""What each job kind does.

A handler gets a :class:`JobContext`, does the work (reporting progress through
``ctx.progress``, which checks the owner token), stores its output files in the artifact store,
and returns a *recorder*: a function of a SQLAlchemy session that writes the result rows. The
worker calls the recorder inside the same owner-checked transaction that marks the job ``done``,
so the rows appear only if this worker still owns the job, and only after the files are whole.

Options were validated when the run was submitted; a job reloads them without checking again.
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from sqlalchemy.orm import Session

from app.jobs.queue import Claim
from app.store import Store, comparison_rows, experiment_rows
from app.store.common import media_type_for

Recorder = Callable[[Session], None]


@dataclass
class JobContext:
    store: Store
    claim: Claim
    #: progress(fraction 0..1, message): owner-checked, throttled; raises LeaseLost/JobCancelled
    progress: Callable[[float, str], None]
    #: raises LeaseLost when the lease is gone, JobCancelled when the worker is stopping
    check: Callable[[], None]

    @property
    def payload(self) -> dict[str, Any]:
        return self.claim.payload


Handler = Callable[[JobContext], Recorder | None]


def run_score(ctx: JobContext) -> Recorder:
    """Score an experiment: payload ``{"experiment_id", "inputs": {slot: {"dataset_id", "path",
    "sha256"}}, "options": RunOptions dump}``."""
    from app.runs.options import RunOptions
    from app.runs.scoring import score_files

    payload = ctx.payload
    experiment_id = payload["experiment_id"]
    options = RunOptions.reload(payload["options"])
    inputs = payload["inputs"]
    paths = {slot: inputs[slot]["path"] for slot in inputs}
    sha256 = {slot: inputs[slot]["sha256"] for slot in inputs if inputs[slot].get("sha256")}
    ctx.progress(0.0, "opening inputs")

    def engine_progress(fraction: float, message: str) -> None:
        # the engine's 0..1 is the job's 0.02..0.95; storing the files is the rest
        ctx.progress(0.02 + 0.93 * min(1.0, max(0.0, float(fraction))), message)

    settings = ctx.store.settings
    result = score_files(
        paths["realistic"],
        paths["scrambled"],
        paths["observations"],
        paths.get("land_state"),
        options=options,
        experiment=experiment_id,
        progress=engine_progress,
        input_sha256=sha256,
        scheduler=settings.dask_scheduler,
        memory_budget=settings.memory_budget,
    )
    ctx.check()
    ctx.progress(0.97, "storing results")
    work = ctx.store.artifacts.temp_dir()
    try:
        saved = result.save(work)
        refs = {
            name: ctx.store.artifacts.put_file(path, media_type=media_type_for(name))
            for name, path in saved.items()
        }
    finally:
        shutil.rmtree(work, ignore_errors=True)
    provenance = dict(result.provenance)

    def record(session: Session) -> None:
        experiment_rows.record_score_result(
            session, experiment_id=experiment_id, files=refs, provenance=provenance
        )

    return record


def run_compare(ctx: JobContext) -> Recorder:
    """Compare two finished experiments: payload ``{"comparison_id", "baseline", "candidate",
    "options": ComparisonOptions dump}``."""
    from app.runs.compare import compare_experiments
    from app.runs.options import ComparisonOptions

    payload = ctx.payload
    ctx.progress(0.0, "loading results")
    baseline = experiment_rows.load_result(ctx.store, payload["baseline"])
    candidate = experiment_rows.load_result(ctx.store, payload["candidate"])
    ctx.check()
    ctx.progress(0.2, "comparing")
    out = compare_experiments(
        baseline, candidate, options=ComparisonOptions.reload(payload.get("options") or {})
    )
    ctx.check()
    data = json.dumps(out, sort_keys=True, allow_nan=False).encode("utf-8")
    ref = ctx.store.artifacts.put_bytes(data, media_type="application/json")
    comparison_id = payload["comparison_id"]

    def record(session: Session) -> None:
        comparison_rows.record_comparison_result(session, comparison_id=comparison_id, ref=ref)

    return record


HANDLERS: dict[str, Handler] = {"score": run_score, "compare": run_compare}
