"""Bootstrap intervals and p-values: numpy quantiles, Hesterberg (2015), interval/p agreement."""

from __future__ import annotations

import re

import numpy as np
import pytest
from scipy import stats as sps

from app.stats.intervals import (
    INTERVAL_METHODS,
    alpha_of_tail,
    bootstrap_interval,
    significance_level,
    tail_level,
)

CONFIDENCES = (0.9, 0.95, 0.99)
B = 1000


@pytest.fixture
def draws(rng: np.random.Generator) -> np.ndarray:
    """(B, 3000) bootstrap-like draws whose column centres run from -4 to 4 standard deviations,
    so the number of draws on either side of 0 takes every value near each tail level."""
    centres = np.linspace(-4.0, 4.0, 3000)
    return centres + rng.normal(size=(B, centres.size))


def _excludes_zero(low: np.ndarray, high: np.ndarray) -> np.ndarray:
    return (low > 0.0) | (high < 0.0)


def test_percentile_tail_level_is_half_alpha():
    for c in CONFIDENCES:
        assert tail_level(c, n_blocks=15, method="percentile") == pytest.approx((1 - c) / 2)


@pytest.mark.parametrize("n", [5, 15, 30, 100])
@pytest.mark.parametrize("confidence", CONFIDENCES)
def test_expanded_tail_level_matches_hesterberg(n, confidence):
    # Hesterberg (2015), The American Statistician 69(4), "What teachers should know about the
    # bootstrap", expanded percentile interval: alpha'/2 = Phi(-sqrt(n/(n-1)) t_{n-1,1-alpha/2}),
    # computed here independently with scipy.stats.
    alpha = significance_level(confidence)
    expected = sps.norm.cdf(-np.sqrt(n / (n - 1)) * sps.t.ppf(1.0 - alpha / 2.0, df=n - 1))
    assert tail_level(confidence, n_blocks=n) == pytest.approx(expected, rel=1e-12)
    assert tail_level(confidence, n_blocks=n, method="expanded") < alpha / 2.0


def test_expanded_tail_level_n15_95():
    # Hesterberg (2015) formula at n = 15, 95 %: Phi(-sqrt(15/14) t_{14,0.975}) (scipy.stats)
    expected = sps.norm.cdf(-np.sqrt(15 / 14) * sps.t.ppf(0.975, df=14))
    assert tail_level(0.95, n_blocks=15) == pytest.approx(expected, rel=1e-12)
    assert expected == pytest.approx(0.01321, abs=1e-5)  # the figure itself, for the README


@pytest.mark.parametrize("method", INTERVAL_METHODS)
@pytest.mark.parametrize("n", [3, 15, 30])
def test_alpha_of_tail_inverts_tail_level(method, n):
    # (at n = 3, 99.9 % the expanded tail Phi(-38.7) underflows to 0: not invertible)
    for c in (0.5, 0.8, *CONFIDENCES, *((0.999,) if n > 3 else ())):
        tail = tail_level(c, n_blocks=n, method=method)
        assert float(alpha_of_tail(tail, n_blocks=n, method=method)) == pytest.approx(
            1.0 - c, rel=1e-10
        )
    # and vectorised, over a grid of tails below 1/2: monotone increasing
    tails = np.linspace(1e-4, 0.49, 50)
    alphas = alpha_of_tail(tails, n_blocks=n, method=method)
    assert np.all(np.diff(alphas) > 0)
    assert np.all((alphas > 0) & (alphas <= 1))


@pytest.mark.parametrize("method", INTERVAL_METHODS)
@pytest.mark.parametrize("confidence", CONFIDENCES)
def test_bounds_equal_numpy_inverted_cdf_quantiles(draws, method, confidence):
    iv = bootstrap_interval(draws, confidence=confidence, n_blocks=15, method=method)
    tail = tail_level(confidence, n_blocks=15, method=method)
    # reference: numpy.quantile with the inverted-CDF rule (Hyndman & Fan 1996 type 1);
    # the upper bound is the same rule on the negated draws, as the module documents
    low = np.quantile(draws, tail, axis=0, method="inverted_cdf")
    high = -np.quantile(-draws, tail, axis=0, method="inverted_cdf")
    np.testing.assert_array_equal(iv.low, low)
    np.testing.assert_array_equal(iv.high, high)


@pytest.mark.parametrize("method", INTERVAL_METHODS)
def test_nan_draws_are_left_out_per_column(draws, rng, method):
    d = draws[:, :200].copy()
    d[rng.random(d.shape) < 0.05] = np.nan
    d[:, 0] = np.nan  # a column with no finite draw
    iv = bootstrap_interval(d, confidence=0.9, n_blocks=20, method=method)
    tail = tail_level(0.9, n_blocks=20, method=method)
    assert np.isnan(iv.low[0]) and np.isnan(iv.high[0]) and np.isnan(iv.p_value[0])
    for c in range(1, d.shape[1]):
        f = d[np.isfinite(d[:, c]), c]
        # reference: numpy.quantile (inverted CDF) on the finite draws of the column
        assert iv.low[c] == np.quantile(f, tail, method="inverted_cdf")
        assert iv.high[c] == -np.quantile(-f, tail, method="inverted_cdf")


def test_percentile_p_value_is_twice_the_smaller_tail(draws):
    # Two-sided percentile-bootstrap p-value for 0: 2 * min(P*(d <= 0), P*(d >= 0)), capped at 1
    # (common practice: the test that inverts the percentile interval)
    iv = bootstrap_interval(draws, n_blocks=15, method="percentile")
    frac = np.minimum((draws <= 0).mean(axis=0), (draws >= 0).mean(axis=0))
    np.testing.assert_allclose(iv.p_value, np.minimum(1.0, 2.0 * frac), rtol=0, atol=1e-15)


@pytest.mark.parametrize("method", INTERVAL_METHODS)
@pytest.mark.parametrize("confidence", CONFIDENCES)
def test_interval_excludes_zero_iff_p_below_one_minus_confidence(draws, method, confidence):
    # DESIGN.md section 3.6 contract: "the interval excludes 0 exactly when p < 1 - confidence"
    for n_blocks in (15, 30):
        iv = bootstrap_interval(draws, confidence=confidence, n_blocks=n_blocks, method=method)
        excl = _excludes_zero(iv.low, iv.high)
        signif = iv.p_value < significance_level(confidence)
        bad = np.flatnonzero(excl != signif)
        assert bad.size == 0, (
            f"{bad.size} columns disagree, e.g. column {bad[0]}: low={iv.low[bad[0]]}, "
            f"high={iv.high[bad[0]]}, p={iv.p_value[bad[0]]!r}, "
            f"#(d<=0)={int((draws[:, bad[0]] <= 0).sum())}"
        )
        assert 0 < excl.sum() < excl.size  # both outcomes occur


@pytest.mark.parametrize("confidence", CONFIDENCES)
def test_agreement_when_the_smaller_tail_count_equals_the_tail_level(confidence):
    # The boundary case of the contract above, built by hand: exactly tail * B of B = 1000
    # draws are negative. The inverted-CDF lower bound is then the largest negative draw, so
    # the interval contains 0, and the p-value must not fall below 1 - confidence.
    tail = tail_level(confidence, n_blocks=15, method="percentile")
    k = round(tail * B)
    d = np.concatenate([-np.arange(1, k + 1) / B, np.arange(1, B - k + 1) / B])
    iv = bootstrap_interval(d, confidence=confidence, n_blocks=15, method="percentile")
    excl = bool(_excludes_zero(iv.low, iv.high))
    assert excl == bool(iv.p_value < significance_level(confidence)), (
        f"confidence {confidence}: low={float(iv.low)}, p={float(iv.p_value)!r}, "
        f"1 - confidence={1.0 - confidence!r}"
    )


def test_expanded_interval_is_wider_than_percentile(draws):
    e = bootstrap_interval(draws, n_blocks=15)
    p = bootstrap_interval(draws, n_blocks=15, method="percentile")
    assert np.all(e.low <= p.low) and np.all(e.high >= p.high)
    assert np.all(e.p_value >= p.p_value)


@pytest.mark.parametrize("bad", [0.0, 1.0, 1.5, -0.1, float("nan")])
def test_bad_confidence_raises_naming_it(bad):
    pattern = re.escape(str(bad))
    with pytest.raises(ValueError, match=pattern):
        tail_level(bad, n_blocks=15)
    with pytest.raises(ValueError, match=pattern):
        bootstrap_interval(np.zeros((10, 2)), confidence=bad, n_blocks=15)


def test_bad_method_raises_naming_it_and_the_choices():
    for call in (
        lambda: tail_level(0.95, n_blocks=15, method="bca"),
        lambda: bootstrap_interval(np.zeros((10, 2)), n_blocks=15, method="bca"),
    ):
        with pytest.raises(ValueError, match="'bca'") as info:
            call()
        assert all(m in str(info.value) for m in INTERVAL_METHODS)


@pytest.mark.parametrize("bad", [1, 0, -3])
def test_bad_n_blocks_raises_naming_it(bad):
    with pytest.raises(ValueError, match=rf"got {bad}\b"):
        tail_level(0.95, n_blocks=bad)
    with pytest.raises(ValueError, match=rf"got {bad}\b"):
        bootstrap_interval(np.zeros((10, 2)), n_blocks=bad)


def test_alpha_of_tail_checks_its_arguments():
    # alpha_of_tail is public and takes the same method / n_blocks options as tail_level:
    # an unknown method must not silently fall back to "expanded", and n_blocks < 2 must be a
    # ValueError naming the value, not a ZeroDivisionError.
    with pytest.raises(ValueError, match="'bca'"):
        alpha_of_tail(0.01, n_blocks=15, method="bca")
    with pytest.raises(ValueError, match=r"got 1\b"):
        alpha_of_tail(0.01, n_blocks=1)
