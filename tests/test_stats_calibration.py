"""Calibration of the gain interval and p-value on synthetic paired experiments.

The acceptance test of the bootstrap engine: with 15-30 year-blocks the default interval must
cover the true gain about 95 % of the time and the 5 % test must keep its size, where the plain
percentile interval is too narrow.

Model (per column = one independent replicate of a paired hindcast experiment), years i and
start dates j (S = 8 per year):
    u_i  ~ N(0, 1/2)   shared by all starts of a year (so years are the natural blocks)
    e_ij ~ N(0, 1/2)   start component
    s = u + e          the predictable signal, Var(s) = 1
    y  = s + N(0, 1)          observation,        Var(y)  = 2
    x1 = s + N(0, 1)          realistic start,     Var(x1) = 2,       Cov(x1, y) = 1
    x2 = b s + N(0, 1)        scrambled start,     Var(x2) = b^2 + 1, Cov(x2, y) = b
Population anomaly correlations (the limit of the pooled sample ACC):
    r1 = 1 / sqrt(2 * 2) = 1/2
    r2 = b / sqrt(2 (b^2 + 1))
True gain = r1 - r2 = 1/2 - b / sqrt(2 (b^2 + 1)):
    b = 1   -> 1/2 - 1/2 = 0
    b = 0.3 -> 1/2 - 0.3 / sqrt(2.18) = 0.2968
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from scipy import stats as sps

from app.stats.bootstrap import resampled_correlations
from app.stats.fisher import fisher_z, weighted_z_sums
from app.stats.intervals import INTERVAL_METHODS, Interval, bootstrap_interval, tail_level
from app.stats.resample import year_block_counts
from app.stats.sums import correlations_from_sums, total_sums, yearly_sums

N_COLUMNS = 4000
N_STARTS = 8
RESAMPLES = 1000
YEARS = (15, 30)
SLOPES = (1.0, 0.3)  # b = 1: no gain; b = 0.3: gain ~0.30


def true_gain(b: float) -> float:
    return 0.5 - b / np.sqrt(2.0 * (b * b + 1.0))


@dataclass(frozen=True)
class Run:
    n_years: int
    b: float
    gain: np.ndarray  # full-sample gain per column
    intervals: dict[str, Interval]

    def coverage(self, method: str) -> float:
        iv, g = self.intervals[method], true_gain(self.b)
        return float(np.mean((iv.low <= g) & (g <= iv.high)))

    def rejection(self, method: str, level: float = 0.05) -> float:
        return float(np.mean(self.intervals[method].p_value < level))

    def mean_width(self, method: str) -> float:
        iv = self.intervals[method]
        return float(np.mean(iv.high - iv.low))


def _simulate(n_years: int, b: float, rng: np.random.Generator) -> np.ndarray:
    shape = (n_years, N_STARTS, N_COLUMNS)
    u = rng.normal(0.0, np.sqrt(0.5), (n_years, 1, N_COLUMNS))
    e = rng.normal(0.0, np.sqrt(0.5), shape)
    s = u + e
    y = s + rng.normal(size=shape)
    x1 = s + rng.normal(size=shape)
    x2 = b * s + rng.normal(size=shape)
    return yearly_sums(x1, x2, y)


@pytest.fixture(scope="module")
def runs() -> dict[tuple[int, float], Run]:
    out: dict[tuple[int, float], Run] = {}
    for n_years in YEARS:
        counts = year_block_counts(n_years, resamples=RESAMPLES, seed=7000 + n_years)
        for k, b in enumerate(SLOPES):
            rng = np.random.default_rng([2015, n_years, k])
            yearly = _simulate(n_years, b, rng)
            r1, r2 = correlations_from_sums(total_sums(yearly))
            b1, b2 = resampled_correlations(yearly, counts)
            draws = b1 - b2
            del b1, b2
            intervals = {
                m: bootstrap_interval(
                    draws, point=r1 - r2, confidence=0.95, n_blocks=n_years, method=m
                )
                for m in INTERVAL_METHODS
            }
            out[(n_years, b)] = Run(n_years, b, r1 - r2, intervals)
    return out


@pytest.mark.parametrize("n_years", YEARS)
@pytest.mark.parametrize("b", SLOPES)
def test_simulation_matches_the_analytic_gain(runs, n_years, b):
    # the derivation in the module docstring: the mean sample gain over 4000 replicates sits at
    # the analytic gain (the sample correlation's O(1/n) bias is far below 0.01 here)
    assert np.mean(runs[(n_years, b)].gain) == pytest.approx(true_gain(b), abs=0.01)


@pytest.mark.parametrize("n_years", YEARS)
@pytest.mark.parametrize("b", SLOPES)
def test_default_interval_covers_the_true_gain(runs, n_years, b):
    run = runs[(n_years, b)]
    cover = run.coverage("expanded")
    # nominal 95 %; 92.5-97 % allows ~4 binomial SEs (sqrt(.95 * .05 / 4000) = 0.0034)
    # and the bootstrap's own O(1/n) error
    assert 0.925 <= cover <= 0.97, f"Y={n_years} b={b}: expanded coverage {cover:.4f}"
    # DESIGN.md 3.6: interval and p-value agree
    iv = run.intervals["expanded"]
    np.testing.assert_array_equal((iv.low > 0) | (iv.high < 0), iv.p_value < 0.05)


@pytest.mark.parametrize("n_years", YEARS)
def test_five_percent_test_keeps_its_size(runs, n_years):
    size = runs[(n_years, 1.0)].rejection("expanded")
    assert 0.01 <= size <= 0.06, f"Y={n_years}: rejection of a true zero gain {size:.4f}"


def test_plain_percentile_is_too_narrow_at_15_years(runs):
    # Why calibration is needed: with 15 year-blocks the percentile interval under-covers
    # (bootstrap spread biased low by sqrt((n-1)/n), normal where t quantiles belong:
    # Hesterberg 2015, section 5.5). Its coverage is about 0.92; one scenario of 4000 replicates
    # has a binomial SE of 0.0043, so the 92.5 % bound is checked on both scenarios pooled
    # (8000 replicates, SE 0.003), and the paired gap to the expanded interval per scenario.
    pooled = np.mean([runs[(15, b)].coverage("percentile") for b in SLOPES])
    assert pooled < 0.925, f"percentile coverage at Y=15, both scenarios pooled: {pooled:.4f}"
    for b in SLOPES:
        run = runs[(15, b)]
        assert run.coverage("expanded") - run.coverage("percentile") >= 0.015, b
    # and its 5 % test is liberal: it rejects a true zero gain too often
    assert runs[(15, 1.0)].rejection("percentile") > 0.06


@pytest.mark.parametrize("n_years", YEARS)
def test_power_and_width_ratio(runs, n_years, record_property):
    null, alt = runs[(n_years, 1.0)], runs[(n_years, 0.3)]
    power = alt.rejection("expanded")
    ratio = np.mean([r.mean_width("expanded") / r.mean_width("percentile") for r in (null, alt)])
    # For a near-normal bootstrap distribution the width ratio is the ratio of the normal
    # quantiles at the two tail levels (Hesterberg 2015 expanded tail; scipy.stats.norm)
    z_exp = sps.norm.isf(tail_level(0.95, n_blocks=n_years))
    z_pct = sps.norm.isf(0.025)
    figures = {
        "coverage_expanded_b1": null.coverage("expanded"),
        "coverage_expanded_b0.3": alt.coverage("expanded"),
        "coverage_percentile_b1": null.coverage("percentile"),
        "coverage_percentile_b0.3": alt.coverage("percentile"),
        "coverage_centred_b1": null.coverage("centred"),
        "coverage_centred_b0.3": alt.coverage("centred"),
        "size_expanded": null.rejection("expanded"),
        "size_centred": null.rejection("centred"),
        "power_centred_gain0.30": alt.rejection("centred"),
        "size_percentile": null.rejection("percentile"),
        "power_expanded_gain0.30": power,
        "power_percentile_gain0.30": alt.rejection("percentile"),
        "width_ratio_expanded_over_percentile": float(ratio),
        "width_ratio_normal_theory": float(z_exp / z_pct),
    }
    print(f"\ncalibration Y={n_years}, S={N_STARTS}, columns={N_COLUMNS}, B={RESAMPLES}:")
    for name, value in figures.items():
        print(f"  {name:40s} {value:.4f}")
        record_property(f"Y{n_years}_{name}", round(value, 4))
    # loose lower bounds (the lead measured power 0.70 at Y=15, 0.96 at Y=30)
    assert power >= (0.60 if n_years == 15 else 0.90)
    assert ratio >= (1.05 if n_years == 15 else 1.02)
    assert ratio == pytest.approx(z_exp / z_pct, abs=0.03)


# ---------------------------------------------------------------------------------------------
# Issue 7 item 3: designs where much of the variance is shared by the starts of a year.
#
# Every component (signal, observation noise, both forecast noises) is split into a part shared
# by the 8 starts of a year (fraction f of its variance) and a part of its own:
#     c = sqrt(f) N(0, v)_year + sqrt(1 - f) N(0, v)_start
# so x1, x2 and y each have the fraction f of their variance shared within a year, and the
# population correlations, hence the true gain, are those of the module docstring (the split
# changes no variance or covariance). f = 0.8 leaves about 1.2 independent samples a year.

SHARED = (0.5, 0.8)
SEEDS = (0, 1, 2)


def _simulate_shared(n_years: int, b: float, f: float, rng: np.random.Generator) -> np.ndarray:
    def part(v: float) -> np.ndarray:
        year = rng.normal(0.0, np.sqrt(f * v), (n_years, 1, N_COLUMNS))
        return year + rng.normal(0.0, np.sqrt((1.0 - f) * v), (n_years, N_STARTS, N_COLUMNS))

    s = part(1.0)
    y = s + part(1.0)
    x1 = s + part(1.0)
    x2 = b * s + part(1.0)
    return yearly_sums(x1, x2, y)


@pytest.fixture(scope="module")
def shared_runs() -> dict[tuple[int, float, float, int], Run]:
    out: dict[tuple[int, float, float, int], Run] = {}
    for n_years in YEARS:
        for f in SHARED:
            for seed in SEEDS:
                counts = year_block_counts(n_years, resamples=RESAMPLES, seed=1000 * seed + n_years)
                for k, b in enumerate(SLOPES):
                    rng = np.random.default_rng([2024, n_years, int(100 * f), seed, k])
                    yearly = _simulate_shared(n_years, b, f, rng)
                    r1, r2 = correlations_from_sums(total_sums(yearly))
                    b1, b2 = resampled_correlations(yearly, counts)
                    draws = b1 - b2
                    del b1, b2
                    intervals = {
                        m: bootstrap_interval(
                            draws, point=r1 - r2, confidence=0.95, n_blocks=n_years, method=m
                        )
                        for m in INTERVAL_METHODS
                    }
                    out[(n_years, f, b, seed)] = Run(n_years, b, r1 - r2, intervals)
    return out


@pytest.mark.slow
def test_gain_test_keeps_its_size_when_the_year_is_shared(shared_runs, record_property):
    """Default method: size of the 5 % test <= 0.06 and 95 % coverage 0.93-0.97 at 15 and 30
    years, B = 1000, f = 0.5 and 0.8, three seeds each; the table of every method is printed."""
    from app.stats.intervals import DEFAULT_INTERVAL_METHOD as default

    print(f"\ngain, shared-year designs, S={N_STARTS}, columns={N_COLUMNS}, B={RESAMPLES}")
    print("years  f    method      size   cover0  cover.30 power  width/pct  (mean over seeds)")
    failures = []
    for n_years in YEARS:
        for f in SHARED:
            for m in INTERVAL_METHODS:
                nulls = [shared_runs[(n_years, f, 1.0, s)] for s in SEEDS]
                alts = [shared_runs[(n_years, f, 0.3, s)] for s in SEEDS]
                size = [r.rejection(m) for r in nulls]
                c0 = [r.coverage(m) for r in nulls]
                c1 = [r.coverage(m) for r in alts]
                power = [r.rejection(m) for r in alts]
                width = [r.mean_width(m) / r.mean_width("percentile") for r in nulls + alts]
                print(
                    f"{n_years:5d} {f:4.1f}  {m:10s} {np.mean(size):.4f} {np.mean(c0):.4f} "
                    f"{np.mean(c1):.4f}  {np.mean(power):.3f}  {np.mean(width):.3f}"
                    f"   size range {min(size):.4f}-{max(size):.4f}"
                )
                record_property(f"Y{n_years}_f{f}_{m}_size_max", round(max(size), 4))
                if m == default:
                    for seed, sz, a, g in zip(SEEDS, size, c0, c1, strict=True):
                        if sz > 0.06 or not (0.93 <= a <= 0.97 and 0.93 <= g <= 0.97):
                            failures.append((n_years, f, seed, sz, a, g))
    assert not failures, f"default {default!r} out of bounds (Y, f, seed, size, cov0, cov.30): {failures}"


# ---------------------------------------------------------------------------------------------
# Issue 7 item 3: the region mean of cell ACCs, taken in Fisher z space.
#
# C = 2000 cells of one region, years i, starts j (8 a year). The predictable signal is
# large-scale: one series for the whole region, 80 % of its variance shared by the starts of a
# year, S_ij = sqrt(0.8) U_i + sqrt(0.2) E_ij (Var 1); cell c sees a_c S. Noises of the
# observation and the forecast are N(0, 1) with a part shared by all cells (spatial correlation
# RHO) and a part of the cell's own:
#     y_c = a_c S + n_y,c,   x_c = a_c S + n_x,c,   Var = a_c^2 + 1,   Cov(x_c, y_c) = a_c^2
# so the population ACC of cell c is rho_c = a_c^2 / (a_c^2 + 1) (a_c^2 from 0.25 to 1: ACC 0.2 to
# 0.5), and the true region mean ACC, in closed form, is
#     tanh( sum_c w_c arctanh(rho_c) / sum_c w_c ),    w_c = cos(lat_c) (n_c - 3), n_c = 8 Y
# (all cells have the same n here, so the (n - 3) factor cancels). Cells are strongly dependent:
# they share the signal series and half of the noise variance.

REGION_CELLS = 2000
REGION_RESAMPLES = 400  # to afford 100 replicates a case within the test's time
REGION_REPLICATES = 100
REGION_RHO = 0.5


def _region_truth() -> tuple[np.ndarray, np.ndarray, float]:
    a2 = np.linspace(0.25, 1.0, REGION_CELLS)
    area = np.cos(np.deg2rad(np.linspace(30.0, 60.0, REGION_CELLS)))[None, :]
    rho = a2 / (a2 + 1.0)
    truth_z = float(np.sum(area * np.arctanh(rho)) / np.sum(area))
    return np.sqrt(a2), area, truth_z


def _region_case(n_years: int, rho_noise: float, replicates: int, *, shared_signal: bool = True):
    """Replicates of the region mean in z: point, the intervals of every method, the truth."""
    amp, area, truth_z = _region_truth()
    n = np.full(REGION_CELLS, float(n_years * N_STARTS))
    out = []
    for rep in range(replicates):
        rng = np.random.default_rng([77, n_years, int(100 * rho_noise), int(shared_signal), rep])
        width = 1 if shared_signal else REGION_CELLS
        sig = np.sqrt(0.8) * rng.normal(size=(n_years, 1, width)) + np.sqrt(0.2) * rng.normal(
            size=(n_years, N_STARTS, width)
        )

        def noise(rng: np.random.Generator = rng) -> np.ndarray:
            common = np.sqrt(rho_noise) * rng.normal(size=(n_years, N_STARTS, 1))
            return common + np.sqrt(1.0 - rho_noise) * rng.normal(size=(n_years, N_STARTS, REGION_CELLS))

        s = amp * sig
        yearly = yearly_sums(s + noise(), noise(), s + noise())  # realistic, scrambled, observed
        r1, _ = correlations_from_sums(total_sums(yearly))
        counts = year_block_counts(n_years, resamples=REGION_RESAMPLES, seed=1000 * rep + n_years)
        d1, _ = resampled_correlations(yearly, counts)
        num, den = weighted_z_sums(fisher_z(r1), n, area)
        z_point = num[0] / den[0]
        num, den = weighted_z_sums(fisher_z(d1), n, area)  # (1, B)
        z_draws = num[0] / den[0]
        ivs = {
            m: bootstrap_interval(z_draws, point=z_point, n_blocks=n_years, method=m)
            for m in INTERVAL_METHODS
        }
        out.append((z_point, float(np.median(z_draws)), ivs))
    return out, truth_z


def _summarise(case, truth_z, label, record_property):
    print(f"\nregion mean of ACC (z space), {label}: truth ACC {np.tanh(truth_z):.3f}")
    zp = np.array([c[0] for c in case])
    drift = np.array([c[1] for c in case]) - zp
    print(f"  point bias in z {np.mean(zp) - truth_z:+.4f}, sd {np.std(zp):.4f}, "
          f"median drift of the draws {np.mean(drift):+.4f}")
    stats = {}
    for m in INTERVAL_METHODS:
        lo = np.array([float(c[2][m].low) for c in case])
        hi = np.array([float(c[2][m].high) for c in case])
        cover = float(np.mean((lo <= truth_z) & (truth_z <= hi)))
        contains = int(np.sum((lo <= zp) & (zp <= hi)))
        stats[m] = (cover, contains)
        print(f"  {m:10s} coverage {cover:.3f}  contains its point {contains}/{len(case)}")
        record_property(f"{label}_{m}_coverage", round(cover, 3))
    return stats


@pytest.mark.slow
@pytest.mark.parametrize("n_years", YEARS)
def test_region_mean_of_acc_centred_interval_covers(n_years, record_property):
    case, truth_z = _region_case(n_years, REGION_RHO, REGION_REPLICATES)
    stats = _summarise(case, truth_z, f"Y{n_years}_rho{REGION_RHO}", record_property)
    cover, contains = stats["centred"]
    assert contains == REGION_REPLICATES  # always contains its point, by construction
    # nominal 95 %; 100 replicates have a binomial SE of 0.022
    assert 0.92 <= cover <= 0.97, f"Y={n_years}: centred coverage {cover:.3f}"


@pytest.mark.slow
def test_region_mean_of_independent_cells_old_interval_lies_beside_the_point(record_property):
    # The failure the issue measured: cells with signals of their own (independent cells) average
    # out the spread but not the drift of the bootstrap mean; the uncentred interval then
    # excludes its own point. The centred one contains it by construction. Neither covers the
    # population value here: the point itself is biased (sample correlations of block-dependent
    # data are biased low in z by O(1/Y)), by more than the tiny spread of a 2000-cell mean.
    case, truth_z = _region_case(15, 0.0, 20, shared_signal=False)
    stats = _summarise(case, truth_z, "Y15_independent_cells", record_property)
    assert stats["expanded"][1] <= 2  # the old interval misses its point in (nearly) every case
    assert stats["centred"][1] == 20
