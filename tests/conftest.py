"""Shared fixtures.

Stats fixtures compose: ``rng`` (a seeded generator) -> ``make_paired_samples`` (a factory of
synthetic paired hindcast samples) -> ``paired_samples`` / ``paired_samples_with_gaps``.
Arrays follow the app.stats layout ``(n_years, n_per_year, *columns)``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pytest

STATS_SEED = 20_240_611


@dataclass(frozen=True)
class PairedSamples:
    """Realistic-start forecast, scrambled-start forecast and observation, same shape."""

    realistic: np.ndarray
    scrambled: np.ndarray
    observed: np.ndarray

    @property
    def n_years(self) -> int:
        return int(self.observed.shape[0])

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return self.realistic, self.scrambled, self.observed


PairedFactory = Callable[..., PairedSamples]


@pytest.fixture
def rng() -> np.random.Generator:
    """A fresh generator with a fixed seed for every test."""
    return np.random.default_rng(STATS_SEED)


@pytest.fixture
def make_paired_samples(rng: np.random.Generator) -> PairedFactory:
    """Factory: ``make(n_years=, n_per_year=, n_columns=, skill=, nan_fraction=)``.

    Each column gets a signal ``s``; observation = s + noise, realistic = s + noise,
    scrambled = skill * s + noise, with the per-column signal strength varied so that the
    correlations differ between columns. ``nan_fraction`` scatters NaNs independently into
    each of the three arrays.
    """

    def make(
        *,
        n_years: int = 12,
        n_per_year: int = 6,
        n_columns: int = 5,
        skill: float = 0.5,
        nan_fraction: float = 0.0,
    ) -> PairedSamples:
        shape = (n_years, n_per_year, n_columns)
        strength = np.linspace(0.3, 2.0, n_columns)
        signal = strength * rng.normal(size=shape)
        observed = signal + rng.normal(size=shape)
        realistic = signal + rng.normal(size=shape)
        scrambled = skill * signal + rng.normal(size=shape)
        arrays = [realistic, scrambled, observed]
        if nan_fraction > 0.0:
            for a in arrays:
                a[rng.random(shape) < nan_fraction] = np.nan
        return PairedSamples(*arrays)

    return make


@pytest.fixture
def paired_samples(make_paired_samples: PairedFactory) -> PairedSamples:
    """12 years x 6 start dates x 5 columns, no gaps."""
    return make_paired_samples()


@pytest.fixture
def paired_samples_with_gaps(make_paired_samples: PairedFactory) -> PairedSamples:
    """Like ``paired_samples`` with about 15 % NaNs scattered into each array independently."""
    return make_paired_samples(nan_fraction=0.15)
