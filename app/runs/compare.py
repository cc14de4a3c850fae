"""Comparing two scored experiments (DESIGN 3.9): does candidate B keep baseline A's gain?

Both results are read back from their anomaly cubes, restricted to their common (year, start)
samples and verified against the same observations; the statistics are
:func:`app.cube.versions.compare_cubes`, the JSON form :func:`app.results.comparison.comparison_json`.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from app.cube.regions import region_weights, resolve_region
from app.cube.versions import compare_cubes, subset
from app.errors import ParameterError
from app.results.comparison import comparison_json
from app.results.result import ScoreResult
from app.runs.options import ComparisonOptions
from app.stats.scramble import DEFAULT_SCRAMBLE


def compare_experiments(
    baseline: ScoreResult, candidate: ScoreResult, *, options: ComparisonOptions
) -> dict[str, Any]:
    """JSON-able comparison of two scored experiments (see module docstring)."""
    _check_comparable(baseline, candidate)
    cube_a, lat, lon = baseline.anomaly_cube()
    cube_b, _, _ = candidate.anomaly_cube()
    ya, sa = baseline.sample_layout()
    yb, sb = candidate.sample_layout()
    years = np.intersect1d(ya, yb)
    slots = sorted(set(sa) & set(sb))
    if years.size < 3 or not slots:
        raise ParameterError(
            f"the experiments share {years.size} year(s) and {len(slots)} start slot(s); a comparison needs >= 3 years"
        )
    a = subset(cube_a, np.searchsorted(ya, years), [sa.index(s) for s in slots])
    b = subset(cube_b, np.searchsorted(yb, years), [sb.index(s) for s in slots])
    region = resolve_region(options.region)
    weights = region_weights([region], lat, lon)
    boot = options.bootstrap.resampling().bootstrap(int(years.size))
    cmp = compare_cubes(
        a, b, weights, boot,
        baseline_scramble=str(baseline.meta.get("scramble", DEFAULT_SCRAMBLE)),
        candidate_scramble=str(candidate.meta.get("scramble", DEFAULT_SCRAMBLE)),
    )
    header = {
        "baseline": baseline.meta["experiment"],
        "candidate": candidate.meta["experiment"],
        "variable": baseline.meta["variable"],
        "units": baseline.meta["units"],
        "region": region.id,
        "aggregation": "acc_of_region_mean",
        "confidence": options.bootstrap.confidence,
        "resamples": options.bootstrap.resamples,
        "seed": options.bootstrap.seed,
        "interval_method": options.bootstrap.interval,
        "n_years": int(years.size),
        "start_slots": slots,
        "scramble": {
            "baseline": baseline.meta.get("scramble", DEFAULT_SCRAMBLE),
            "candidate": candidate.meta.get("scramble", DEFAULT_SCRAMBLE),
        },
        "sign_test": "one vote per year: the sign of the year's summed absolute-error difference "
        "of the realistic runs; exact two-sided binomial p-value (DelSole and Tippett 2016)",
    }
    return comparison_json(cmp, baseline.windows, header=header)


def _check_comparable(a: ScoreResult, b: ScoreResult) -> None:
    if a.meta["variable"] != b.meta["variable"] or a.meta["units"] != b.meta["units"]:
        raise ParameterError(
            f"baseline scores {a.meta['variable']} ({a.meta['units']}) but candidate scores "
            f"{b.meta['variable']} ({b.meta['units']})"
        )
    if a.meta["windows"] != b.meta["windows"]:
        raise ParameterError("baseline and candidate use different lead windows")
    oa = a.provenance.get("inputs_sha256", {}).get("observations")
    ob = b.provenance.get("inputs_sha256", {}).get("observations")
    if oa and ob and oa != ob:
        raise ParameterError(
            "baseline and candidate were verified against different observation files "
            f"(sha256 {oa[:12]}... and {ob[:12]}...); a version comparison needs shared observations"
        )
    ga, gb = a.maps, b.maps
    if ga["lat"].shape != gb["lat"].shape or not np.allclose(ga["lat"], gb["lat"]) or not np.allclose(ga["lon"], gb["lon"]):
        raise ParameterError("baseline and candidate are on different grids")
