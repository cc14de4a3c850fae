"""Fisher z of correlations and the sample-weighted region mean of cell ACCs.

A region's mean ACC is taken in Fisher z space (Fisher 1921, "On the 'probable error' of a
coefficient of correlation deduced from a small sample", Metron 1, 3-32): ``z = arctanh(r)`` is
close to normal with variance ``1 / (n - 3)`` for ``n`` independent samples, whatever the true
correlation. Averaging z with inverse-variance weights ``n - 3`` is the standard fixed-effect
mean of correlations (Hedges and Olkin 1985, "Statistical methods for meta-analysis", ch. 11);
here each cell's weight is its area weight (cos(lat), inside the region) times ``n - 3``:

    z_region = sum_c a_c (n_c - 3) z_c / sum_c a_c (n_c - 3),    ACC_region = tanh(z_region)

and cells with fewer than ``min_samples`` samples are left out. The kernel returns numerator and
denominator so that blocks of cells can be summed before the one division; the same kernel serves
the point value and every resample.

Why a minimum (:data:`MIN_CELL_SAMPLES` = 10). The weight ``n - 3`` already gives a 3-sample
cell weight 0, but a cell with 4-9 samples still enters with |z| up to 14.2 (``|r| = 1`` by
chance is likely with so few samples) and a standard deviation of ``1/sqrt(n - 3)`` (1 at
n = 4). Such a cell is nearly all missing: with 4 or more starts a year, fewer than 10 samples
means data from two or three years out of 15-30, a correlation over a different and tiny period
that is not comparable with its neighbours'. From n = 10 on, ``1/(n - 3)`` is an accurate
variance of z: under independence and zero correlation the exact variance (from the exact
density of r, checked in ``tests/test_stats_fisher.py``) is 0.1419 at n = 10 against
1/7 = 0.1429, while at n = 4 it is 0.822 against 1. Real hindcast cells have 15-30 years times
several starts (60 samples and more), so the minimum removes only cells that are nearly all
missing; it is an option (``min_samples``). Samples of a year are not independent (they share
the year's weather), so ``n - 3`` over-states every cell's information alike; as a relative
weight between the cells of one region it still ranks them by how much data they have.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]

#: correlations are clipped to +-Z_CLIP before arctanh, so |z| <= 14.2 (r = +-1 stays finite)
Z_CLIP = 1.0 - 1e-12
#: default minimum number of samples of a cell that enters a region mean of ACC
MIN_CELL_SAMPLES = 10


def fisher_z(r: ArrayLike) -> FloatArray:
    """``arctanh(r)`` with ``r`` clipped to ``[-Z_CLIP, Z_CLIP]``; NaN stays NaN."""
    out = np.clip(np.asarray(r, dtype=np.float64), -Z_CLIP, Z_CLIP)
    return np.arctanh(out, out=out)


def weighted_z_sums(
    z: ArrayLike,
    n_samples: ArrayLike,
    area_weights: ArrayLike,
    *,
    min_samples: int = MIN_CELL_SAMPLES,
) -> tuple[FloatArray, FloatArray]:
    """Numerator and denominator of the sample-weighted region mean of Fisher z.

    ``z`` is ``(..., n_cells)`` (e.g. ``(n_windows, n_cells)`` for the point values, or
    ``(B, n_windows, n_cells)`` for the resamples); ``n_samples`` is broadcastable to ``z`` (the
    cells' sample counts, or each resample's counts); ``area_weights`` is ``(n_regions,
    n_cells)``. Returns ``sum_c w_c z_c`` and ``sum_c w_c`` over finite z only, each shaped
    ``(n_regions, ...)``, with ``w_c = area_weight * (n_c - 3)`` for ``n_c >= min_samples`` and 0
    otherwise. Add them up over blocks of cells, then ``tanh(num / den)`` (NaN where den = 0).
    The sums over cells are matrix products (BLAS).
    """
    zz = np.asarray(z, dtype=np.float64)
    n = np.broadcast_to(np.asarray(n_samples, dtype=np.float64), zz.shape)
    a = np.asarray(area_weights, dtype=np.float64)
    if a.ndim != 2 or a.shape[1] != zz.shape[-1]:
        raise ValueError(f"area weights must be (n_regions, {zz.shape[-1]}), got shape {a.shape}")
    if min_samples < 4:
        raise ValueError(f"min_samples must be >= 4 (weights n - 3 > 0), got {min_samples}")
    n_given = np.asarray(n_samples, dtype=np.float64)
    if zz.ndim >= 2 and n_given.ndim <= 2:
        return _fixed_weight_sums(zz, n_given, a, min_samples=min_samples)
    finite = np.isfinite(zz)
    keep = finite & (n >= min_samples)  # NaN counts compare False
    inverse_variance = np.where(keep, n - 3.0, 0.0)
    weighted = np.where(keep, zz, 0.0)
    weighted *= inverse_variance
    lead = zz.shape[:-1]
    cells = zz.shape[-1]
    num = weighted.reshape(-1, cells) @ a.T  # (prod(lead), R)
    den = inverse_variance.reshape(-1, cells) @ a.T
    return np.moveaxis(num.reshape(lead + (a.shape[0],)), -1, 0), np.moveaxis(
        den.reshape(lead + (a.shape[0],)), -1, 0
    )


def _fixed_weight_sums(
    zz: FloatArray, n: FloatArray, a: FloatArray, *, min_samples: int
) -> tuple[FloatArray, FloatArray]:
    """The same sums when the sample counts do not vary over the leading axes (one count per
    window and cell, the same in every resample): the weights fold into one ``(R, W, m)`` matrix
    and each window's sums are one BLAS product over the leading (resample) rows."""
    W, m = zz.shape[-2], zz.shape[-1]
    n2 = np.broadcast_to(n, (W, m))
    iv = np.where(np.isfinite(n2) & (n2 >= min_samples), n2 - 3.0, 0.0)  # (W, m)
    weights = iv[None, :, :] * a[:, None, :]  # (R, W, m)
    lead = zz.shape[:-2]
    rows = zz.reshape(-1, W, m)
    finite = np.isfinite(rows)
    all_finite = bool(finite.all())
    values = rows if all_finite else np.where(finite, rows, 0.0)
    R = a.shape[0]
    num = np.empty((R, rows.shape[0], W))
    den = np.empty((R, rows.shape[0], W))
    for w in range(W):
        num[:, :, w] = (values[:, w, :] @ weights[:, w, :].T).T
        if all_finite:
            den[:, :, w] = weights[:, w, :].sum(axis=1)[:, None]
        else:
            den[:, :, w] = (finite[:, w, :].astype(np.float64) @ weights[:, w, :].T).T
    return num.reshape((R,) + lead + (W,)), den.reshape((R,) + lead + (W,))
