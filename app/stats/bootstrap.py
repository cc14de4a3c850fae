"""Resampled correlations of both experiments by one matrix product per block of columns.

Given per-year sums ``(n_years, N_STATS, n_columns)`` (see :mod:`app.stats.sums`) and a count
matrix ``(n_resamples, n_years)`` (see :mod:`app.stats.resample`), the sums of every resample are
``counts @ sums``: one BLAS product. The correlations follow elementwise. Work proceeds over blocks
of columns so that the temporaries stay small (cache-sized) whatever the number of columns.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from app.stats.sums import MIN_SAMPLES, N_STATS, centred

FloatArray = NDArray[np.float64]

#: target bytes of one block's resampled sums; keeps the temporaries within a few MB
BLOCK_BYTES = 4 * 2**20


def column_block(n_resamples: int, *, block_bytes: int = BLOCK_BYTES) -> int:
    """How many columns one block holds so that its resampled sums fit ``block_bytes``."""
    return max(1, block_bytes // (8 * N_STATS * max(1, n_resamples)))


def resampled_correlations(
    yearly: FloatArray, counts: FloatArray, *, block: int | None = None
) -> tuple[FloatArray, FloatArray]:
    """ACC of the realistic and the scrambled experiment in every resample.

    ``yearly`` is ``(n_years, N_STATS, n_columns)``; ``counts`` is ``(n_resamples, n_years)``.
    Returns two ``(n_resamples, n_columns)`` arrays; a resample with fewer than MIN_SAMPLES
    samples or zero variance gives NaN there.
    """
    yearly = np.asarray(yearly, dtype=np.float64)
    counts = np.asarray(counts, dtype=np.float64)
    if yearly.ndim != 3 or yearly.shape[1] != N_STATS:
        raise ValueError(f"yearly sums must be (n_years, {N_STATS}, n_columns), got {yearly.shape}")
    n_years, _, n_cols = yearly.shape
    if counts.ndim != 2 or counts.shape[1] != n_years:
        raise ValueError(f"counts must be (n_resamples, {n_years}), got {counts.shape}")
    n_res = counts.shape[0]
    step = block or column_block(n_res)
    # the draws are stored column by column ((n_columns, B) in memory, returned as (B, n_columns)
    # views), so that each column's resamples are contiguous for the interval's partitions
    r1t = np.empty((n_cols, n_res))
    r2t = np.empty((n_cols, n_res))
    counts_t = np.ascontiguousarray(counts.T)
    for start in range(0, n_cols, step):
        stop = min(n_cols, start + step)
        width = stop - start
        block_sums = yearly[:, :, start:stop].reshape(n_years, N_STATS * width)
        res = (block_sums.T @ counts_t).reshape(N_STATS, width, n_res)  # contiguous (stat, col, B)
        _correlate_into(res.transpose(2, 0, 1), r1t[start:stop].T, r2t[start:stop].T)
    return r1t.T, r2t.T


def matrix_product_floor(yearly: FloatArray, counts: FloatArray, *, block: int | None = None) -> None:
    """Only the BLAS products of :func:`resampled_correlations`, for benchmarks (the floor)."""
    n_years, _, n_cols = yearly.shape
    step = block or column_block(counts.shape[0])
    for start in range(0, n_cols, step):
        stop = min(n_cols, start + step)
        counts @ yearly[:, :, start:stop].reshape(n_years, -1)


def _correlate_into(res: FloatArray, out1: FloatArray, out2: FloatArray) -> None:
    n, sx1, sx2, sy, sx1x1, sx2x2, syy, sx1y, sx2y = (res[:, k, :] for k in range(N_STATS))
    with np.errstate(invalid="ignore", divide="ignore"):
        inv_n = np.where(n >= MIN_SAMPLES, 1.0 / n, np.nan)
        my = sy * inv_n
        var_y = centred(syy, sy, inv_n)
        v1 = centred(sx1x1, sx1, inv_n)
        v2 = centred(sx2x2, sx2, inv_n)
        np.divide(sx1y - sx1 * my, np.sqrt(v1 * var_y), out=out1)
        np.divide(sx2y - sx2 * my, np.sqrt(v2 * var_y), out=out2)
    for out in (out1, out2):
        out[~np.isfinite(out)] = np.nan
        np.clip(out, -1.0, 1.0, out=out)
