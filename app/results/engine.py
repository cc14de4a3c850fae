"""``score``: run the engine on input files and wrap the output as a :class:`ScoreResult`."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from app.cube.engine import Progress, ScoreOptions, check_inputs, run
from app.results.provenance import code_version, sha256_of
from app.results.result import ScoreResult

__all__ = ["ScoreOptions", "check_inputs", "score"]


def score(
    realistic: str | Path,
    scrambled: str | Path,
    observations: str | Path,
    land_state: str | Path | None = None,
    *,
    options: ScoreOptions,
    experiment: str = "experiment",
    progress: Progress | None = None,
    input_sha256: dict[str, str] | None = None,
    scheduler: str | None = None,
) -> ScoreResult:
    """Score a hindcast pair; deterministic for a given seed.

    ``input_sha256`` may carry checksums known already (the service hashes uploads while they
    stream); missing ones are computed here. ``scheduler`` is a dask.distributed address; without
    it the work runs on a local thread pool.
    """
    paths: dict[str, Any] = {"realistic": realistic, "scrambled": scrambled, "observations": observations}
    if land_state is not None:
        paths["land_state"] = land_state
    known = dict(input_sha256 or {})
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=1) as pool:  # hashlib releases the GIL: hash while scoring
        hashes = {role: pool.submit(sha256_of, p) for role, p in paths.items() if not known.get(role)}
        out = run(realistic, scrambled, observations, land_state, options=options, progress=progress, scheduler=scheduler)
        known.update({role: f.result() for role, f in hashes.items()})
    provenance = {
        "code_version": code_version(),
        "inputs_sha256": {role: known.get(role) or sha256_of(p) for role, p in paths.items()},
        "seed": options.seed,
        "resamples": options.resamples,
        "interval_method": options.interval,
    }
    return ScoreResult.from_run(out, experiment=experiment, provenance=provenance)
