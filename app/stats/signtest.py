"""Random-walk sign test on year blocks: is the candidate forecast better in more years?

DelSole and Tippett (2016, "Forecast comparison based on random walks", Monthly Weather Review
144, 615-626; pages from memory) count the cases on which one forecast beats the other and follow the count as a
random walk; under the null hypothesis that either forecast is equally likely to win, wins are
Binomial(n, 1/2). That needs independent cases. The start dates of one year share their
weather (and their land and ocean state), so their wins are not independent: counting starts
rejects a true null far too often (the issue measured 13 % and 21 % at nominal 5 % when a
year-shared component carries 0.3 and 0.6 of the error-difference variance; with 20 years of 8
starts tests/test_stats_signtest.py measures about 20 % and 32 %). Years are independent to a
good approximation, so one step is taken per year.

The step of a year
    ``d_i = sum_j (baseline_error_ij - candidate_error_ij)`` over the year's starts where both
    errors are finite: +1 (the candidate wins the year) if ``d_i > 0``, -1 if ``d_i < 0``, a tie
    if ``d_i = 0``; a year without a paired start gives no step. With absolute errors this is the
    comparison of the two forecasts' mean absolute error over the year (squared errors: their
    mean-square error). Under the null that the two forecasts' errors are exchangeable within
    each year (any within-year dependence allowed), ``d_i`` is symmetric about zero, so each
    year is won with probability 1/2 independently of the others. The sign of the year's total
    was preferred to the year's majority of start wins because an even number of starts splits
    evenly often (27 % of years with 8 independent starts) and a tie discards the year; the total
    rarely ties and still uses one vote per year.

Significance and p-value: one rule
    ``p_value`` is the exact two-sided binomial p-value of the wins among the decisive years
    (``scipy.stats.binomtest(wins, n, 0.5)``) and ``significant`` is ``p_value < alpha`` with
    ``alpha = significance_level(confidence)`` (``1 - confidence`` rounded to 12 decimals). So n =
    5 with 5 wins has p = 0.0625 and is not significant at 95 %.

The walk and its bound, for plotting
    ``walk`` is the running (candidate wins - baseline wins) over the decisive years in year
    order. ``bounds[k - 1]`` is the exact critical value after k steps: the smallest |walk| at
    which the same two-sided binomial test on k years would give p < alpha (``inf`` where no
    value can, as for k <= 5 at alpha = 0.05). It is a pointwise (fixed-k) envelope, like the
    ``+-z sqrt(k)`` curves of DelSole and Tippett: the final walk value lies on or outside the
    final bound (``bound``) exactly when ``significant``; crossings at earlier k are not a
    sequential test.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray
from scipy import stats as sps

from app.errors import ParameterError
from app.stats.intervals import significance_level


@dataclass(frozen=True)
class SignTest:
    """Year-block sign test of a candidate against a baseline forecast (see the module docstring)."""

    candidate_better: int  # years in which the candidate's summed error is smaller
    baseline_better: int  # years in which it is larger
    ties: int  # years with paired starts and equal summed errors
    missing_years: int  # years without a start at which both errors are finite
    walk: NDArray[np.int64]  # running candidate - baseline wins over the decisive years, in year order
    walk_years: NDArray[np.int64]  # the year index (row of the input) of each step of the walk
    bounds: NDArray[np.float64]  # exact critical |walk| after k = 1..n steps (inf: unattainable)
    p_value: float  # exact two-sided binomial p-value (1.0 without decisive years)
    alpha: float  # significance level: 1 - confidence rounded to 12 decimals
    significant: bool  # p_value < alpha

    @property
    def n(self) -> int:
        """Decisive years (wins + losses)."""
        return self.candidate_better + self.baseline_better

    @property
    def final(self) -> int:
        """The walk's end value, candidate wins - baseline wins (0 without decisive years)."""
        return int(self.walk[-1]) if self.walk.size else 0

    @property
    def bound(self) -> float:
        """The critical |walk| after all n steps (NaN without decisive years)."""
        return float(self.bounds[-1]) if self.bounds.size else float("nan")


def random_walk_sign_test(
    baseline_error: NDArray[np.float64],
    candidate_error: NDArray[np.float64],
    *,
    confidence: float = 0.95,
) -> SignTest:
    """Compare two forecasts' errors (absolute or squared) on the same starts, one vote per year.

    Both inputs are shaped ``(n_years, n_per_year)`` (rows in year order); NaN marks a missing
    error and the start is left out for both forecasts.
    """
    a = np.asarray(baseline_error, dtype=np.float64)
    b = np.asarray(candidate_error, dtype=np.float64)
    if a.shape != b.shape:
        raise ValueError(f"errors must share a shape, got {a.shape} and {b.shape}")
    if a.ndim != 2:
        raise ValueError(f"errors must be shaped (n_years, n_per_year), got shape {a.shape}")
    if not 0.0 < confidence < 1.0:
        raise ParameterError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    alpha = significance_level(confidence)
    ok = np.isfinite(a) & np.isfinite(b)
    d = np.where(ok, a - b, 0.0).sum(axis=1)  # > 0: the candidate's errors are smaller
    has = ok.any(axis=1)
    step = np.where(has, np.sign(d), 0.0).astype(np.int64)
    wins, losses = int((step > 0).sum()), int((step < 0).sum())
    ties = int((has & (step == 0)).sum())
    n = wins + losses
    decisive = np.flatnonzero(step != 0)
    walk = np.cumsum(step[decisive]).astype(np.int64)
    p = float(sps.binomtest(wins, n, 0.5).pvalue) if n else 1.0
    return SignTest(
        candidate_better=wins,
        baseline_better=losses,
        ties=ties,
        missing_years=int((~has).sum()),
        walk=walk,
        walk_years=decisive.astype(np.int64),
        bounds=critical_walk(n, alpha=alpha),
        p_value=p,
        alpha=alpha,
        significant=bool(n > 0 and p < alpha),
    )


def critical_walk(n: int, *, alpha: float) -> NDArray[np.float64]:
    """Exact two-sided critical |walk| after k = 1..n fair +-1 steps at level ``alpha``.

    After k steps with w wins the walk is ``2w - k`` and the two-sided binomial p-value of
    ``|walk| = m > 0`` is ``min(1, 2 P(W <= (k - m)/2))``, W ~ Binomial(k, 1/2). The bound is
    the smallest m (of the parity of k) with p < alpha, or ``inf``.
    """
    return np.array(_critical_walk(int(n), float(alpha)), dtype=np.float64)


@lru_cache(maxsize=256)
def _critical_walk(n: int, alpha: float) -> tuple[float, ...]:
    if n <= 0:
        return ()
    k = np.arange(1, n + 1)[:, None]
    m = np.arange(0, n + 1)[None, :]
    reachable = (m <= k) & ((k - m) % 2 == 0)
    losses = (k - m) // 2
    p = np.where(m > 0, np.minimum(1.0, 2.0 * sps.binom.cdf(losses, k, 0.5)), 1.0)
    hit = reachable & (p < alpha)
    first = np.where(hit.any(axis=1), hit.argmax(axis=1), -1)
    return tuple(float(v) for v in np.where(first >= 0, first, np.inf))
