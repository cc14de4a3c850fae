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


# ---------------------------------------------------------------------------------------------
# CF file fixtures (tests/cf_factory.py) for the cube, engine and CLI tests. They compose:
# ``cf_spec`` (the clean synthetic case) -> ``make_cf_case`` (writes a case, with any defect, into
# a fresh folder) -> ``cf_case`` (the clean case written). The committed sample scenario:
# ``sample_paths`` -> ``sample_options`` -> ``sample_result`` (scored once per session with the
# default options plus the semi-arid belt and humid east boxes of sample_data/README.md).

from pathlib import Path  # noqa: E402

from cf_factory import SAMPLE_BELT, SAMPLE_EAST, CasePaths, CaseSpec, write_case  # noqa: E402

SAMPLE_DATA_DIR = Path(__file__).resolve().parents[1] / "sample_data"


@pytest.fixture
def cf_spec() -> CaseSpec:
    """The clean synthetic case: 8 years x 2 starts x 3 members x 28 lead days x 3 x 4 cells."""
    return CaseSpec()


@pytest.fixture
def make_cf_case(tmp_path_factory: pytest.TempPathFactory, cf_spec: CaseSpec) -> Callable[..., CasePaths]:
    """Factory: ``make(**changes)`` writes ``cf_spec`` with ``changes`` (defects) to a new folder."""

    def make(**changes: object) -> CasePaths:
        return write_case(tmp_path_factory.mktemp("cf"), cf_spec, **changes)

    return make


@pytest.fixture
def cf_case(make_cf_case: Callable[..., CasePaths]) -> CasePaths:
    """The clean synthetic case, written."""
    return make_cf_case()


@pytest.fixture(scope="session")
def sample_paths() -> dict[str, Path]:
    """The committed sample scenario files by role."""
    files = {r: SAMPLE_DATA_DIR / f"{r}.nc" for r in ("realistic", "scrambled", "observations", "land_state")}
    missing = [str(p) for p in files.values() if not p.is_file()]
    assert not missing, f"committed sample files missing: {missing}"
    return files


@pytest.fixture(scope="session")
def sample_options() -> object:
    """Default scoring options (1000 resamples, seed 1234) plus the belt and east boxes."""
    from run_support import run_options

    return run_options(regions=[SAMPLE_BELT, SAMPLE_EAST])


@pytest.fixture(scope="session")
def sample_result(sample_paths: dict[str, Path], sample_options: object) -> object:
    """The sample scenario scored once per session (do not add regions to it in a test)."""
    from app.runs.scoring import score_files

    return score_files(
        sample_paths["realistic"], sample_paths["scrambled"], sample_paths["observations"],
        sample_paths["land_state"], options=sample_options, experiment="sample-continent",
    )
