"""Benjamini-Hochberg field significance against statsmodels and the 1995 worked example."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from app.stats.fdr import DEFAULT_FDR_ALPHA, benjamini_hochberg, fdr_over_cells


def _p_values(rng: np.random.Generator, n: int) -> np.ndarray:
    """A mix of null (uniform) and non-null (small) p-values, so that some are rejected."""
    null = rng.random(n - n // 4)
    signal = rng.beta(0.3, 20.0, n // 4)
    p = np.concatenate([null, signal])
    rng.shuffle(p)
    return p


@pytest.mark.parametrize("alpha", [0.01, 0.05, 0.10, 0.25])
@pytest.mark.parametrize("n", [1, 7, 200, 5000])
def test_equals_statsmodels_fdr_bh(rng, alpha, n):
    p = _p_values(rng, n)
    # reference: statsmodels.stats.multitest.multipletests(method="fdr_bh")
    expected = multipletests(p, alpha=alpha, method="fdr_bh")[0]
    np.testing.assert_array_equal(benjamini_hochberg(p, alpha=alpha), expected)
    if n >= 200:
        assert 0 < expected.sum() < n  # a non-trivial decision


def test_nans_are_ignored_and_never_rejected(rng):
    p = _p_values(rng, 400)
    gaps = rng.random(p.size) < 0.2
    p_gappy = np.where(gaps, np.nan, p)
    got = benjamini_hochberg(p_gappy, alpha=0.1)
    assert not got[gaps].any()
    # reference: statsmodels fdr_bh on the finite p-values only (the test counts m = #finite)
    expected = multipletests(p[~gaps], alpha=0.1, method="fdr_bh")[0]
    np.testing.assert_array_equal(got[~gaps], expected)
    assert expected.sum() > 0
    assert not benjamini_hochberg(np.full(5, np.nan)).any()


def test_map_shape_is_kept(rng):
    p = _p_values(rng, 300).reshape(15, 20)
    got = benjamini_hochberg(p, alpha=0.1)
    assert got.shape == p.shape
    expected = multipletests(p.ravel(), alpha=0.1, method="fdr_bh")[0].reshape(p.shape)
    np.testing.assert_array_equal(got, expected)


def test_fdr_over_cells_treats_each_map_separately(rng):
    maps = np.stack([_p_values(rng, 120).reshape(10, 12) for _ in range(4)])
    maps[2] = rng.random((10, 12))  # a map with (almost surely) nothing to find
    got = fdr_over_cells(maps, alpha=0.05)
    assert got.shape == maps.shape
    for m in range(4):
        # reference: statsmodels fdr_bh applied to one map's cells at a time
        expected = multipletests(maps[m].ravel(), alpha=0.05, method="fdr_bh")[0]
        np.testing.assert_array_equal(got[m].ravel(), expected)


def test_benjamini_hochberg_1995_worked_example():
    # Benjamini & Hochberg (1995), JRSS B 57, section 4: 15 p-values; at q = 0.05 the
    # step-up procedure rejects exactly the four smallest.
    p = np.array(
        [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459,
         0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000]
    )
    expected = np.zeros(15, dtype=bool)
    expected[:4] = True
    np.testing.assert_array_equal(benjamini_hochberg(p, alpha=0.05), expected)
    # order must not matter
    perm = np.random.default_rng(0).permutation(15)
    np.testing.assert_array_equal(benjamini_hochberg(p[perm], alpha=0.05), expected[perm])


def test_default_alpha_is_ten_percent():
    # DESIGN.md 3.7: default alpha_FDR = 0.10, twice a global 0.05 (Wilks 2016, BAMS 97)
    assert DEFAULT_FDR_ALPHA == 0.10
    p = np.array([0.001, 0.02, 0.03, 0.04, 0.5, 0.9])
    np.testing.assert_array_equal(
        benjamini_hochberg(p), multipletests(p, alpha=0.10, method="fdr_bh")[0]
    )


@pytest.mark.parametrize("bad", [0.0, 1.0, -0.05, 1.5])
def test_bad_alpha_raises_naming_it(bad):
    with pytest.raises(ValueError, match=str(bad)):
        benjamini_hochberg(np.array([0.01, 0.2]), alpha=bad)
