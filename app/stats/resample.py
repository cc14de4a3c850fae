"""Resample-count matrices for the year-block bootstrap and the jackknife.

A resample is a row of counts: how many times each year is drawn. All start dates of a year move
together, and the same rows serve both experiments and the observations (a paired bootstrap).
Multiplying a ``(n_resamples, n_years)`` count matrix by the per-year sums gives the sums of every
resample at once: the data are never copied per resample.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

#: fewest year-blocks a bootstrap is run on: n blocks drawn with replacement give C(2n-1, n)
#: distinct resamples (462 at n = 6, 1716 at n = 7), so from 7 years on the default B = 1000 draws
#: are not mostly repeats of each other; intervals are calibrated for 15-30 years (README)
MIN_YEAR_BLOCKS = 7


def year_block_counts(n_years: int, *, resamples: int, seed: int) -> NDArray[np.float64]:
    """Seeded ``(resamples, n_years)`` counts of years drawn with replacement; rows sum to n_years."""
    if n_years < 1:
        raise ValueError(f"n_years must be >= 1, got {n_years}")
    if resamples < 1:
        raise ValueError(f"resamples must be >= 1, got {resamples}")
    rng = np.random.default_rng(seed)
    draws = rng.integers(0, n_years, size=(resamples, n_years))
    counts = np.zeros((resamples, n_years), dtype=np.float64)
    np.add.at(counts, (np.arange(resamples)[:, None], draws), 1.0)
    return counts


def jackknife_counts(n_years: int) -> NDArray[np.float64]:
    """``(n_years, n_years)`` counts that leave out one year per row (delete-one jackknife)."""
    if n_years < 2:
        raise ValueError(f"the jackknife needs >= 2 years, got {n_years}")
    return np.ones((n_years, n_years)) - np.eye(n_years)
