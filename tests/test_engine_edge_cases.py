"""Edge cases: missing data scattered through the inputs, and ensembles of different sizes.

References: the test's own NaN-aware anomalies (tests/cf_factory.py ``reference_anomalies``:
xarray means with ``skipna``; a sample counts where both hindcasts and the observation are
finite, DESIGN 3.4 "over all samples") correlated with ``scipy.stats.pearsonr``. Ensemble-mean
correlation grows with ensemble size (DESIGN 3.1; common practice), hence the member checks.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable

import numpy as np
import pytest
from cf_factory import CasePaths, paired, reference_anomalies
from run_support import run_options
from scipy.stats import pearsonr

from app.runs.scoring import run_engine

#: options that score every window with a day observed and every cell with 4 samples or more
ALL_DATA = {"min_coverage": 0.01, "min_cell_samples": 4}


def _reference_acc(case: CasePaths, name: str = "realistic", **kw: object) -> np.ndarray:
    a = paired(reference_anomalies(case, **kw))
    out = np.full((a.sizes["window"], a.sizes["lat"] * a.sizes["lon"]), np.nan)
    for w in range(a.sizes["window"]):
        x = a[name].isel(window=w).values.reshape(-1, out.shape[1])
        y = a["observed"].isel(window=w).values.reshape(-1, out.shape[1])
        for k in range(out.shape[1]):
            ok = np.isfinite(x[:, k]) & np.isfinite(y[:, k])
            out[w, k] = pearsonr(x[ok, k], y[ok, k]).statistic  # scipy.stats.pearsonr
    return out


@pytest.mark.parametrize(
    "defects",
    [
        {"missing_members": 0.25},
        {"nan_values": 0.15},
        {"nan_obs": 0.2},
        {"nan_obs_days": (3, 10, 11, 12, 50, 97)},
        {"missing_members": 0.2, "nan_values": 0.1, "nan_obs": 0.1},
    ],
    ids=["missing-members", "nan-values", "nan-obs", "nan-obs-days", "all-together"],
)
def test_scattered_nans_give_finite_acc_matching_the_reference(
    make_cf_case: Callable[..., CasePaths], defects: dict
) -> None:
    case = make_cf_case(**defects)
    # the reference keeps every window with a day observed and every cell with 3 samples: so do
    # the options here (the coverage and minimum-sample rules have tests of their own)
    out = run_engine(*case.engine_args(), options=run_options(resamples=100, **ALL_DATA))
    assert np.isfinite(out.cells.acc_realistic).all() and np.isfinite(out.cells.acc_scrambled).all()
    assert np.isfinite(out.cells.p_value).all()
    np.testing.assert_allclose(out.cells.acc_realistic, _reference_acc(case, "realistic"), atol=1e-10)
    np.testing.assert_allclose(out.cells.acc_scrambled, _reference_acc(case, "scrambled"), atol=1e-10)
    ref = paired(reference_anomalies(case))
    n_ref = np.isfinite(ref["observed"]).sum(("year", "slot")).values.reshape(len(out.windows), -1)
    np.testing.assert_array_equal(out.cells.n_samples, n_ref)


def test_a_start_with_every_member_missing_drops_only_that_sample(make_cf_case: Callable[..., CasePaths]) -> None:
    # 14 years, so that every cell keeps the 7 years a cell needs after the lost starts
    case = make_cf_case(missing_members=0.6, members=2, n_years=14)
    out = run_engine(*case.engine_args(), options=run_options(resamples=50, **ALL_DATA))
    ref = paired(reference_anomalies(case))
    n_ref = np.isfinite(ref["observed"]).sum(("year", "slot")).values.reshape(len(out.windows), -1)
    assert (n_ref < 28).any(), "some starts lose every member in this case"
    np.testing.assert_array_equal(out.cells.n_samples, n_ref)
    np.testing.assert_allclose(out.cells.acc_realistic, _reference_acc(case), atol=1e-10)


def test_absent_observation_days_count_like_missing_ones(make_cf_case: Callable[..., CasePaths]) -> None:
    """DESIGN 3.2: the verifying observation of a window is the mean of the observed days the
    window covers. A day absent from the file is a day without an observation, exactly like a day
    stored as missing (NaN/_FillValue): the window keeps the mean of its other days."""
    days = (10, 60)
    as_nan = make_cf_case(nan_obs_days=days)
    absent = make_cf_case(absent_obs_days=days)
    options = run_options(resamples=50)
    a = run_engine(*as_nan.engine_args(), options=options)
    b = run_engine(*absent.engine_args(), options=options)
    np.testing.assert_array_equal(b.cells.n_samples, a.cells.n_samples)
    np.testing.assert_allclose(b.cells.acc_realistic, a.cells.acc_realistic, atol=1e-12)
    np.testing.assert_allclose(b.cells.acc_realistic, _reference_acc(as_nan), atol=1e-10)


def test_different_member_counts_are_flagged(make_cf_case: Callable[..., CasePaths]) -> None:
    case = make_cf_case(members=4, members_scrambled=3)
    out = run_engine(*case.engine_args(), options=run_options(resamples=50))
    warnings = out.summary["warnings"]
    assert any("member counts differ (realistic 4, scrambled 3)" in w and "equalize_members" in w
               for w in warnings), warnings
    assert out.summary["members"] == {"realistic": 4, "scrambled": 3}
    np.testing.assert_allclose(out.cells.acc_realistic, _reference_acc(case), atol=1e-10)


def test_equalize_members_subsamples_to_the_smaller_ensemble(make_cf_case: Callable[..., CasePaths]) -> None:
    case = make_cf_case(members=4, members_scrambled=3)
    plain = run_engine(*case.engine_args(), options=run_options(resamples=50))
    eq1 = run_engine(*case.engine_args(), options=run_options(resamples=50, equalize_members=True, seed=99))
    eq2 = run_engine(*case.engine_args(), options=run_options(resamples=50, equalize_members=True, seed=99))
    assert any("members equalized to 3 per experiment (seed 99)" in w for w in eq1.summary["warnings"])
    assert not any("member counts differ" in w for w in eq1.summary["warnings"])
    # deterministic for a seed
    np.testing.assert_array_equal(eq1.cells.acc_realistic, eq2.cells.acc_realistic)
    np.testing.assert_array_equal(eq1.cube.realistic, eq2.cube.realistic)
    # the realistic ensemble mean now comes from 3 of the 4 members: one subset for every cell
    assert not np.allclose(eq1.cells.acc_realistic, plain.cells.acc_realistic)
    matches = [
        sub for sub in itertools.combinations(range(4), 3)
        if np.allclose(eq1.cells.acc_realistic, _reference_acc(case, members_realistic=sub), atol=1e-10)
    ]
    assert len(matches) == 1, matches
    # the scrambled ensemble (3 members already) keeps all of them
    np.testing.assert_allclose(eq1.cells.acc_scrambled, _reference_acc(case, "scrambled"), atol=1e-10)
    np.testing.assert_allclose(eq1.cells.acc_scrambled, plain.cells.acc_scrambled, atol=1e-12)
