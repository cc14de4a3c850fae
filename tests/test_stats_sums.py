"""app.stats.sums against scipy.stats.pearsonr and xskillscore.pearson_r."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
import xskillscore as xs
from scipy import stats as sps

from app.stats.sums import (
    MIN_SAMPLES,
    N_STATS,
    STAT_NAMES,
    correlations_from_sums,
    total_sums,
    yearly_sums,
)


def _acc(realistic: np.ndarray, scrambled: np.ndarray, observed: np.ndarray):
    return correlations_from_sums(total_sums(yearly_sums(realistic, scrambled, observed)))


def _flat(a: np.ndarray) -> np.ndarray:
    """(n_years, n_per_year, n_columns) -> (n_samples, n_columns)."""
    return a.reshape(-1, a.shape[-1])


def test_yearly_sums_layout(paired_samples):
    x1, x2, y = paired_samples.arrays()
    sums = yearly_sums(x1, x2, y)
    assert sums.shape == (paired_samples.n_years, N_STATS, x1.shape[-1])
    # each statistic is the plain per-year sum named in STAT_NAMES (numpy.sum as reference)
    terms = {
        "n": np.ones_like(x1), "x1": x1, "x2": x2, "y": y, "x1x1": x1 * x1, "x2x2": x2 * x2,
        "yy": y * y, "x1y": x1 * y, "x2y": x2 * y,
    }
    for k, name in enumerate(STAT_NAMES):
        np.testing.assert_allclose(sums[:, k], terms[name].sum(axis=1), rtol=1e-12)


def test_correlations_equal_scipy_pearsonr(paired_samples):
    x1, x2, y = paired_samples.arrays()
    r1, r2 = _acc(x1, x2, y)
    fx1, fx2, fy = _flat(x1), _flat(x2), _flat(y)
    for c in range(fy.shape[1]):
        # reference: scipy.stats.pearsonr (centred Pearson correlation)
        assert r1[c] == pytest.approx(sps.pearsonr(fx1[:, c], fy[:, c]).statistic, abs=1e-10)
        assert r2[c] == pytest.approx(sps.pearsonr(fx2[:, c], fy[:, c]).statistic, abs=1e-10)


def test_correlations_equal_xskillscore_pearson_r(paired_samples):
    x1, x2, y = paired_samples.arrays()
    r1, r2 = _acc(x1, x2, y)
    dims = ("sample", "column")
    obs = xr.DataArray(_flat(y), dims=dims)
    # reference: xskillscore.pearson_r over the sample dimension
    ref1 = xs.pearson_r(xr.DataArray(_flat(x1), dims=dims), obs, dim="sample").values
    ref2 = xs.pearson_r(xr.DataArray(_flat(x2), dims=dims), obs, dim="sample").values
    np.testing.assert_allclose(r1, ref1, rtol=0, atol=1e-10)
    np.testing.assert_allclose(r2, ref2, rtol=0, atol=1e-10)


def test_stat_axis_option(paired_samples):
    sums = total_sums(yearly_sums(*paired_samples.arrays()))
    r_first = correlations_from_sums(sums)
    r_last = correlations_from_sums(np.moveaxis(sums, 0, -1), stat_axis=-1)
    np.testing.assert_array_equal(r_first[0], r_last[0])
    np.testing.assert_array_equal(r_first[1], r_last[1])


def test_nans_use_jointly_valid_samples(paired_samples_with_gaps):
    x1, x2, y = paired_samples_with_gaps.arrays()
    r1, r2 = _acc(x1, x2, y)
    fx1, fx2, fy = _flat(x1), _flat(x2), _flat(y)
    joint = np.isfinite(fx1) & np.isfinite(fx2) & np.isfinite(fy)
    assert (~joint).any(axis=0).all(), "fixture should leave gaps in every column"
    for c in range(fy.shape[1]):
        ok = joint[:, c]
        # reference: scipy.stats.pearsonr on the samples where all three series are finite
        assert r1[c] == pytest.approx(sps.pearsonr(fx1[ok, c], fy[ok, c]).statistic, abs=1e-10)
        assert r2[c] == pytest.approx(sps.pearsonr(fx2[ok, c], fy[ok, c]).statistic, abs=1e-10)
    # reference: xskillscore.pearson_r with skipna on the jointly masked series
    dims = ("sample", "column")
    masked = [xr.DataArray(np.where(joint, a, np.nan), dims=dims) for a in (fx1, fx2, fy)]
    ref1 = xs.pearson_r(masked[0], masked[2], dim="sample", skipna=True).values
    ref2 = xs.pearson_r(masked[1], masked[2], dim="sample", skipna=True).values
    np.testing.assert_allclose(r1, ref1, rtol=0, atol=1e-10)
    np.testing.assert_allclose(r2, ref2, rtol=0, atol=1e-10)


def test_fewer_than_three_valid_samples_give_nan(rng):
    shape = (4, 2, 3)  # 8 samples in each of 3 columns
    x1, x2, y = (rng.normal(size=shape) for _ in range(3))
    keep = np.zeros(shape, dtype=bool)
    keep[0, :, 0] = True  # column 0: 2 valid samples
    keep[0, :, 1] = True
    keep[1, 0, 1] = True  # column 1: 3 valid samples
    keep[:, :, 2] = True  # column 2: all 8
    y = np.where(keep, y, np.nan)
    r1, r2 = _acc(x1, x2, y)
    assert MIN_SAMPLES == 3
    assert np.isnan(r1[0]) and np.isnan(r2[0])
    for c in (1, 2):
        ok = keep[..., c].ravel()
        # reference: scipy.stats.pearsonr on the valid samples
        ref = sps.pearsonr(x1[..., c].ravel()[ok], y[..., c].ravel()[ok]).statistic
        assert r1[c] == pytest.approx(ref, abs=1e-10)
        assert np.isfinite(r2[c])


# Zero variance makes the centred correlation undefined (0/0): NaN is the contract of
# correlations_from_sums. Constants that are not exactly representable in binary (0.1, 1/3,
# 3.7) test that the variance from raw sums, sum(x^2) - sum(x)^2 / n, is recognised as zero
# despite rounding.
@pytest.mark.parametrize("constant", [0.0, 2.0, 0.1, 1.0 / 3.0, 3.7, -0.7])
@pytest.mark.parametrize("which", ["realistic", "observed"])
def test_zero_variance_gives_nan(rng, constant, which):
    shape = (15, 8, 1)
    arrays = {k: rng.normal(size=shape) for k in ("realistic", "scrambled", "observed")}
    arrays[which] = np.full(shape, constant)
    r1, r2 = _acc(arrays["realistic"], arrays["scrambled"], arrays["observed"])
    assert np.isnan(r1[0]), f"constant {which} = {constant!r} gave r1 = {r1[0]!r}, expected NaN"
    if which == "observed":
        assert np.isnan(r2[0]), f"constant observed = {constant!r} gave r2 = {r2[0]!r}"
    else:
        ref = sps.pearsonr(arrays["scrambled"].ravel(), arrays["observed"].ravel()).statistic
        assert r2[0] == pytest.approx(ref, abs=1e-10)


def test_mismatched_shapes_raise(rng):
    with pytest.raises(ValueError, match=r"observed \(3, 3\)"):
        yearly_sums(rng.normal(size=(3, 2)), rng.normal(size=(3, 2)), rng.normal(size=(3, 3)))
