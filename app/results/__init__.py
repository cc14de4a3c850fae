"""Result objects and their forms: skill-curve JSON and CSV, CF NetCDF maps, figures.

This layer formats what :mod:`app.cube` computed; it computes no statistics of its own.
"""
