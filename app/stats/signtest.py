"""Random-walk sign test for comparing two forecasts start by start.

Each start date on which the candidate's error is smaller than the baseline's steps the walk up,
each on which it is larger steps it down (ties are left out). Under the null hypothesis that
either forecast is equally likely to be better, wins are Binomial(n, 1/2), and the walk stays
within +-z_{1-alpha/2} sqrt(n) with probability about 1 - alpha (normal approximation): the
test of DelSole and Tippett (2016, Monthly Weather Review 144, "Forecast comparison based on
random walks"). The exact two-sided binomial p-value is given alongside.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import stats as sps


@dataclass(frozen=True)
class SignTest:
    candidate_better: int
    baseline_better: int
    ties: int
    walk: NDArray[np.int64]  # cumulative wins - losses in sample order
    bound: float  # +- bound on the final walk value at the given confidence
    p_value: float

    @property
    def n(self) -> int:
        return self.candidate_better + self.baseline_better

    @property
    def significant(self) -> bool:
        return bool(self.n > 0 and abs(int(self.walk[-1])) > self.bound)


def random_walk_sign_test(
    baseline_error: NDArray[np.float64],
    candidate_error: NDArray[np.float64],
    *,
    confidence: float = 0.95,
) -> SignTest:
    """Compare absolute (or squared) errors of two forecasts on the same 1-D sequence of starts.

    Samples where either error is NaN are skipped.
    """
    a = np.asarray(baseline_error, dtype=np.float64).ravel()
    b = np.asarray(candidate_error, dtype=np.float64).ravel()
    if a.shape != b.shape:
        raise ValueError(f"errors must share a shape, got {a.shape} and {b.shape}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    ok = np.isfinite(a) & np.isfinite(b)
    a, b = a[ok], b[ok]
    step = np.sign(a - b).astype(np.int64)  # +1 where the candidate's error is smaller
    wins, losses = int((step > 0).sum()), int((step < 0).sum())
    ties = int((step == 0).sum())
    n = wins + losses
    walk = np.cumsum(step[step != 0]) if n else np.zeros(1, dtype=np.int64)
    z = float(sps.norm.isf((1.0 - confidence) / 2.0))
    p = float(sps.binomtest(wins, n, 0.5).pvalue) if n else 1.0
    return SignTest(wins, losses, ties, walk, z * float(np.sqrt(n)), p)
