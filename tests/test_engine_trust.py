"""The engine's numbers a verification scientist must be able to defend (issue 7, wired end to end).

Each check goes through the engine (``run_engine`` / ``score_files`` / ``assess_cells``) on the
sample scenario or the synthetic CF case; the kernels themselves are tested against their
sources in tests/test_stats_*.py.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest
from cf_factory import SAMPLE_BELT, CasePaths
from run_support import run_options

from app.cube.assess import Bootstrap, Cube, assess_cells
from app.runs.scoring import run_engine, score_files
from app.stats.intervals import min_p_value
from app.stats.resample import year_block_counts


def test_p_values_are_never_zero(sample_result) -> None:
    """(r + 1)/(B + 1) through the tail map (Phipson and Smyth 2010): the smallest p-value of 1000
    resamples over 20 years is A(1/1001) for the expanded map, and cells reach it, none below."""
    p = sample_result.maps["p_value"].values
    floor = min_p_value(1000, n_blocks=20, method="expanded")
    finite = p[np.isfinite(p)]
    assert finite.size and finite.min() == pytest.approx(floor, rel=1e-12)
    assert (finite > 0).all()
    assert (np.isclose(finite, floor)).sum() > 0  # week-1 cells where no resample crossed 0
    for curve in sample_result.curves:
        for w in curve["windows"]:
            assert w["gain"]["p_value"] is None or w["gain"]["p_value"] > 0


def test_region_means_of_acc_are_read_around_their_point(sample_result) -> None:
    """Hall, Martin and Schucany (1989): the centred interval of the Fisher-z mean contains it."""
    for region in ("all", SAMPLE_BELT):
        curve = sample_result.curve(region, "region_mean_of_acc")
        assert curve["interval_method"] == "centred"
        for w in curve["windows"]:
            for key in ("acc_realistic", "acc_scrambled", "gain", "gain_corrected"):
                v = w[key]
                assert v["low"] <= v["value"] <= v["high"], (region, w["label"], key, v)


def test_corrected_gain_under_each_design(make_cf_case: Callable[..., CasePaths]) -> None:
    """other_years: gain x (n-1)/n with the raw p-value (app.stats.scramble); independent: no
    corrected fields at all, the raw gain is the gain."""
    case = make_cf_case()
    other = score_files(*case.engine_args(), options=run_options(resamples=100, seed=2))
    plain = score_files(*case.engine_args(), options=run_options(resamples=100, seed=2, scramble="independent"))
    assert "gain_corrected" in other.maps and "gain_corrected" not in plain.maps
    n = other.maps["n_years"].values
    np.testing.assert_allclose(
        other.maps["gain_corrected"].values, other.maps["gain"].values * (n - 1) / n, rtol=1e-6, equal_nan=True
    )
    np.testing.assert_allclose(
        other.maps["gain_corrected_low"].values, other.maps["gain_low"].values * (n - 1) / n,
        rtol=1e-6, equal_nan=True,
    )
    for w_other, w_plain in zip(other.curve()["windows"], plain.curve()["windows"], strict=True):
        assert w_other["gain"] == w_plain["gain"]  # the raw numbers do not depend on the design
        assert "gain_corrected" in w_other and "gain_corrected" not in w_plain
    assert other.provenance["scramble"] == "other_years" and plain.provenance["scramble"] == "independent"


@pytest.mark.parametrize("defect", ["nan_obs_days", "absent_obs_days"])
def test_windows_need_most_of_their_days_observed(make_cf_case: Callable[..., CasePaths], defect: str) -> None:
    """Days 3 and 4 of the record missing: the week-1 window of the first start keeps 5 of its 7
    days, below the default 0.8 (common practice) and above 0.7. The dropped samples are counted:
    per start date when the days are absent from the file, per cell when they are NaN in it."""
    case = make_cf_case(**{defect: (2, 3)})
    strict = run_engine(*case.engine_args(), options=run_options(resamples=20, min_cell_samples=4))
    loose = run_engine(*case.engine_args(), options=run_options(resamples=20, min_cell_samples=4, min_coverage=0.7))
    lost = loose.cells.n_samples - strict.cells.n_samples  # (window, cell)
    assert lost[0].min() >= 1 and (lost[1:] == 0).all()
    coverage = strict.summary["coverage"]
    assert coverage["min_fraction"] == 0.8
    by_start, by_cell = coverage["dropped_start_dates"]["week 1"], coverage["dropped_cell_samples"]["week 1"]
    if defect == "absent_obs_days":
        assert by_start == lost[0].max() == lost[0].min() and by_cell == 0
    else:
        assert by_start == 0 and by_cell == lost[0].sum()
    assert loose.summary["coverage"]["dropped_start_dates"]["week 1"] == 0


def test_a_thin_cell_neither_scores_nor_moves_the_region_mean() -> None:
    """The issue's example: 100 cells with r about 0.3 and one cell with 3 samples and r = 1. The
    thin cell is not scored (too few samples) and enters the region mean with weight 0 (Fisher
    z weights n - 3; Fisher 1921), so the region mean equals that of the 100 cells alone."""
    rng = np.random.default_rng(5)
    Y, S = 15, 4
    signal = rng.standard_normal((Y, S, 1, 101))
    obs = signal + 3.0 * rng.standard_normal((Y, S, 1, 101))
    x1 = signal + 0.5 * rng.standard_normal((Y, S, 1, 101))
    x2 = 0.5 * rng.standard_normal((Y, S, 1, 101))
    for a in (obs, x1, x2):
        a[3:, :, :, 100] = np.nan  # the thin cell: 3 years x 1 start
        a[:3, 1:, :, 100] = np.nan
    x1[:3, 0, 0, 100] = obs[:3, 0, 0, 100]  # r = 1 there
    cube = Cube(x1, x2, obs, None)
    boot = Bootstrap(counts=year_block_counts(Y, resamples=200, seed=1), confidence=0.95, method="expanded")
    weights = np.ones((1, 101))
    with_thin = assess_cells(cube, boot, weights)
    alone = assess_cells(Cube(x1[..., :100], x2[..., :100], obs[..., :100], None), boot, weights[:, :100])
    assert np.isnan(with_thin.acc_realistic[0, 100]) and np.isnan(with_thin.p_value[0, 100])
    assert with_thin.region_mean[0].acc_realistic[0] == pytest.approx(alone.region_mean[0].acc_realistic[0], abs=1e-12)
    assert 0.2 < alone.region_mean[0].acc_realistic[0] < 0.4
