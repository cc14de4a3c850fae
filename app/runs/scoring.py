"""Scoring a hindcast pair: the engine run, its checksums and provenance, the result object.

:func:`score_files` is what ``landlift score``, the score job and the tests call; it runs the
engine (:func:`app.cube.pipeline.run`) on the options' :class:`~app.cube.pipeline.Scoring` and
wraps the output as a :class:`~app.results.result.ScoreResult` with its provenance.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

from app.cube.pipeline import Progress, RunOutput, run
from app.provenance import code_version, content_sha256
from app.results.result import ScoreResult
from app.runs.options import RunOptions


def run_engine(
    realistic: str | Path,
    scrambled: str | Path,
    observations: str | Path,
    land_state: str | Path | None = None,
    *,
    options: RunOptions,
    memory_budget: int | None = None,
    progress: Progress | None = None,
    scheduler: str | None = None,
    threads: int | None = None,
) -> RunOutput:
    """The engine's arrays for these options (what :func:`score_files` formats)."""
    return run(
        realistic, scrambled, observations, land_state,
        scoring=options.scoring(), memory_budget=memory_budget, progress=progress,
        scheduler=scheduler, threads=threads,
    )


def score_files(
    realistic: str | Path,
    scrambled: str | Path,
    observations: str | Path,
    land_state: str | Path | None = None,
    *,
    options: RunOptions,
    experiment: str = "experiment",
    progress: Progress | None = None,
    input_sha256: dict[str, str] | None = None,
    scheduler: str | None = None,
    memory_budget: int | None = None,
) -> ScoreResult:
    """Score a hindcast pair; deterministic for a given seed.

    ``input_sha256`` may carry checksums known already (the service hashes uploads while they
    stream); missing ones are computed here, while the engine runs (hashlib releases the GIL).
    ``scheduler`` is a dask.distributed address; without it the work runs on a local thread
    pool.
    """
    paths: dict[str, Any] = {"realistic": realistic, "scrambled": scrambled, "observations": observations}
    if land_state is not None:
        paths["land_state"] = land_state
    known = dict(input_sha256 or {})
    with ThreadPoolExecutor(max_workers=1) as pool:
        hashes = {role: pool.submit(content_sha256, p) for role, p in paths.items() if not known.get(role)}
        out = run_engine(
            realistic, scrambled, observations, land_state, options=options,
            memory_budget=memory_budget, progress=progress, scheduler=scheduler,
        )
        known.update({role: f.result() for role, f in hashes.items()})
    boot = options.bootstrap
    provenance = {
        "code_version": code_version(),
        "inputs_sha256": {role: known[role] for role in paths},
        "seed": boot.seed,
        "resamples": boot.resamples,
        "interval_method": boot.interval,
        "scramble": options.scramble,
    }
    return ScoreResult.from_run(out, experiment=experiment, provenance=provenance, options=options.dump())
