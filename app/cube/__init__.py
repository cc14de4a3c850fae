"""xarray layer: open and validate CF data, lead windows, alignment, anomalies, regions.

This layer reads files and arranges labelled data; the statistics it applies are the numpy
kernels of :mod:`app.stats`, called per spatial tile or per block of cells. It imports nothing
from the layers above it (results, store, jobs, api).
"""
