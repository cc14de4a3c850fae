"""Bootstrap intervals and p-values: numpy quantiles, Hesterberg (2015), interval/p agreement."""

from __future__ import annotations

import re
from fractions import Fraction

import numpy as np
import pytest
from scipy import stats as sps

from app.stats.intervals import (
    DEFAULT_INTERVAL_METHOD,
    INTERVAL_METHODS,
    alpha_of_tail,
    bootstrap_interval,
    format_p_value,
    min_p_value,
    order_rank,
    p_value_table,
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


def _reference_p(r: np.ndarray, n: int, n_blocks: int, method: str) -> np.ndarray:
    """p-value of a count r of n draws on the smaller side of 0, written out independently:
    tail fraction (r + 1) / (n + 1) (Phipson and Smyth 2010, Stat. Appl. Genet. Mol. Biol. 9,
    "Permutation p-values should never be zero") through the inverse of the tail map:
    percentile 2 * tail; expanded (Hesterberg 2015) 2 * T_{n_b - 1}(Phi^-1(tail) / sqrt(n_b/(n_b-1)))
    (scipy.stats.t / norm)."""
    tail = (np.asarray(r, dtype=np.float64) + 1.0) / (n + 1.0)
    if method == "percentile":
        return np.minimum(1.0, 2.0 * tail)
    z = sps.norm.isf(np.minimum(tail, 0.5))
    return np.minimum(1.0, 2.0 * sps.t.sf(z / np.sqrt(n_blocks / (n_blocks - 1.0)), df=n_blocks - 1))


def _reference_rank(n: int, confidence: float, n_blocks: int, method: str) -> int:
    """k = #{r : p(r) < alpha}: for the percentile map in exact rational arithmetic,
    2 (r + 1) / (n + 1) < alpha (Python fractions), else from the scipy formula above."""
    alpha = Fraction(str(significance_level(confidence)))
    if method == "percentile":
        return sum(1 for r in range(n + 1) if Fraction(2 * (r + 1), n + 1) < alpha)
    return int(np.count_nonzero(_reference_p(np.arange(n + 1), n, n_blocks, method) < float(alpha)))


def _shifted(draws: np.ndarray, point: np.ndarray, method: str) -> np.ndarray:
    """The draws a method reads: as they are, or (d - median) + point (numpy.median)."""
    if method == "centred":
        return (draws - np.median(draws, axis=0)) + point
    return draws


@pytest.mark.parametrize("method", INTERVAL_METHODS)
@pytest.mark.parametrize("confidence", CONFIDENCES)
def test_bounds_are_the_kth_order_statistics(draws, method, confidence):
    point = draws.mean(axis=0) + 0.1  # a point value off the bootstrap centre
    iv = bootstrap_interval(draws, point=point, confidence=confidence, n_blocks=15, method=method)
    k = _reference_rank(B, confidence, 15, method)
    assert k == order_rank(B, confidence=confidence, n_blocks=15, method=method)
    # reference: numpy sort; the k-th smallest and the k-th largest of the (shifted) draws
    srt = np.sort(_shifted(draws, point, method), axis=0)
    np.testing.assert_array_equal(iv.low, srt[k - 1])
    np.testing.assert_array_equal(iv.high, srt[B - k])
    # and numpy.quantile's inverted-CDF rule (Hyndman & Fan 1996 type 1) at level k / B
    np.testing.assert_array_equal(
        iv.low, np.quantile(_shifted(draws, point, method), (k - 0.5) / B, axis=0, method="inverted_cdf")
    )


def test_rank_rule_at_an_integer_boundary():
    # B = 999, 95 % percentile: (B + 1) * alpha / 2 = 25 exactly. Davison and Hinkley (1997,
    # "Bootstrap Methods and their Application", section 5.2) read the 25th order statistic;
    # with p = 2 (r + 1) / (B + 1) and the strict "p < 0.05", r = 24 gives p = 0.05, not
    # significant, so the bound must be the 24th for the interval to agree with p.
    assert order_rank(999, confidence=0.95, n_blocks=15, method="percentile") == 24
    for r, significant in ((24, False), (23, True)):
        d = np.concatenate([-np.arange(1, r + 1.0), np.arange(1, 1000.0 - r)])
        iv = bootstrap_interval(d, confidence=0.95, n_blocks=15, method="percentile")
        assert float(iv.p_value) == pytest.approx(2 * (r + 1) / 1000, abs=1e-15)
        assert bool(iv.low > 0) is significant
        assert bool(iv.p_value < 0.05) is significant


@pytest.mark.parametrize("method", INTERVAL_METHODS)
def test_nan_draws_are_left_out_per_column(draws, rng, method):
    d = draws[:, :200].copy()
    d[rng.random(d.shape) < 0.05] = np.nan
    d[:40, 1] = np.inf  # infinite draws count as degenerate too
    d[:, 0] = np.nan  # a column with no finite draw
    point = np.nanmean(np.where(np.isfinite(d[:, 1:]), d[:, 1:], np.nan), axis=0) - 0.2
    point = np.concatenate([[0.0], point])
    iv = bootstrap_interval(d, point=point, confidence=0.9, n_blocks=20, method=method)
    assert np.isnan(iv.low[0]) and np.isnan(iv.high[0]) and np.isnan(iv.p_value[0])
    for c in range(1, d.shape[1]):
        f = d[np.isfinite(d[:, c]), c]
        if method == "centred":
            f = (f - np.median(f)) + point[c]
        k = _reference_rank(f.size, 0.9, 20, method)
        srt = np.sort(f)
        assert iv.low[c] == srt[k - 1] and iv.high[c] == srt[f.size - k]
        r = min(np.sum(f <= 0), np.sum(f >= 0))
        assert iv.p_value[c] == pytest.approx(float(_reference_p(r, f.size, 20, method)), rel=1e-12)


@pytest.mark.parametrize("method", INTERVAL_METHODS)
@pytest.mark.parametrize("n_blocks", [15, 30])
def test_p_value_is_the_phipson_smyth_fraction_through_the_tail_map(draws, method, n_blocks):
    point = draws.mean(axis=0)
    iv = bootstrap_interval(draws, point=point, n_blocks=n_blocks, method=method)
    d = _shifted(draws, point, method)
    r = np.minimum((d <= 0).sum(axis=0), (d >= 0).sum(axis=0))
    np.testing.assert_allclose(iv.p_value, _reference_p(r, B, n_blocks, method), rtol=1e-12, atol=0)
    assert np.all(iv.p_value > 0)  # never 0
    assert iv.p_value.min() == min_p_value(B, n_blocks=n_blocks, method=method)


def test_smallest_p_values():
    # percentile: 2 / (B + 1) (Phipson and Smyth 2010 with the two-sided doubling)
    assert min_p_value(1000, n_blocks=15, method="percentile") == pytest.approx(2 / 1001, rel=1e-14)
    # expanded at 15 years: 2 T_14(Phi^-1(1000/1001) / sqrt(15/14)) (scipy), about 0.0098
    z = sps.norm.isf(1 / 1001)
    expected = 2 * sps.t.sf(z / np.sqrt(15 / 14), df=14)
    assert min_p_value(1000, n_blocks=15, method="expanded") == pytest.approx(expected, rel=1e-12)
    assert 0.009 < expected < 0.011
    table = p_value_table(1000, n_blocks=15)
    assert table.shape == (1001,) and np.all(np.diff(table) >= 0) and table[-1] == 1.0


def _adversarial_columns(rng: np.random.Generator, n: int) -> np.ndarray:
    """(n, 1600) draws built to hit the edges: ties at exactly 0, columns with every draw on one
    side, constant columns, integer-valued draws (many ties), NaN and inf draws, tiny spreads."""
    cols = []
    for _ in range(1600 // 8):
        shift = rng.integers(-n, n + 1)
        ints = rng.integers(-3, 4, n).astype(float) + (shift % 3) - 1  # ties at 0 and elsewhere
        zeros = np.where(rng.random(n) < rng.random(), 0.0, rng.normal(size=n))
        one_side = np.abs(rng.normal(size=n)) * rng.choice([-1.0, 1.0])
        const = np.full(n, float(rng.choice([0.0, 1e-300, -2.0])))
        nan = rng.normal(loc=rng.normal(), size=n)
        nan[rng.random(n) < rng.random()] = rng.choice([np.nan, np.inf, -np.inf])
        ranked = (np.arange(n) - rng.integers(0, n + 1)).astype(float)  # exactly r negatives
        tiny = rng.normal(loc=rng.normal() * 1e-12, scale=1e-12, size=n)
        rounded = np.round(rng.normal(loc=rng.normal() * 2, size=n), 1)
        cols += [ints, zeros, one_side, const, nan, ranked, tiny, rounded]
    return np.stack(cols, axis=1)


@pytest.mark.parametrize("method", INTERVAL_METHODS)
@pytest.mark.parametrize("n_draws", [1, 2, 5, 19, 39, 40, 41, 75, 76, 199, 1000])
def test_excludes_zero_iff_p_below_the_level_on_adversarial_columns(rng, method, n_draws):
    # DESIGN.md section 3.6 contract, proved in the module docstring: for every column the
    # interval excludes 0 exactly when p < significance_level(confidence)
    d = _adversarial_columns(rng, n_draws)
    point = np.where(rng.random(d.shape[1]) < 0.1, 0.0, rng.normal(size=d.shape[1]))
    point[:7] = (np.nan, np.inf, 0.0, -0.0, 1e-300, -1e-300, 5.0)
    for n_blocks in (2, 15):
        for confidence in (0.5, 0.95, 0.99):
            iv = bootstrap_interval(d, point=point, confidence=confidence, n_blocks=n_blocks, method=method)
            defined = np.isfinite(iv.p_value)
            excl = _excludes_zero(iv.low, iv.high)
            signif = iv.p_value < significance_level(confidence)
            bad = np.flatnonzero(defined & (excl != signif))
            assert bad.size == 0, (
                f"B={n_draws} n={n_blocks} c={confidence}: column {bad[0]} low={iv.low[bad[0]]} "
                f"high={iv.high[bad[0]]} p={iv.p_value[bad[0]]!r}"
            )
            # undefined columns carry no bounds either; p is never 0 and bounds are ordered
            assert np.all(np.isnan(iv.low[~defined]) & np.isnan(iv.high[~defined]))
            assert np.all(iv.p_value[defined] > 0) and np.all(iv.p_value[defined] <= 1)
            assert np.all(iv.low[defined] <= iv.high[defined])
            if method == "centred":
                ok = defined & np.isfinite(point)
                assert np.all((iv.low[ok] <= point[ok]) & (point[ok] <= iv.high[ok]))
                assert np.all(~defined[~np.isfinite(point)])


@pytest.mark.parametrize("method", INTERVAL_METHODS)
@pytest.mark.parametrize("confidence", CONFIDENCES)
def test_interval_excludes_zero_iff_p_below_one_minus_confidence(draws, method, confidence):
    # the same contract on smooth draws, where both outcomes occur often
    for n_blocks in (15, 30):
        iv = bootstrap_interval(
            draws, point=draws.mean(axis=0), confidence=confidence, n_blocks=n_blocks, method=method
        )
        excl = _excludes_zero(iv.low, iv.high)
        signif = iv.p_value < significance_level(confidence)
        bad = np.flatnonzero(excl != signif)
        assert bad.size == 0, (
            f"{bad.size} columns disagree, e.g. column {bad[0]}: low={iv.low[bad[0]]}, "
            f"high={iv.high[bad[0]]}, p={iv.p_value[bad[0]]!r}"
        )
        assert 0 < excl.sum() < excl.size  # both outcomes occur


@pytest.mark.parametrize("method", INTERVAL_METHODS)
def test_too_few_draws_give_unbounded_intervals_and_no_significance(rng, method):
    # with B = 10 the smallest p is at least 2/11 > 0.05: no column can be significant at 95 %,
    # so no order statistic can serve as a bound (all draws might be positive)
    d = np.abs(rng.normal(size=(10, 50))) + 1.0
    iv = bootstrap_interval(d, point=d.mean(axis=0), n_blocks=15, method=method)
    assert np.all(iv.low == -np.inf) and np.all(iv.high == np.inf)
    assert np.all(iv.p_value >= 2 / 11)


def test_centred_interval_contains_its_point_when_the_draws_lie_beside_it(rng):
    # the failure of issue 7 item 3: all draws below the point (a drifted bootstrap mean of z)
    point = np.full(300, 0.5)
    d = rng.normal(loc=0.3, scale=0.02, size=(1000, 300))
    old = bootstrap_interval(d, n_blocks=15, method="expanded")
    new = bootstrap_interval(d, point=point, n_blocks=15, method="centred")
    assert np.all(old.high < point)  # the uncentred interval lies beside its point
    assert np.all((new.low <= point) & (point <= new.high))
    # same width: the centred interval is the expanded one moved by point - median
    np.testing.assert_allclose(new.high - new.low, old.high - old.low, rtol=0, atol=1e-12)
    np.testing.assert_allclose(new.low - old.low, point - np.median(d, axis=0), atol=1e-12)


def test_centred_needs_the_point():
    with pytest.raises(ValueError, match="point"):
        bootstrap_interval(np.zeros((10, 2)), n_blocks=15, method="centred")


def test_default_method_is_listed():
    assert DEFAULT_INTERVAL_METHOD in INTERVAL_METHODS


def test_expanded_interval_is_wider_than_percentile(draws):
    e = bootstrap_interval(draws, n_blocks=15, method="expanded")
    p = bootstrap_interval(draws, n_blocks=15, method="percentile")
    assert np.all(e.low <= p.low) and np.all(e.high >= p.high)
    assert np.all(e.p_value >= p.p_value)


@pytest.mark.parametrize(
    ("p", "resamples", "text"),
    [
        (0.042, 1000, "0.042"),
        (0.0421, 1000, "0.042"),
        (2 / 1001, 1000, "0.002"),  # the smallest percentile p-value of B = 1000
        (0.0004, 1000, "<0.001"),
        (0.0, 1000, "<0.001"),  # legacy zero
        (0.0004, 9999, "<0.001"),
        (0.005, 100, "<0.010"),  # below 1/(B+1) = 0.0099: a bound, rounded up
        (0.0199, 100, "0.020"),
        (1.0, 1000, "1.000"),
        (float("nan"), 1000, "nan"),
    ],
)
def test_format_p_value(p, resamples, text):
    assert format_p_value(p, resamples=resamples) == text


def test_format_p_value_never_prints_zero(rng):
    for b in (19, 99, 999, 1000, 4999):
        for p in np.concatenate([[0.0, 1e-12], rng.random(200) ** 6]):
            s = format_p_value(float(p), resamples=b)
            assert s.lstrip("<") != "0.000" and float(s.lstrip("<")) > 0


def test_format_p_value_rejects_bad_values():
    with pytest.raises(ValueError, match="1.5"):
        format_p_value(1.5, resamples=1000)
    with pytest.raises(ValueError, match="got 0"):
        format_p_value(0.5, resamples=0)


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
