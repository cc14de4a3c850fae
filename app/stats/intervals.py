"""Bootstrap confidence intervals and two-sided p-values that agree with them.

Two methods:

``"expanded"`` (default)
    The expanded percentile interval of Hesterberg (2015, "What teachers should know about the
    bootstrap", The American Statistician 69(4), 371-386, section 5.5): the percentile interval
    taken at the tail level ``alpha'/2 = Phi(-sqrt(n/(n-1)) * t_{n-1, 1-alpha/2})`` instead of
    ``alpha/2``, with ``n`` the number of resampled blocks (years). It corrects the two reasons a
    percentile interval from few blocks is too narrow: the bootstrap spread is biased low by
    ``sqrt((n-1)/n)``, and normal quantiles stand where Student-t ones belong.

``"percentile"``
    The plain percentile interval, tail level ``alpha/2``.

Both take quantiles as order statistics of the finite resamples (the inverted-CDF rule), the
lower one from the draws and the upper one from the negated draws, so that the interval excludes
zero exactly when the smaller tail fraction ``min(#(d <= 0), #(d >= 0)) / B`` is below the tail
level. The p-value inverts the same map from tail level to ``alpha``; hence, for every column,
the interval excludes 0 if and only if ``p < significance_level(confidence)``
(``1 - confidence`` rounded to 12 decimals). Its resolution is about 1/B.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import NDArray
from scipy import stats as sps

FloatArray = NDArray[np.float64]
IntervalMethod = Literal["expanded", "percentile"]
INTERVAL_METHODS: tuple[str, ...] = ("expanded", "percentile")


@dataclass(frozen=True)
class Interval:
    """Bounds and two-sided p-value (for the null value 0) per column."""

    low: FloatArray
    high: FloatArray
    p_value: FloatArray


def significance_level(confidence: float) -> float:
    """``1 - confidence`` rounded to 12 decimals, so that 0.95 gives exactly the double 0.05.

    Every comparison ``p < 1 - confidence`` in landlift uses this value; the raw float
    ``1.0 - 0.95`` is 0.050000000000000044 and would call p = 0.05 significant.
    """
    return round(1.0 - confidence, 12)


def tail_level(confidence: float, *, n_blocks: int, method: IntervalMethod = "expanded") -> float:
    """Probability in each tail of the bootstrap distribution at which the bounds are read."""
    _check(confidence, n_blocks, method)
    alpha = significance_level(confidence)
    if method == "percentile":
        return alpha / 2.0
    t = sps.t.isf(alpha / 2.0, df=n_blocks - 1)
    return float(sps.norm.cdf(-np.sqrt(n_blocks / (n_blocks - 1.0)) * t))


def alpha_of_tail(tail: FloatArray, *, n_blocks: int, method: IntervalMethod = "expanded") -> FloatArray:
    """Inverse of :func:`tail_level`: the two-sided level alpha whose tail level is ``tail``."""
    _check(0.5, n_blocks, method)
    tail = np.asarray(tail, dtype=np.float64)
    if method == "percentile":
        return np.minimum(1.0, 2.0 * tail)
    z = -sps.norm.ppf(np.clip(tail, 0.0, 0.5))
    return np.minimum(1.0, 2.0 * sps.t.sf(z / np.sqrt(n_blocks / (n_blocks - 1.0)), df=n_blocks - 1))


def bootstrap_interval(
    draws: FloatArray,
    *,
    confidence: float = 0.95,
    n_blocks: int,
    method: IntervalMethod = "expanded",
) -> Interval:
    """Interval and p-value from resampled values ``draws`` shaped ``(n_resamples, *columns)``.

    NaN draws (degenerate resamples) are left out column by column; a column with no finite
    draw gives NaN bounds and p-value.
    """
    tail = tail_level(confidence, n_blocks=n_blocks, method=method)
    d = np.asarray(draws, dtype=np.float64)
    if d.ndim >= 2 and d.shape[0] > 0 and np.isfinite(d).all():
        return _interval_all_finite(d, tail=tail, n_blocks=n_blocks, method=method)
    finite = np.isfinite(d)
    n_fin = finite.sum(axis=0)
    low = _lower_order_statistic(np.where(finite, d, np.inf), n_fin, tail)
    high = -_lower_order_statistic(np.where(finite, -d, np.inf), n_fin, tail)
    with np.errstate(invalid="ignore", divide="ignore"):
        below = np.where(finite, d <= 0.0, False).sum(axis=0) / n_fin
        above = np.where(finite, d >= 0.0, False).sum(axis=0) / n_fin
    p = alpha_of_tail(np.minimum(below, above), n_blocks=n_blocks, method=method)
    empty = n_fin == 0
    return Interval(
        low=np.where(empty, np.nan, low),
        high=np.where(empty, np.nan, high),
        p_value=np.where(empty, np.nan, p),
    )


def _interval_all_finite(d: FloatArray, *, tail: float, n_blocks: int, method: IntervalMethod) -> Interval:
    """The usual case, no degenerate resample: the same order statistics by partitions in the
    draws' own memory layout (contiguous per column when they come from the bootstrap kernel)."""
    n = d.shape[0]
    k = min(max(int(np.ceil(tail * n - 1e-9)), 1) - 1, n - 1)  # as in _lower_order_statistic
    below = np.count_nonzero(d <= 0.0, axis=0) / n
    above = np.count_nonzero(d >= 0.0, axis=0) / n
    p = alpha_of_tail(np.minimum(below, above), n_blocks=n_blocks, method=method)
    work = d.copy(order="K")
    work.partition(k, axis=0)
    low = work[k].copy()
    work.partition(n - 1 - k, axis=0)  # the (n-1-k)-th smallest of d is minus the k-th of -d
    high = work[n - 1 - k].copy()
    return Interval(low=low, high=high, p_value=p)


def _lower_order_statistic(d: FloatArray, n_fin: NDArray[np.int_], tail: float) -> FloatArray:
    """Inverted-CDF quantile at ``tail`` of each column; non-finite draws were set to +inf."""
    k = np.maximum(np.ceil(tail * n_fin - 1e-9).astype(np.int64), 1) - 1  # 0-based order index
    n_res = d.shape[0]
    k = np.minimum(k, max(n_res - 1, 0))
    if d.ndim == 1:
        return np.asarray(np.partition(d, int(k))[int(k)], dtype=np.float64)
    flat = d.reshape(n_res, -1)
    kf = k.reshape(-1)
    out = np.empty(flat.shape[1])
    for kv in np.unique(kf):
        cols = np.flatnonzero(kf == kv)
        sub = flat[:, cols] if cols.size < flat.shape[1] else flat
        out[cols] = np.partition(sub, int(kv), axis=0)[int(kv)]
    return out.reshape(d.shape[1:])


def _check(confidence: float, n_blocks: int, method: str) -> None:
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    if method not in INTERVAL_METHODS:
        raise ValueError(f"unknown interval method {method!r}; choose one of {INTERVAL_METHODS}")
    if n_blocks < 2:
        raise ValueError(f"intervals need >= 2 resampled blocks (years), got {n_blocks}")
