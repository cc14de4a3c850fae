"""Field significance: Benjamini-Hochberg false discovery rate across the cells of a map."""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray
from scipy import stats as sps

#: twice a global 0.05, as recommended for spatially correlated fields (Wilks 2016, BAMS 97)
DEFAULT_FDR_ALPHA = 0.10


def benjamini_hochberg(p_values: NDArray[np.float64], *, alpha: float = DEFAULT_FDR_ALPHA) -> NDArray[np.bool_]:
    """Cells rejected at false discovery rate ``alpha``; NaN p-values (no data) are never rejected.

    Wraps :func:`scipy.stats.false_discovery_control` (the BH adjusted p-values); a cell is
    significant where its adjusted p-value is <= alpha. The test counts only finite p-values.
    """
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"fdr alpha must lie strictly between 0 and 1, got {alpha}")
    p = np.asarray(p_values, dtype=np.float64)
    out = np.zeros(p.shape, dtype=bool)
    finite = np.isfinite(p)
    if finite.any():
        adjusted = sps.false_discovery_control(np.clip(p[finite], 0.0, 1.0), method="bh")
        out[finite] = adjusted <= alpha
    return out


def fdr_over_cells(p_values: NDArray[np.float64], *, alpha: float = DEFAULT_FDR_ALPHA) -> NDArray[np.bool_]:
    """BH applied separately to each map: ``p_values`` is ``(n_maps, *cells)``."""
    p = np.asarray(p_values, dtype=np.float64)
    return np.stack([benjamini_hochberg(m, alpha=alpha) for m in p]) if p.size else p.astype(bool)
