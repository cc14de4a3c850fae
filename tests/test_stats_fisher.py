"""Fisher z and the sample-weighted region mean of cell ACCs (app.stats.fisher)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate
from scipy import stats as sps

from app.stats.fisher import MIN_CELL_SAMPLES, Z_CLIP, fisher_z, weighted_z_sums


def _region_acc(z, n, area, **kw):
    num, den = weighted_z_sums(z, n, area, **kw)
    return np.tanh(num / den)


def test_fisher_z_is_arctanh_with_clipping():
    r = np.array([-1.0, -0.5, 0.0, 0.3, 1.0, np.nan])
    z = fisher_z(r)
    np.testing.assert_allclose(z[1:4], np.arctanh(r[1:4]), rtol=1e-15)  # numpy.arctanh
    assert z[4] == pytest.approx(np.arctanh(Z_CLIP)) and z[4] == pytest.approx(14.16, abs=0.01)
    assert z[0] == -z[4] and np.isnan(z[5])


def test_one_three_sample_cell_with_r_one_no_longer_moves_the_region_mean():
    # issue 7 item 3: 100 cells of ACC 0.30 (here 120 samples each) and one 3-sample cell with
    # r = 1 (z = 14.2). The unweighted mean of z moves to 0.42; the sample-weighted one must not.
    r = np.append(np.full(100, 0.30), 1.0)
    n = np.append(np.full(100, 120.0), 3.0)
    area = np.ones((1, 101))
    z = fisher_z(r)
    unweighted = np.tanh(z.mean())
    assert unweighted == pytest.approx(0.42, abs=0.01)  # the figure
    assert float(_region_acc(z, n, area)[0]) == pytest.approx(0.30, abs=1e-12)
    # a 4-9 sample cell is left out by the default minimum too, and enters if allowed
    n[-1] = 6.0
    assert float(_region_acc(z, n, area)[0]) == pytest.approx(0.30, abs=1e-12)
    moved = float(_region_acc(z, n, area, min_samples=4)[0])
    assert moved > 0.30 + 1e-3
    # weight of that cell is 3 against 100 * 117: the closed-form weighted mean
    expected = np.tanh((100 * 117 * np.arctanh(0.3) + 3 * z[-1]) / (100 * 117 + 3))
    assert moved == pytest.approx(expected, rel=1e-12)


def test_weights_are_area_times_n_minus_3_and_nan_is_left_out(rng):
    z = rng.normal(0.3, 0.2, (4, 50))  # (windows, cells)
    z[0, 3] = np.nan
    n = rng.integers(5, 200, (4, 50)).astype(float)
    area = np.abs(rng.normal(size=(2, 50)))
    num, den = weighted_z_sums(z, n, area, min_samples=10)
    for reg in range(2):
        for w in range(4):
            keep = np.isfinite(z[w]) & (n[w] >= 10)
            wt = area[reg, keep] * (n[w, keep] - 3.0)
            assert num[reg, w] == pytest.approx(np.sum(wt * z[w, keep]), rel=1e-12)
            assert den[reg, w] == pytest.approx(np.sum(wt), rel=1e-12)


def test_block_sums_add_up_to_the_whole(rng):
    # numerator and denominator are summed over blocks of cells, then divided once
    z = rng.normal(0.3, 0.2, (7, 3, 90))  # (resamples, windows, cells)
    n = np.full(90, 60.0)
    area = np.abs(rng.normal(size=(2, 90)))
    whole = weighted_z_sums(z, n, area)
    parts = [weighted_z_sums(z[..., s], n[s], area[:, s]) for s in (slice(0, 40), slice(40, 90))]
    np.testing.assert_allclose(whole[0], parts[0][0] + parts[1][0], rtol=1e-12)
    np.testing.assert_allclose(whole[1], parts[0][1] + parts[1][1], rtol=1e-12)
    assert whole[0].shape == (2, 7, 3)


def test_per_resample_sample_counts_broadcast(rng):
    z = rng.normal(size=(5, 2, 30))
    n_star = rng.integers(8, 12, (5, 2, 30)).astype(float)  # each resample's counts
    num, den = weighted_z_sums(z, n_star, np.ones((1, 30)))
    keep = n_star >= MIN_CELL_SAMPLES
    np.testing.assert_allclose(den[0], np.sum(np.where(keep, n_star - 3, 0), axis=-1))


def test_inverse_variance_weight_is_the_variance_of_z_from_10_samples():
    # Fisher (1921, Metron 1): Var(arctanh r) ~ 1/(n - 3). Checked against the exact null density
    # of r for n independent normal pairs, a beta(n/2 - 1, n/2 - 1) law on (-1, 1) (the law
    # scipy.stats.pearsonr uses), by numerical integration (scipy.integrate.quad). At the default
    # minimum of 10 samples the approximation is within 1 %; at 4 samples it is 18 % off.
    def exact_var(n: int) -> float:
        law = sps.beta(n / 2 - 1, n / 2 - 1, loc=-1, scale=2)
        return integrate.quad(lambda r: np.arctanh(r) ** 2 * law.pdf(r), -1, 1, limit=200)[0]

    assert exact_var(MIN_CELL_SAMPLES) * (MIN_CELL_SAMPLES - 3) == pytest.approx(1.0, abs=0.01)
    assert exact_var(4) * (4 - 3) < 0.85


def test_bad_arguments_raise():
    with pytest.raises(ValueError, match="got 3"):
        weighted_z_sums(np.zeros(5), np.full(5, 20.0), np.ones((1, 5)), min_samples=3)
    with pytest.raises(ValueError, match=r"\(1, 4\)"):
        weighted_z_sums(np.zeros(5), np.full(5, 20.0), np.ones((1, 4)))
