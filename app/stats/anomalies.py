"""Anomalies against a climatology over years, and window means: numpy kernels.

Arrays are shaped ``(n_years, ...)``: the climatology of every other position is the mean over
the year axis. With ``leave_one_out`` (the default) the climatology of year i excludes year i,
so a hindcast is never scored against a climatology that contains its own verifying year.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]


def anomalies(values: FloatArray, *, leave_one_out: bool = True) -> FloatArray:
    """``values`` minus the climatology over axis 0 (NaN-aware; NaN where too few years)."""
    x = np.asarray(values, dtype=np.float64)
    finite = np.isfinite(x)
    n = finite.sum(axis=0)
    total = np.where(finite, x, 0.0).sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        if leave_one_out:
            clim = (total - np.where(finite, x, 0.0)) / (n - 1)
            clim = np.where(n > 1, clim, np.nan)
        else:
            clim = np.where(n > 0, total / n, np.nan)
    return x - clim


def standardized_anomalies(values: FloatArray) -> FloatArray:
    """Anomalies over axis 0 divided by their standard deviation over axis 0 (ddof=1)."""
    x = np.asarray(values, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.nanmean(x, axis=0) if np.isfinite(x).any() else np.full(x.shape[1:], np.nan)
        std = np.nanstd(x, axis=0, ddof=1)
        return (x - mean) / np.where(std > 0, std, np.nan)


def nanmean(values: FloatArray, *, axis: int | tuple[int, ...]) -> FloatArray:
    """Mean over ``axis`` skipping NaN; NaN (without a warning) where nothing is finite."""
    x = np.asarray(values, dtype=np.float64)
    finite = np.isfinite(x)
    n = finite.sum(axis=axis)
    total = np.where(finite, x, 0.0).sum(axis=axis)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, total / n, np.nan)


def ensemble_mean(values: NDArray[np.floating], *, axis: int) -> FloatArray:
    """NaN-aware mean over the member ``axis`` accumulated in float64, without a float64 copy
    of the (often float32) input: members are added one by one into a float64 total; only the
    positions where the total is not finite (some member NaN or infinite) are recomputed NaN-aware."""
    x = np.moveaxis(np.asarray(values), axis, 0)
    total = np.zeros(x.shape[1:], dtype=np.float64)
    for member in x:
        total += member
    bad = ~np.isfinite(total)
    if bad.any():
        sub = x[:, bad]
        count = np.count_nonzero(~np.isnan(sub), axis=0)
        sums = np.nansum(sub, axis=0, dtype=np.float64)
        total[~bad] /= x.shape[0]
        with np.errstate(invalid="ignore", divide="ignore"):
            total[bad] = np.where(count > 0, sums / count, np.nan)
        return total
    total /= x.shape[0]
    return total


def window_means(values: FloatArray, lead_index: list[NDArray[np.int64]], *, axis: int) -> FloatArray:
    """Means over groups of positions of ``axis`` (one group per lead window); the window axis
    takes the place of ``axis``."""
    x = np.asarray(values, dtype=np.float64)
    return np.stack([nanmean(np.take(x, idx, axis=axis), axis=axis) for idx in lead_index], axis=axis)


def weighted_sums(values: FloatArray, weights: FloatArray) -> tuple[FloatArray, FloatArray]:
    """``sum(w * x)`` and ``sum(w)`` over the last axis, counting only finite x.

    ``values`` is ``(..., n_cells)``; ``weights`` is ``(n_regions, n_cells)``. Returns two arrays
    ``(n_regions, ...)``: the numerator and the weight of a weighted mean, ready to be added up
    over chunks of cells.
    """
    x = np.asarray(values, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    finite = np.isfinite(x)
    num = np.einsum("...c,rc->r...", np.where(finite, x, 0.0), w)
    den = np.einsum("...c,rc->r...", finite.astype(np.float64), w)
    return num, den
