"""Version comparison (DESIGN 3.9): does candidate B keep or improve baseline A's gain?

Both results are read back from their anomaly cubes, restricted to their common (year, start)
samples and verified against the same observations. For each lead window and a region's
cos(lat)-weighted mean series: the difference of gains and of realistic ACCs with a paired
year-block bootstrap (the same resampled years for A, B and the observations), and a random-walk
sign test on the starts where B's realistic-start error is smaller than A's.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from app.cube.assess import Bootstrap, Cube, region_series
from app.cube.regions import region_weights, resolve_region
from app.errors import ParameterError
from app.results.curves import _num
from app.results.result import ScoreResult
from app.stats.bootstrap import resampled_correlations
from app.stats.resample import year_block_counts
from app.stats.signtest import random_walk_sign_test
from app.stats.sums import correlations_from_sums, total_sums, yearly_sums


def compare_results(
    baseline: ScoreResult,
    candidate: ScoreResult,
    *,
    region: str = "all",
    resamples: int = 1000,
    seed: int = 1234,
    confidence: float = 0.95,
    interval: str = "expanded",
) -> dict[str, Any]:
    """JSON-able comparison of two scored experiments (see module docstring)."""
    if not 1 <= resamples <= 10_000:
        raise ParameterError(f"resamples must be in 1..10000, got {resamples}")
    _check_comparable(baseline, candidate)
    cube_a, lat, lon = baseline._cube()
    cube_b, _, _ = candidate._cube()
    ya, sa = _layout(baseline)
    yb, sb = _layout(candidate)
    years = np.intersect1d(ya, yb)
    slots = sorted(set(sa) & set(sb))
    if years.size < 3 or not slots:
        raise ParameterError(
            f"the experiments share {years.size} year(s) and {len(slots)} start slot(s); a comparison needs >= 3 years"
        )
    pick_a = (np.searchsorted(ya, years), [sa.index(s) for s in slots])
    pick_b = (np.searchsorted(yb, years), [sb.index(s) for s in slots])
    a = _subset(cube_a, *pick_a)
    b = _subset(cube_b, *pick_b)
    reg = resolve_region(region)
    weights = region_weights([reg], lat, lon)
    x1a, x2a, y, _ = region_series(a, weights)
    x1b, x2b, _, _ = region_series(b, weights)
    x1a, x2a, y, x1b, x2b = (v[0] for v in (x1a, x2a, y, x1b, x2b))
    joint = np.isfinite(x1a) & np.isfinite(x2a) & np.isfinite(y) & np.isfinite(x1b) & np.isfinite(x2b)
    x1a, x2a, y, x1b, x2b = (np.where(joint, v, np.nan) for v in (x1a, x2a, y, x1b, x2b))

    counts = year_block_counts(years.size, resamples=resamples, seed=seed)
    boot = Bootstrap(counts=counts, confidence=confidence, method=interval)  # type: ignore[arg-type]
    sums_a = yearly_sums(x1a, x2a, y)
    sums_b = yearly_sums(x1b, x2b, y)
    r1a, r2a = correlations_from_sums(total_sums(sums_a))
    r1b, r2b = correlations_from_sums(total_sums(sums_b))
    d1a, d2a = resampled_correlations(sums_a, counts)
    d1b, d2b = resampled_correlations(sums_b, counts)
    gain_diff = boot.interval((d1b - d2b) - (d1a - d2a))
    acc_diff = boot.interval(d1b - d1a)

    windows = []
    for w, win in enumerate(baseline.windows):
        err_a = np.abs(x1a[..., w] - y[..., w]).ravel()  # year-major: chronological within slots
        err_b = np.abs(x1b[..., w] - y[..., w]).ravel()
        st = random_walk_sign_test(err_a, err_b, confidence=confidence)
        windows.append(
            {
                **win.to_dict(),
                "n_samples": int(joint[..., w].sum()),
                "gain_baseline": _num(r1a[w] - r2a[w]),
                "gain_candidate": _num(r1b[w] - r2b[w]),
                "gain_difference": {
                    "value": _num((r1b[w] - r2b[w]) - (r1a[w] - r2a[w])),
                    "low": _num(gain_diff.low[w]),
                    "high": _num(gain_diff.high[w]),
                    "p_value": _num(gain_diff.p_value[w]),
                },
                "acc_realistic_baseline": _num(r1a[w]),
                "acc_realistic_candidate": _num(r1b[w]),
                "acc_realistic_difference": {
                    "value": _num(r1b[w] - r1a[w]),
                    "low": _num(acc_diff.low[w]),
                    "high": _num(acc_diff.high[w]),
                    "p_value": _num(acc_diff.p_value[w]),
                },
                "sign_test": {
                    "candidate_better": st.candidate_better,
                    "baseline_better": st.baseline_better,
                    "ties": st.ties,
                    "walk": int(st.walk[-1]),
                    "bound": round(st.bound, 3),
                    "p_value": _num(st.p_value),
                    "significant": st.significant,
                },
            }
        )
    return {
        "baseline": baseline.meta["experiment"],
        "candidate": candidate.meta["experiment"],
        "variable": baseline.meta["variable"],
        "units": baseline.meta["units"],
        "region": reg.id,
        "aggregation": "acc_of_region_mean",
        "confidence": confidence,
        "resamples": resamples,
        "seed": seed,
        "interval_method": interval,
        "n_years": int(years.size),
        "start_slots": slots,
        "windows": windows,
    }


def _layout(result: ScoreResult) -> tuple[np.ndarray, list[str]]:
    result._cube()
    a = result._anomalies
    assert a is not None
    return a["year"].values.astype(np.int64), [str(s) for s in a["start_slot"].values]


def _subset(cube: Cube, years: np.ndarray, slots: list[int]) -> Cube:
    def pick(v: np.ndarray) -> np.ndarray:
        return v[years][:, slots]

    return Cube(pick(cube.realistic), pick(cube.scrambled), pick(cube.observed), None)


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
