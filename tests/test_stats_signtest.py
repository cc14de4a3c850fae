"""Year-block random-walk sign test (app.stats.signtest; issue 7 item 5).

Simulation model: baseline error = M + D/2, candidate error = M - D/2, with M = 2 + |N(0, 1)| a
positive error scale per start and the error difference D_ij = mu + sqrt(f) c_i + sqrt(1 - f) e_ij
(c_i shared by the starts of year i, e_ij per start, both N(0, 1)): the year-shared component
carries the fraction f of the error-difference variance. mu = 0 is the null hypothesis.
Under it each year is won with probability 1/2 independently, so with Y years (no ties) the
exact size is P(reject) for Binomial(Y, 1/2) (scipy.stats.binom), which the simulation must
reproduce; counting starts instead (the old test) is far too liberal.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as sps

from app.errors import ParameterError
from app.stats.intervals import significance_level
from app.stats.signtest import critical_walk, random_walk_sign_test

N_PER_YEAR = 8


def _errors(rng: np.random.Generator, n_years: int, f: float, mu: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    d = mu + np.sqrt(f) * rng.standard_normal((n_years, 1)) + np.sqrt(1 - f) * rng.standard_normal((n_years, N_PER_YEAR))
    m = 2.0 + np.abs(rng.standard_normal((n_years, N_PER_YEAR)))
    return m + d / 2, m - d / 2


def exact_size(n_years: int, alpha: float = 0.05) -> float:
    """Rejection probability of the exact two-sided binomial test with n_years fair trials."""
    w = np.arange(n_years + 1)
    p = np.array([sps.binomtest(int(k), n_years, 0.5).pvalue for k in w])
    return float(sps.binom.pmf(w, n_years, 0.5)[p < alpha].sum())


def test_counts_walk_and_missing_years() -> None:
    nan = np.nan
    base = np.array(
        [
            [1.0, 2.0, 3.0],  # sum 6
            [1.0, 1.0, nan],  # sum 2 over the paired starts
            [2.0, 2.0, 2.0],  # 6
            [nan, nan, 1.0],  # no paired start
            [1.0, 1.0, 1.0],  # 3
        ]
    )
    cand = np.array(
        [
            [0.5, 2.5, 1.0],  # 4 < 6: candidate wins the year
            [1.5, 1.5, 0.0],  # 3 > 2 (the third start is unpaired): baseline wins
            [1.0, 2.0, 3.0],  # 6 = 6: tie
            [1.0, 1.0, nan],  # missing
            [0.0, 0.0, 0.5],  # 0.5 < 3: candidate
        ]
    )
    st = random_walk_sign_test(base, cand)
    assert (st.candidate_better, st.baseline_better, st.ties, st.missing_years) == (2, 1, 1, 1)
    assert st.n == 3
    assert list(st.walk) == [1, 0, 1] and list(st.walk_years) == [0, 1, 4]
    assert st.p_value == pytest.approx(sps.binomtest(2, 3, 0.5).pvalue)  # = 1.0
    assert not st.significant and np.isinf(st.bound)


def test_five_of_five_years_is_not_significant_at_95() -> None:
    base = np.ones((5, 4))
    st = random_walk_sign_test(base, 0.5 * base, confidence=0.95)
    assert st.candidate_better == 5
    assert st.p_value == pytest.approx(0.0625, abs=1e-15)  # 2 / 2^5; scipy.stats.binomtest(5, 5)
    assert st.p_value == pytest.approx(sps.binomtest(5, 5, 0.5).pvalue, rel=1e-12)
    assert not st.significant
    assert np.isinf(st.bound)  # no walk of 5 steps can reach p < 0.05
    six = random_walk_sign_test(np.ones((6, 4)), 0.5 * np.ones((6, 4)))
    assert six.p_value == pytest.approx(0.03125) and six.significant and six.bound == 6.0
    # at 90 %, 5 of 5 (p = 0.0625) is significant
    assert random_walk_sign_test(base, 0.5 * base, confidence=0.9).significant


def test_p_value_is_scipy_binomtest_and_flag_matches_it(rng: np.random.Generator) -> None:
    for _ in range(400):
        n_years = int(rng.integers(1, 40))
        conf = float(rng.choice([0.8, 0.9, 0.95, 0.99]))
        shift = float(rng.normal(0.0, 0.5))
        a = rng.standard_normal((n_years, 3))
        b = a - shift * np.abs(rng.standard_normal((n_years, 3))) - 0.3 * rng.standard_normal((n_years, 3))
        a[rng.random(a.shape) < 0.1] = np.nan
        st = random_walk_sign_test(a, b, confidence=conf)
        alpha = significance_level(conf)
        assert st.alpha == alpha
        if st.n:
            assert st.p_value == sps.binomtest(st.candidate_better, st.n, 0.5).pvalue
            assert st.walk[-1] == st.final == st.candidate_better - st.baseline_better
            # the plotted bound is on the same rule: the final walk reaches it iff significant
            assert (abs(int(st.walk[-1])) >= st.bound) == st.significant
        assert st.significant == (st.p_value < alpha)
        assert st.n + st.ties + st.missing_years == n_years


def test_critical_walk_is_the_exact_binomial_threshold() -> None:
    for alpha in (0.05, 0.1, 0.01):
        bounds = critical_walk(40, alpha=alpha)
        for k in range(1, 41):
            # brute force over the reachable walk values with scipy.stats.binomtest
            ok = [2 * w - k for w in range(k + 1) if 2 * w - k > 0 and sps.binomtest(w, k, 0.5).pvalue < alpha]
            assert bounds[k - 1] == (min(ok) if ok else np.inf), (alpha, k)
    assert np.isinf(critical_walk(5, alpha=0.05)).all() and critical_walk(6, alpha=0.05)[-1] == 6


def test_bad_input() -> None:
    with pytest.raises(ValueError, match="n_years, n_per_year"):
        random_walk_sign_test(np.ones(6), np.ones(6))
    with pytest.raises(ValueError, match="share a shape"):
        random_walk_sign_test(np.ones((3, 2)), np.ones((3, 3)))
    with pytest.raises(ParameterError, match="confidence"):
        random_walk_sign_test(np.ones((3, 2)), np.ones((3, 2)), confidence=1.5)
    empty = random_walk_sign_test(np.full((4, 2), np.nan), np.ones((4, 2)))
    assert empty.n == 0 and empty.p_value == 1.0 and not empty.significant and empty.missing_years == 4
    assert empty.final == 0 and empty.walk.size == 0 and np.isnan(empty.bound)
    ties = random_walk_sign_test(np.ones((4, 2)), np.ones((4, 2)))
    assert (ties.n, ties.ties, ties.final, ties.p_value, ties.significant) == (0, 4, 0, 1.0, False)


@pytest.mark.slow
@pytest.mark.parametrize("n_years", [20, 30])
def test_size_with_year_shared_errors(n_years: int, record_property) -> None:
    reps = 4000  # binomial SE at 5 %: 0.0034
    truth = exact_size(n_years)
    print(f"\nsign test size, Y={n_years} x {N_PER_YEAR} starts, {reps} replications, exact {truth:.4f}")
    for f in (0.0, 0.3, 0.6):
        rng = np.random.default_rng([41, n_years, int(10 * f)])
        new = old = 0
        n_starts = n_years * N_PER_YEAR
        # the old rule: one step per start, exact binomial test on all starts (scipy.stats.binomtest)
        old_rejects = [sps.binomtest(k, n_starts, 0.5).pvalue < 0.05 for k in range(n_starts + 1)]
        for _ in range(reps):
            a, b = _errors(rng, n_years, f)
            new += random_walk_sign_test(a, b).significant
            old += old_rejects[int((a > b).sum())]
        rate, old_rate = new / reps, old / reps
        se = np.sqrt(rate * (1 - rate) / reps)
        print(f"  f={f:.1f}: year-block {rate:.4f} +- {se:.4f}   per-start (old) {old_rate:.4f}")
        record_property(f"Y{n_years}_f{f}_size", rate)
        record_property(f"Y{n_years}_f{f}_old_size", old_rate)
        assert rate <= 0.06
        assert abs(rate - truth) < 4 * np.sqrt(truth * (1 - truth) / reps)
        if f > 0:
            assert old_rate > 0.1  # the dependence the issue describes is in the simulation


@pytest.mark.slow
@pytest.mark.parametrize("n_years", [20, 30])
def test_power_when_the_candidate_is_better(n_years: int, record_property) -> None:
    reps = 2000
    f = 0.3
    print(f"\nsign test power, Y={n_years} x {N_PER_YEAR} starts, f={f}, {reps} replications")
    powers = {}
    for mu in (0.25, 0.5):
        rng = np.random.default_rng([43, n_years, int(100 * mu)])
        hits = 0
        for _ in range(reps):
            a, b = _errors(rng, n_years, f, mu=mu)
            hits += random_walk_sign_test(a, b).significant
        powers[mu] = hits / reps
        # the year is won with probability Phi(mu / sd(year mean of D)), then exact binomial power
        p_win = sps.norm.cdf(mu / np.sqrt(f + (1 - f) / N_PER_YEAR))
        w = np.arange(n_years + 1)
        reject = np.array([sps.binomtest(int(k), n_years, 0.5).pvalue < 0.05 for k in w])
        theory = float(sps.binom.pmf(w, n_years, p_win)[reject].sum())
        print(f"  mu={mu}: power {powers[mu]:.4f} (theory {theory:.4f}, P(win a year) {p_win:.3f})")
        record_property(f"Y{n_years}_mu{mu}_power", powers[mu])
        assert abs(powers[mu] - theory) < 4 * np.sqrt(theory * (1 - theory) / reps) + 1e-3
    assert powers[0.5] >= (0.6 if n_years == 20 else 0.8)
