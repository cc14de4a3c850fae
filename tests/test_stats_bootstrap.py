"""Resample counts and resampled correlations against brute force and published figures."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as sps

from app.stats.bootstrap import resampled_correlations
from app.stats.resample import jackknife_counts, year_block_counts
from app.stats.sums import correlations_from_sums, total_sums, yearly_sums


def _brute_force(x1: np.ndarray, x2: np.ndarray, y: np.ndarray, counts_row: np.ndarray):
    """Build one resample's data by repeating each drawn year ``count`` times, then pearsonr."""
    years = np.repeat(np.arange(y.shape[0]), counts_row.astype(int))
    rx1, rx2, ry = (a[years].reshape(-1, a.shape[-1]) for a in (x1, x2, y))
    out1, out2 = [], []
    for c in range(ry.shape[1]):
        ok = np.isfinite(rx1[:, c]) & np.isfinite(rx2[:, c]) & np.isfinite(ry[:, c])
        # reference: scipy.stats.pearsonr on the explicitly resampled, jointly valid samples
        out1.append(sps.pearsonr(rx1[ok, c], ry[ok, c]).statistic)
        out2.append(sps.pearsonr(rx2[ok, c], ry[ok, c]).statistic)
    return np.array(out1), np.array(out2)


@pytest.mark.parametrize("fixture_name", ["paired_samples", "paired_samples_with_gaps"])
@pytest.mark.parametrize("block", [None, 1, 3])
def test_resampled_correlations_equal_explicit_resamples(request, fixture_name, block):
    samples = request.getfixturevalue(fixture_name)
    x1, x2, y = samples.arrays()
    counts = year_block_counts(samples.n_years, resamples=6, seed=11)
    r1, r2 = resampled_correlations(yearly_sums(x1, x2, y), counts, block=block)
    assert r1.shape == r2.shape == (6, y.shape[-1])
    for b in range(counts.shape[0]):
        ref1, ref2 = _brute_force(x1, x2, y, counts[b])
        np.testing.assert_allclose(r1[b], ref1, rtol=0, atol=1e-10)
        np.testing.assert_allclose(r2[b], ref2, rtol=0, atol=1e-10)


def test_all_ones_counts_give_the_full_sample_correlation(paired_samples):
    yearly = yearly_sums(*paired_samples.arrays())
    full1, full2 = correlations_from_sums(total_sums(yearly))
    r1, r2 = resampled_correlations(yearly, np.ones((2, paired_samples.n_years)))
    np.testing.assert_allclose(r1, np.broadcast_to(full1, r1.shape), atol=1e-12)
    np.testing.assert_allclose(r2, np.broadcast_to(full2, r2.shape), atol=1e-12)


@pytest.mark.parametrize("constant", [0.0, 0.1, 3.7])
def test_resampled_zero_variance_gives_nan(rng, constant):
    # a constant series has no correlation (0/0): NaN in every resample, as for the full sample
    # (scipy.stats.pearsonr also returns NaN for constant input)
    shape = (15, 8, 1)
    x1 = np.full(shape, constant)
    x2, y = rng.normal(size=shape), rng.normal(size=shape)
    counts = year_block_counts(15, resamples=50, seed=3)
    r1, r2 = resampled_correlations(yearly_sums(x1, x2, y), counts)
    assert np.isnan(r1).all(), f"constant {constant!r}: finite r1 in {np.isfinite(r1).sum()} rows"
    assert np.isfinite(r2).all()


def test_year_block_counts_reproducible_and_rows_sum_to_n_years():
    a = year_block_counts(20, resamples=500, seed=5)
    b = year_block_counts(20, resamples=500, seed=5)
    c = year_block_counts(20, resamples=500, seed=6)
    assert a.shape == (500, 20)
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)
    np.testing.assert_array_equal(a.sum(axis=1), np.full(500, 20.0))
    assert np.all(a >= 0) and np.array_equal(a, np.round(a))


def test_year_block_counts_are_multinomial():
    # Drawing n years with replacement: each count is Binomial(n, 1/n) (common practice,
    # the definition of the nonparametric bootstrap). Chi-square goodness of fit on the
    # pooled counts 0, 1, 2, 3, >=4 (scipy.stats.chisquare as the test).
    n = 15
    counts = year_block_counts(n, resamples=4000, seed=21).ravel()
    observed = np.array([np.sum(counts == k) for k in range(4)] + [np.sum(counts >= 4)])
    pmf = sps.binom.pmf(np.arange(4), n, 1.0 / n)
    expected = counts.size * np.append(pmf, 1.0 - pmf.sum())
    assert sps.chisquare(observed, expected).pvalue > 1e-3
    # every year is equally likely (uniform over years)
    per_year = year_block_counts(n, resamples=4000, seed=22).sum(axis=0)
    assert sps.chisquare(per_year).pvalue > 1e-3


def test_jackknife_counts_leave_one_year_out():
    j = jackknife_counts(7)
    assert j.shape == (7, 7)
    for i in range(7):
        assert j[i, i] == 0.0
        assert np.all(np.delete(j[i], i) == 1.0)
    np.testing.assert_array_equal(j.sum(axis=1), np.full(7, 6.0))


@pytest.mark.parametrize(
    ("call", "text"),
    [
        (lambda: year_block_counts(0, resamples=5, seed=1), "got 0"),
        (lambda: year_block_counts(5, resamples=0, seed=1), "got 0"),
        (lambda: jackknife_counts(1), "got 1"),
    ],
)
def test_count_arguments_checked(call, text):
    with pytest.raises(ValueError, match=text):
        call()


def test_resampled_correlations_shape_checks(paired_samples):
    yearly = yearly_sums(*paired_samples.arrays())
    with pytest.raises(ValueError, match=r"\(4, 3\)"):
        resampled_correlations(yearly, np.ones((4, 3)))


# ---------------------------------------------------------------------------------------------
# Law school data: Efron & Tibshirani (1993), An Introduction to the Bootstrap, table 3.1
# (the 15 sampled schools: average LSAT, average GPA). Each school is one block ("year").
LAW_SCHOOL = np.array(
    [
        (576, 3.39), (635, 3.30), (558, 2.81), (578, 3.03), (666, 3.44),
        (580, 3.07), (555, 3.00), (661, 3.43), (651, 3.36), (605, 3.13),
        (653, 3.12), (575, 2.74), (545, 2.76), (572, 2.88), (594, 2.96),
    ]
)


@pytest.fixture
def law_school_yearly() -> np.ndarray:
    lsat = LAW_SCHOOL[:, 0].reshape(15, 1, 1)
    gpa = LAW_SCHOOL[:, 1].reshape(15, 1, 1)
    # the same series serves as "realistic" and "scrambled": the kernels score a pair
    return yearly_sums(lsat, lsat, gpa)


def test_law_school_correlation(law_school_yearly):
    r1, r2 = correlations_from_sums(total_sums(law_school_yearly))
    # Efron & Tibshirani (1993), section 3: r = .776
    assert round(float(r1[0]), 3) == 0.776
    assert r1[0] == r2[0]


def test_law_school_bootstrap_standard_error(law_school_yearly):
    counts = year_block_counts(15, resamples=20_000, seed=1993)
    r1, r2 = resampled_correlations(law_school_yearly, counts)
    # the same series in both slots: equal up to BLAS rounding (rows of one product may take
    # different kernel paths)
    np.testing.assert_allclose(r1, r2, rtol=0, atol=1e-12)
    se = float(np.nanstd(r1[:, 0], ddof=1))
    # Efron & Tibshirani (1993), ch. 6: bootstrap SE of the correlation ~ .132 for B in the
    # thousands (from memory); the band allows Monte Carlo error at B = 20000 and the recalled
    # figure's imprecision.
    assert 0.115 < se < 0.145, se


def test_law_school_jackknife_standard_error(law_school_yearly):
    theta, _ = resampled_correlations(law_school_yearly, jackknife_counts(15))
    theta = theta[:, 0]
    n = theta.size
    se = float(np.sqrt((n - 1) / n * np.sum((theta - theta.mean()) ** 2)))
    # Efron & Tibshirani (1993), ch. 11: jackknife SE of the law-school correlation 0.1425
    # (from memory); usual delete-one jackknife formula sqrt((n-1)/n * sum (theta_i - mean)^2)
    assert se == pytest.approx(0.1425, abs=1e-3)


def test_law_school_normal_theory_standard_error(law_school_yearly):
    r, _ = correlations_from_sums(total_sums(law_school_yearly))
    se = float((1.0 - r[0] ** 2) / np.sqrt(15 - 3))
    # Efron & Tibshirani (1993): normal-theory SE (1 - r^2) / sqrt(n - 3) = .115 (from memory)
    assert se == pytest.approx(0.115, abs=1e-3)
