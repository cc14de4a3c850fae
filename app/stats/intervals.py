"""Bootstrap confidence intervals and two-sided p-values that agree with them exactly.

Methods (``INTERVAL_METHODS``):

``"centred"`` (use it for region means of cell ACCs, in Fisher z space)
    The bootstrap distribution re-centred on the point value: the draws shifted by
    ``point - median(draws)``, read at the expanded tail level below. It is the distribution of
    ``theta* - median(theta*)`` placed around ``theta_hat``: a recentred percentile interval
    (Hall, Martin and Schucany 1989, J. Statist. Comput. Simul. 33, 161-172, study such
    re-centred and studentised intervals for correlations in Fisher z space). It removes the
    drift of the bootstrap median away from the point, which averaging over many cells shrinks
    in spread but not in offset, and it always contains its point value. It needs ``point``.

``"expanded"`` (default: the best-calibrated test of zero gain, see notes/calibration.md)
    The expanded percentile interval of Hesterberg (2015, "What teachers should know about the
    bootstrap", The American Statistician 69(4), 371-386, section 5.5): the percentile interval
    taken at the tail level ``alpha'/2 = Phi(-sqrt(n/(n-1)) * t_{n-1, 1-alpha/2})`` instead of
    ``alpha/2``, with ``n`` the number of resampled blocks (years). It corrects the two reasons a
    percentile interval from few blocks is too narrow: the bootstrap spread is biased low by
    ``sqrt((n-1)/n)``, and normal quantiles stand where Student-t ones belong. Its bounds are read
    from the draws as they are, so they can lie beside the point.

``"percentile"``
    The plain percentile interval, tail level ``alpha/2``.

p-values (all methods). With ``B`` finite draws ``d`` of a column (for ``"centred"`` the shifted
draws), let ``r = min(#(d <= 0), #(d >= 0))``. The tail fraction is ``(r + 1) / (B + 1)``
(Phipson and Smyth 2010, Stat. Appl. Genet. Mol. Biol. 9(1), article 39: a resampling p-value
is never 0), and ``p = A((r + 1) / (B + 1))`` with ``A`` = :func:`alpha_of_tail`, the inverse of
the method's map from ``alpha`` to tail level, capped at 1. The smallest p-value of a method is
``A(1 / (B + 1))``: about ``2 / (B + 1)`` for the percentile map, more for the expanded one
(0.0098 at 15 years, B = 1000).

Bounds. Let ``P[r]`` (r = 0..B) be the table of those p-values made non-decreasing in ``r``
(a running maximum; it only guards against rounding, ``A`` being increasing), ``alpha`` =
:func:`significance_level` ``(confidence)`` and ``k = #{r : P[r] < alpha}``. The lower bound is
the k-th smallest draw and the upper bound the k-th largest (1-based), with ``-inf`` / ``+inf``
when ``k = 0`` (too few draws for this confidence: ``A(1/(B+1)) >= alpha``).

Theorem: for every column, the interval excludes 0 if and only if ``p < alpha``.
Proof. ``P`` is non-decreasing, so ``P[r] < alpha`` iff ``r < k``. Let ``r_lo = #(d <= 0)``.
If ``r_lo < k``, at most ``k - 1`` draws are ``<= 0``, so the k-th smallest is ``> 0``; if
``r_lo >= k``, either ``k = 0`` and the bound is ``-inf`` or at least ``k`` draws are ``<= 0`` and
the k-th smallest is ``<= 0``. So ``low > 0`` iff ``r_lo < k``; by the same argument on ``-d``,
``high < 0`` iff ``r_hi = #(d >= 0) < k``. Hence the interval excludes 0 iff
``min(r_lo, r_hi) < k`` iff ``P[min(r_lo, r_hi)] < alpha`` iff ``p < alpha``. The bounds and the
counts are taken on the same array of (shifted) draws, so rounding cannot break this: the shift
``x -> (x - m) + point`` is monotone in floating point, hence it maps the k-th smallest draw to
the k-th smallest shifted draw. QED. Since ``P[B] = 1 >= alpha``, ``k <= B``.

The centred interval contains its point: ``k < (B + 1) * tail <= (B + 1) / 4`` (tail levels
are below 1/4 for every confidence >= 1/2), so the k-th smallest draw is at most the lower middle
draw, which is at most the median ``m``; the shift maps ``m`` to ``(m - m) + point = point``
exactly, and monotonicity gives ``low <= point <= high``.

Quantiles are order statistics of the finite draws, the lower one from the draws and the upper
one from the negated draws; NaN or infinite draws (degenerate resamples) are left out column by
column; a column with no finite draw (or, for ``"centred"``, a non-finite point) gives NaN.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from functools import lru_cache
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats as sps

FloatArray = NDArray[np.float64]
IntervalMethod = Literal["centred", "expanded", "percentile"]
INTERVAL_METHODS: tuple[str, ...] = ("centred", "expanded", "percentile")
DEFAULT_INTERVAL_METHOD: IntervalMethod = "expanded"
#: methods whose bounds are read around the point value (they need ``point``)
POINT_METHODS: tuple[str, ...] = ("centred",)


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


def tail_level(
    confidence: float, *, n_blocks: int, method: IntervalMethod = DEFAULT_INTERVAL_METHOD
) -> float:
    """Probability in each tail of the bootstrap distribution at which the bounds are read.

    ``"centred"`` and ``"expanded"`` use Hesterberg's expanded level, ``"percentile"`` alpha/2.
    """
    _check(confidence, n_blocks, method)
    alpha = significance_level(confidence)
    if method == "percentile":
        return alpha / 2.0
    t = sps.t.isf(alpha / 2.0, df=n_blocks - 1)
    return float(sps.norm.cdf(-np.sqrt(n_blocks / (n_blocks - 1.0)) * t))


def alpha_of_tail(
    tail: ArrayLike, *, n_blocks: int, method: IntervalMethod = DEFAULT_INTERVAL_METHOD
) -> FloatArray:
    """Inverse of :func:`tail_level`: the two-sided level alpha whose tail level is ``tail``."""
    _check(0.5, n_blocks, method)
    t = np.asarray(tail, dtype=np.float64)
    if method == "percentile":
        return np.minimum(1.0, 2.0 * t)
    z = -sps.norm.ppf(np.clip(t, 0.0, 0.5))
    return np.minimum(1.0, 2.0 * sps.t.sf(z / np.sqrt(n_blocks / (n_blocks - 1.0)), df=n_blocks - 1))


def p_value_table(
    n_draws: int, *, n_blocks: int, method: IntervalMethod = DEFAULT_INTERVAL_METHOD
) -> FloatArray:
    """``P[r]``, r = 0..n_draws: the p-value when ``r`` draws lie on the smaller side of 0.

    ``A((r + 1) / (n_draws + 1))`` (Phipson and Smyth 2010) made non-decreasing; never 0.
    """
    if n_draws < 1:
        raise ValueError(f"p-values need >= 1 finite draw, got {n_draws}")
    _check(0.5, n_blocks, method)
    return _p_table(int(n_draws), int(n_blocks), method).copy()


@lru_cache(maxsize=64)
def _p_table(n_draws: int, n_blocks: int, method: IntervalMethod) -> FloatArray:
    r = np.arange(n_draws + 1, dtype=np.float64)
    raw = alpha_of_tail((r + 1.0) / (n_draws + 1.0), n_blocks=n_blocks, method=method)
    table = np.maximum.accumulate(raw)
    table.flags.writeable = False
    return table


def order_rank(
    n_draws: int,
    *,
    confidence: float,
    n_blocks: int,
    method: IntervalMethod = DEFAULT_INTERVAL_METHOD,
) -> int:
    """``k``: the bounds are the k-th smallest and k-th largest of ``n_draws`` draws (1-based;
    0 means unbounded). It is the number of counts whose p-value is below the significance level.
    """
    _check(confidence, n_blocks, method)
    table = p_value_table(n_draws, n_blocks=n_blocks, method=method)
    return int(np.count_nonzero(table < significance_level(confidence)))


def min_p_value(
    n_draws: int, *, n_blocks: int, method: IntervalMethod = DEFAULT_INTERVAL_METHOD
) -> float:
    """The smallest p-value ``n_draws`` resamples can give: ``A(1 / (n_draws + 1))``."""
    return float(p_value_table(n_draws, n_blocks=n_blocks, method=method)[0])


def format_p_value(p: float, *, resamples: int, decimals: int = 3) -> str:
    """p-value as text, small values as a bound rather than 0.

    Rule: the floor is ``max(10**-decimals, 1 / (resamples + 1))`` -- the printed precision, or
    the resolution of a tail fraction ``(r + 1) / (B + 1)`` from ``B`` resamples, whichever is
    coarser. A p-value below the floor is printed as ``"<"`` and the floor rounded *up* to
    ``decimals`` decimals (an honest bound: ``"<0.001"`` with B = 1000); anything else as the
    value rounded to ``decimals`` decimals (``"0.042"``). NaN prints as ``"nan"``.
    """
    if resamples < 1:
        raise ValueError(f"resamples must be >= 1, got {resamples}")
    if decimals < 1:
        raise ValueError(f"decimals must be >= 1, got {decimals}")
    v = float(p)
    if math.isnan(v):
        return "nan"
    if not 0.0 <= v <= 1.0:
        raise ValueError(f"a p-value lies in [0, 1], got {v}")
    scale = 10**decimals
    floor = max(1.0 / scale, 1.0 / (resamples + 1.0))
    if v < floor:
        bound = math.ceil(round(floor * scale, 9)) / scale
        return f"<{bound:.{decimals}f}"
    return f"{v:.{decimals}f}"


def bootstrap_interval(
    draws: ArrayLike,
    *,
    point: ArrayLike | None = None,
    confidence: float = 0.95,
    n_blocks: int,
    method: IntervalMethod = DEFAULT_INTERVAL_METHOD,
) -> Interval:
    """Interval and p-value from resampled values ``draws`` shaped ``(n_resamples, *columns)``.

    ``point`` (shaped like one row of ``draws``, or broadcastable to it) is the full-sample value;
    ``"centred"`` needs it, the other methods ignore it. Pass values in the space where the
    interval is to be centred: Fisher z for a mean of correlations (transform the bounds back
    with ``tanh``, which keeps the p-value), plain differences for a gain.
    """
    _check(confidence, n_blocks, method)
    d = np.asarray(draws, dtype=np.float64)
    if d.ndim == 0:
        raise ValueError("draws must have a resample axis, got a scalar")
    cols = d.shape[1:]
    if method in POINT_METHODS:
        if point is None:
            raise ValueError(f"method {method!r} reads the interval around the point: pass point=")
        pt = np.broadcast_to(np.asarray(point, dtype=np.float64), cols)
        d = _recentre(d, pt)  # a new array: partitioned in place below
        owned = True
    else:
        owned = False
    n_res = d.shape[0]
    finite = np.isfinite(d)
    if n_res > 0 and finite.all():
        return _interval_all_finite(
            d, confidence=confidence, n_blocks=n_blocks, method=method, owned=owned
        )
    n_fin = finite.sum(axis=0)
    ranks = np.zeros(cols, dtype=np.int64)
    p = np.full(cols, np.nan)
    below = np.where(finite, d <= 0.0, False).sum(axis=0)
    above = np.where(finite, d >= 0.0, False).sum(axis=0)
    smaller = np.minimum(below, above)
    for n in np.unique(n_fin):
        if n == 0:
            continue
        sel = n_fin == n
        table = _p_table(int(n), n_blocks, method)
        ranks[sel] = int(np.count_nonzero(table < significance_level(confidence)))
        p[sel] = table[smaller[sel]]
    low = _order_statistic(np.where(finite, d, np.inf), ranks)
    high = -_order_statistic(np.where(finite, -d, np.inf), ranks)
    empty = n_fin == 0
    return Interval(
        low=np.where(empty, np.nan, low),
        high=np.where(empty, np.nan, high),
        p_value=p,
    )


def _recentre(d: FloatArray, point: FloatArray) -> FloatArray:
    """``(d - median(d)) + point`` per column, the median over the finite draws; NaN columns
    where the point or every draw is non-finite."""
    if d.shape[0] == 0:
        return d.copy()
    finite = np.isfinite(d)
    if finite.all():
        med = np.median(d, axis=0)
    else:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns
            med = np.nanmedian(np.where(finite, d, np.nan), axis=0)
    ok = np.isfinite(point) & np.isfinite(med)
    out = (d - np.where(ok, med, 0.0)) + np.where(ok, point, 0.0)
    np.copyto(out, np.nan, where=~ok)
    return out


def _interval_all_finite(
    d: FloatArray, *, confidence: float, n_blocks: int, method: IntervalMethod, owned: bool
) -> Interval:
    """The usual case, no degenerate resample: the same order statistics by partitions in the
    draws' own memory layout (contiguous per column when they come from the bootstrap kernel)."""
    n = d.shape[0]
    table = _p_table(n, n_blocks, method)
    k = int(np.count_nonzero(table < significance_level(confidence)))
    below = np.count_nonzero(d <= 0.0, axis=0)
    above = np.count_nonzero(d >= 0.0, axis=0)
    p = table[np.minimum(below, above)]
    cols = d.shape[1:]
    if k == 0:
        return Interval(low=np.full(cols, -np.inf), high=np.full(cols, np.inf), p_value=p)
    work = d if owned else d.copy(order="K")
    work.partition(k - 1, axis=0)
    low = work[k - 1].copy()
    work.partition(n - k, axis=0)  # the (n-k)-th (0-based) smallest is the k-th largest
    high = work[n - k].copy()
    return Interval(low=low, high=high, p_value=p)


def _order_statistic(d: FloatArray, ranks: NDArray[np.int64]) -> FloatArray:
    """The ``ranks``-th smallest (1-based) of each column, ``-inf`` where the rank is 0;
    non-finite draws were set to +inf (they sort last and are never reached)."""
    n_res = d.shape[0]
    flat = d.reshape(n_res, -1)
    kf = ranks.reshape(-1)
    out = np.full(flat.shape[1], -np.inf)
    for kv in np.unique(kf):
        if kv == 0:
            continue
        cols = np.flatnonzero(kf == kv)
        sub = flat[:, cols] if cols.size < flat.shape[1] else flat
        out[cols] = np.partition(sub, int(kv) - 1, axis=0)[int(kv) - 1]
    return out.reshape(d.shape[1:])


def _check(confidence: float, n_blocks: int, method: str) -> None:
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    if method not in INTERVAL_METHODS:
        raise ValueError(f"unknown interval method {method!r}; choose one of {INTERVAL_METHODS}")
    if n_blocks < 2:
        raise ValueError(f"intervals need >= 2 resampled blocks (years), got {n_blocks}")
