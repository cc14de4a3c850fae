"""Per-year sufficient statistics and correlations computed from them.

Layout convention shared by every kernel here: samples arrive as arrays shaped
``(n_years, n_per_year, *columns)``; a "column" is whatever the caller scores independently
(grid cell x lead window, a regional series, ...). Per-year sums come back shaped
``(n_years, N_STATS, *columns)`` with the statistics in the order of :data:`STAT_NAMES`.

A sample counts only where the realistic forecast, the scrambled forecast and the observation are
all finite, so both experiments are always scored on exactly the same samples.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

STAT_NAMES: tuple[str, ...] = ("n", "x1", "x2", "y", "x1x1", "x2x2", "yy", "x1y", "x2y")
N_STATS = len(STAT_NAMES)
MIN_SAMPLES = 3

FloatArray = NDArray[np.float64]


def yearly_sums(realistic: FloatArray, scrambled: FloatArray, observed: FloatArray) -> FloatArray:
    """Sum the paired samples of each year.

    All three inputs are shaped ``(n_years, n_per_year, *columns)``; NaN marks a missing sample.
    Returns ``(n_years, N_STATS, *columns)``.
    """
    x1 = np.asarray(realistic, dtype=np.float64)
    x2 = np.asarray(scrambled, dtype=np.float64)
    y = np.asarray(observed, dtype=np.float64)
    if not (x1.shape == x2.shape == y.shape):
        raise ValueError(
            f"realistic {x1.shape}, scrambled {x2.shape} and observed {y.shape} must share a shape"
        )
    if x1.ndim < 2:
        raise ValueError(f"samples need (n_years, n_per_year, ...) axes, got shape {x1.shape}")
    valid = np.isfinite(x1) & np.isfinite(x2) & np.isfinite(y)
    x1 = np.where(valid, x1, 0.0)
    x2 = np.where(valid, x2, 0.0)
    y = np.where(valid, y, 0.0)
    terms = (valid.astype(np.float64), x1, x2, y, x1 * x1, x2 * x2, y * y, x1 * y, x2 * y)
    return np.stack([t.sum(axis=1) for t in terms], axis=1)


def correlations_from_sums(sums: FloatArray, *, stat_axis: int = 0) -> tuple[FloatArray, FloatArray]:
    """Centred Pearson correlations (realistic vs observed, scrambled vs observed) from sums.

    ``sums`` holds the N_STATS statistics along ``stat_axis``. Columns with fewer than
    MIN_SAMPLES samples, or with zero variance, give NaN.
    """
    s = np.moveaxis(np.asarray(sums, dtype=np.float64), stat_axis, 0)
    if s.shape[0] != N_STATS:
        raise ValueError(f"expected {N_STATS} statistics on axis {stat_axis}, got {s.shape[0]}")
    n, sx1, sx2, sy, sx1x1, sx2x2, syy, sx1y, sx2y = s
    with np.errstate(invalid="ignore", divide="ignore"):
        inv_n = np.where(n >= MIN_SAMPLES, 1.0 / n, np.nan)
        var_y = centred(syy, sy, inv_n)
        r1 = (sx1y - sx1 * sy * inv_n) / np.sqrt(centred(sx1x1, sx1, inv_n) * var_y)
        r2 = (sx2y - sx2 * sy * inv_n) / np.sqrt(centred(sx2x2, sx2, inv_n) * var_y)
    return _clip_unit(r1), _clip_unit(r2)


#: a centred sum of squares at most this fraction of the raw one is rounding noise: zero variance
RELATIVE_ZERO_VARIANCE = 1e-12


def centred(sxx: FloatArray, sx: FloatArray, inv_n: FloatArray) -> FloatArray:
    """``sum((x - mean)^2)`` from raw sums; NaN where it is zero up to rounding."""
    v = sxx - sx * sx * inv_n
    return np.where(v > RELATIVE_ZERO_VARIANCE * sxx, v, np.nan)


def total_sums(yearly: FloatArray) -> FloatArray:
    """Sums over all years: ``(N_STATS, *columns)``."""
    return np.asarray(yearly, dtype=np.float64).sum(axis=0)


def _clip_unit(r: FloatArray) -> FloatArray:
    # Rounding can push |r| a hair past 1; non-finite results become NaN.
    r = np.where(np.isfinite(r), r, np.nan)
    return np.clip(r, -1.0, 1.0)
