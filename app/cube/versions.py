"""Version comparison statistics (DESIGN 3.9) on two anomaly cubes of the same samples.

Given baseline A's and candidate B's cubes restricted to their common (year, start) samples and
verified against the same observations, for one region's cos(lat)-weighted mean series and each
lead window: the difference of gains and of realistic ACCs with a paired year-block bootstrap
(the same resampled years for A, B and the observations), and a random-walk sign test on the
starts where B's realistic-start error is smaller than A's.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from app.cube.assess import Bootstrap, Cube, region_series
from app.stats.bootstrap import resampled_correlations
from app.stats.intervals import Interval
from app.stats.scramble import DEFAULT_SCRAMBLE, corrected_gain
from app.stats.signtest import SignTest, random_walk_sign_test
from app.stats.sums import correlations_from_sums, total_sums, yearly_sums

FloatArray = NDArray[np.float64]


@dataclass
class VersionComparison:
    """Per lead window: both experiments' ACCs, the two differences and the sign tests."""

    acc_realistic_baseline: FloatArray
    acc_scrambled_baseline: FloatArray
    acc_realistic_candidate: FloatArray
    acc_scrambled_candidate: FloatArray
    gain_difference: Interval
    acc_realistic_difference: Interval
    n_samples: NDArray[np.int64]
    n_years: NDArray[np.int64]
    sign_tests: list[SignTest]
    #: the difference of the gains, each corrected for its own scrambled-control design
    gain_difference_corrected_value: FloatArray
    gain_difference_corrected: Interval

    @property
    def gain_baseline(self) -> FloatArray:
        return self.acc_realistic_baseline - self.acc_scrambled_baseline

    @property
    def gain_candidate(self) -> FloatArray:
        return self.acc_realistic_candidate - self.acc_scrambled_candidate


def compare_cubes(
    baseline: Cube,
    candidate: Cube,
    weights: FloatArray,
    boot: Bootstrap,
    *,
    baseline_scramble: str = DEFAULT_SCRAMBLE,
    candidate_scramble: str = DEFAULT_SCRAMBLE,
) -> VersionComparison:
    """Compare two cubes of the same samples over one region (``weights`` is ``(1, n_cells)``).

    The sign test takes one vote per year (the starts of a year share their weather); each
    experiment's gain is also corrected under its own scrambled-control design before the
    difference is taken (:func:`app.stats.scramble.corrected_gain`)."""
    x1a, x2a, y, _ = region_series(baseline, weights)
    x1b, x2b, _, _ = region_series(candidate, weights)
    x1a, x2a, y, x1b, x2b = (v[0] for v in (x1a, x2a, y, x1b, x2b))
    joint = np.isfinite(x1a) & np.isfinite(x2a) & np.isfinite(y) & np.isfinite(x1b) & np.isfinite(x2b)
    x1a, x2a, y, x1b, x2b = (np.where(joint, v, np.nan) for v in (x1a, x2a, y, x1b, x2b))
    sums_a = yearly_sums(x1a, x2a, y)
    sums_b = yearly_sums(x1b, x2b, y)
    r1a, r2a = correlations_from_sums(total_sums(sums_a))
    r1b, r2b = correlations_from_sums(total_sums(sums_b))
    d1a, d2a = resampled_correlations(sums_a, boot.counts)
    d1b, d2b = resampled_correlations(sums_b, boot.counts)
    ny = (sums_a[:, 0] > 0).sum(axis=0).astype(np.float64)  # years of the common series
    tests = []
    for w in range(y.shape[-1]):
        err_a = np.abs(x1a[..., w] - y[..., w])  # (n_years, n_slots): one vote per year
        err_b = np.abs(x1b[..., w] - y[..., w])
        tests.append(random_walk_sign_test(err_a, err_b, confidence=boot.confidence))

    def diff(r1a_: FloatArray, r2a_: FloatArray, r1b_: FloatArray, r2b_: FloatArray) -> FloatArray:
        return corrected_gain(r1b_, r2b_, n_years=ny, design=candidate_scramble) - corrected_gain(
            r1a_, r2a_, n_years=ny, design=baseline_scramble
        )

    point_c = diff(r1a, r2a, r1b, r2b)
    return VersionComparison(
        acc_realistic_baseline=r1a,
        acc_scrambled_baseline=r2a,
        acc_realistic_candidate=r1b,
        acc_scrambled_candidate=r2b,
        gain_difference=boot.interval((d1b - d2b) - (d1a - d2a), (r1b - r2b) - (r1a - r2a)),
        acc_realistic_difference=boot.interval(d1b - d1a, r1b - r1a),
        n_samples=joint.sum(axis=(0, 1)).astype(np.int64),
        n_years=ny.astype(np.int64),
        sign_tests=tests,
        gain_difference_corrected_value=point_c,
        gain_difference_corrected=boot.interval(diff(d1a, d2a, d1b, d2b), point_c),
    )


def subset(cube: Cube, years: NDArray[np.int64], slots: list[int]) -> Cube:
    """The cube on the given year and start-slot positions (the land anomaly is dropped)."""

    def pick(v: FloatArray) -> FloatArray:
        return v[years][:, slots]

    return Cube(pick(cube.realistic), pick(cube.scrambled), pick(cube.observed), None)
