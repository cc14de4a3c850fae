"""Numerical kernels of landlift.

Everything in this package takes and returns plain numpy arrays: no xarray, no labels, no I/O,
no web. Kernels are vectorised over any trailing "column" axes (grid cells x lead windows, or
regional series), so the layer above can call them once per spatial chunk.

Modules:
    sums       per-year sufficient statistics of paired (realistic, scrambled, observed) samples
               and correlations computed from them
    resample   seeded year-block resample-count matrices (bootstrap and jackknife)
    bootstrap  resampled correlations by one matrix product per block of columns
    intervals  percentile and expanded-percentile intervals with matching p-values
    fdr        Benjamini-Hochberg false discovery rate across the cells of a map
"""
