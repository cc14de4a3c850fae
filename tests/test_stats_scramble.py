"""The scrambled-control bias of other-year land states and its correction (app.stats.scramble).

Mechanism: with anomalies centred over the n years of the period, another year's land anomaly is
anti-correlated with the right one by 1/(n-1) (the mechanism behind the cross-validation
degeneracy of Barnston and van den Dool 1993, J. Climate 6, 963-977), so the scrambled ACC is
biased low and the gain high by gain/(n-1).

The simulations use the engine's own kernels: leave-one-year-out anomalies of raw hindcast and
observed values (app.stats.anomalies.anomalies) and the ACC from per-year sums
(app.stats.sums.yearly_sums / correlations_from_sums), bootstrap draws from
app.stats.bootstrap.resampled_correlations and app.stats.resample.year_block_counts.

Linear model of the simulation (per column, year i, start s; all parts independent, zero mean):
    land anomaly   l[i,s]  = sqrt(P) U[i] + sqrt(1-P) V[i,s]      (unit variance, persistent
                                                                  within a year: P = 0.3)
    observed       y       = c_obs[s] + a + GAMMA l + sqrt(VAR_O) eps
    realistic run  x1      = c_mod[s] + d + a + BETA l + sqrt(VAR_E) e1
    scrambled run  x2      = c_mod[s] + d + a + BETA l~ + sqrt(VAR_E) e2
with a the predictable atmospheric part (variance VAR_A, shared by both runs and the
observations), l~ = l[pi(i), s] for a derangement pi of the years ("other_years"), or an
independent draw of the same distribution ("independent"). Closed-form truth (population
correlations of this model; independent scrambled states):
    VX = VAR_A + BETA^2 + VAR_E,   VY = VAR_A + GAMMA^2 + VAR_O
    rho_realistic = (VAR_A + BETA GAMMA) / sqrt(VX VY)
    rho_scrambled =  VAR_A               / sqrt(VX VY)
    true gain     =  BETA GAMMA          / sqrt(VX VY)
The land signal is strong (a land-controlled near-surface temperature, anomalies in K): the
issue asks for a design where the raw gain is at least 0.02 too high at 30 years, which needs a
true gain of about 0.6.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest

from app.errors import ParameterError
from app.stats.anomalies import anomalies, standardized_anomalies, weighted_sums
from app.stats.bootstrap import resampled_correlations
from app.stats.conditional import strata_masks
from app.stats.intervals import bootstrap_interval
from app.stats.resample import year_block_counts
from app.stats.scramble import (
    SCRAMBLE_DESIGNS,
    check_design,
    corrected_gain,
    corrected_gain_difference,
    corrected_scrambled,
    corrected_stratum_scrambled,
    gain_factor,
)
from app.stats.sums import correlations_from_sums, total_sums, yearly_sums

VAR_A, BETA, GAMMA, VAR_E, VAR_O, PERSIST = 0.12, 0.85, 0.9, 0.06, 0.2, 0.3
N_STARTS = 8
TOL = 0.005  # the tolerance on the mean error of the corrected gain
MC_SE_MAX = 0.0015  # Monte-Carlo standard error of every mean checked against TOL


def truth(beta: float = BETA, gamma: float = GAMMA) -> tuple[float, float, float]:
    """Closed-form population (rho_realistic, rho_scrambled, gain) of the model above."""
    vx = VAR_A + beta**2 + VAR_E
    vy = VAR_A + gamma**2 + VAR_O
    s = np.sqrt(vx * vy)
    return (VAR_A + beta * gamma) / s, VAR_A / s, beta * gamma / s


def mc_se(v: np.ndarray) -> float:
    return float(np.std(v, ddof=1) / np.sqrt(v.size))


# --------------------------------------------------------------------------------------------
# simulation


def shift_derangement(rng: np.random.Generator, n: int, m: int) -> np.ndarray:
    """Year (i + k) mod n, k in 1..n-1 drawn per column: ``(n, 1, m)`` source years."""
    k = rng.integers(1, n, size=m)
    return ((np.arange(n)[:, None] + k[None, :]) % n)[:, None, :]


def random_derangement(rng: np.random.Generator, n: int, shape: tuple[int, ...]) -> np.ndarray:
    """Uniform random derangements of the years along axis 0, one per position of ``shape``
    (rejection of permutations with a fixed point)."""
    perm = np.argsort(rng.random((n, *shape)), axis=0)
    own = np.arange(n).reshape((n,) + (1,) * len(shape))
    while True:
        bad = (perm == own).any(axis=0)
        if not bad.any():
            return perm
        perm[:, bad] = np.argsort(rng.random((n, int(bad.sum()))), axis=0)


@dataclass
class World:
    """One simulated period for m columns: land, atmosphere and observed anomalies."""

    land: np.ndarray  # true land anomaly l (n, S, m)
    land_independent: np.ndarray  # an independent draw l* (states from outside the period)
    atmos: np.ndarray
    observed_raw: np.ndarray
    rng: np.random.Generator

    def hindcast_raw(self, land: np.ndarray, beta: float) -> np.ndarray:
        """Raw daily-mean-like hindcast values: model climatology + drift + signal + noise."""
        n, s, m = land.shape
        clim = 288.0 + 4.0 * np.sin(np.linspace(0.0, np.pi, s))[None, :, None]
        return clim + 0.7 + self.atmos + beta * land + np.sqrt(VAR_E) * self.rng.normal(size=(n, s, m))


def world(rng: np.random.Generator, n: int, m: int, *, gamma: float = GAMMA) -> World:
    shape = (n, N_STARTS, m)

    def land() -> np.ndarray:
        return np.sqrt(PERSIST) * rng.normal(size=(n, 1, m)) + np.sqrt(1 - PERSIST) * rng.normal(size=shape)

    lnd, lnd_ind = land(), land()
    atmos = np.sqrt(VAR_A) * rng.normal(size=shape)
    clim_obs = 287.5 + 4.0 * np.sin(np.linspace(0.0, np.pi, N_STARTS))[None, :, None]
    obs = clim_obs + atmos + gamma * lnd + np.sqrt(VAR_O) * rng.normal(size=shape)
    return World(lnd, lnd_ind, atmos, obs, rng)


def acc(x1_raw: np.ndarray, x2_raw: np.ndarray, y_raw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The engine's ACCs: leave-one-year-out anomalies of each field, then per-year sums."""
    x1, x2, y = (anomalies(v, leave_one_out=True) for v in (x1_raw, x2_raw, y_raw))
    return correlations_from_sums(total_sums(yearly_sums(x1, x2, y)))


def simulate_cells(n: int, *, columns: int = 20_000, chunk: int = 4_000, seed: int) -> dict[str, np.ndarray]:
    """Raw ACCs of the realistic run and of the scrambled run under three ways of drawing the
    scrambled states, on the same worlds: ``shift`` ((i + k) mod n for every start of a year),
    ``random`` (a random derangement per start) and ``independent``."""
    rng = np.random.default_rng(seed)
    out: dict[str, list[np.ndarray]] = {"r1": [], "shift": [], "random": [], "independent": []}
    for _ in range(columns // chunk):
        w = world(rng, n, chunk)
        x1 = w.hindcast_raw(w.land, BETA)
        sources = {
            "shift": np.take_along_axis(w.land, np.broadcast_to(shift_derangement(rng, n, chunk), w.land.shape), 0),
            "random": np.take_along_axis(w.land, random_derangement(rng, n, (N_STARTS, chunk)), 0),
            "independent": w.land_independent,
        }
        for name, land in sources.items():
            r1, r2 = acc(x1, w.hindcast_raw(land, BETA), w.observed_raw)
            out[name].append(r2)
        out["r1"].append(r1)
    return {k: np.concatenate(v) for k, v in out.items()}


# --------------------------------------------------------------------------------------------
# the mechanism and the anomaly convention


def test_centred_other_year_series_are_anticorrelated_by_one_over_n_minus_one() -> None:
    # Barnston and van den Dool (1993): centring over the period makes a year's anomaly
    # anti-correlated with the others. Closed form: for iid normal years the centred vector's
    # direction is uniform on the (n-1)-sphere of the centred subspace, so for a derangement
    # matrix P, E[corr(L', P L')] = trace(C P)/(n-1) = (0 - 1)/(n-1) (C the centring matrix).
    rng = np.random.default_rng(11)
    for n in (15, 20, 30):
        lnd = rng.normal(size=(n, 50_000))
        lc = anomalies(lnd, leave_one_out=False)
        perm = random_derangement(rng, n, (lnd.shape[1],))
        other = np.take_along_axis(lc, perm, 0)
        r = (lc * other).sum(0) / np.sqrt((lc * lc).sum(0) * (other * other).sum(0))
        se = mc_se(r)
        assert se < 0.002
        assert abs(r.mean() - (-1.0 / (n - 1))) < 4 * se, (n, r.mean(), se)


def test_leave_one_out_anomalies_are_centred_anomalies_times_n_over_n_minus_one() -> None:
    # x_i - mean_{j != i} x_j = n/(n-1) (x_i - mean x): a constant factor, so the ACC and the
    # bias factor are those of plain centring (algebra; checked on the kernels).
    rng = np.random.default_rng(12)
    n = 20
    w = world(rng, n, 50)
    x1 = w.hindcast_raw(w.land, BETA)
    x2 = w.hindcast_raw(np.take_along_axis(w.land, random_derangement(rng, n, (N_STARTS, 50)), 0), BETA)
    loo = anomalies(x1, leave_one_out=True)
    plain = anomalies(x1, leave_one_out=False)
    np.testing.assert_allclose(loo, n / (n - 1) * plain, rtol=1e-9, atol=1e-9)
    acc_loo = correlations_from_sums(total_sums(yearly_sums(
        *(anomalies(v, leave_one_out=True) for v in (x1, x2, w.observed_raw)))))
    acc_plain = correlations_from_sums(total_sums(yearly_sums(
        *(anomalies(v, leave_one_out=False) for v in (x1, x2, w.observed_raw)))))
    for a, b in zip(acc_loo, acc_plain, strict=True):
        np.testing.assert_allclose(a, b, rtol=0, atol=1e-9)


# --------------------------------------------------------------------------------------------
# cells: bias of the raw gain, error of the corrected gain, against the closed-form truth


@pytest.mark.slow
@pytest.mark.parametrize("n", [15, 20, 30])
def test_corrected_gain_is_unbiased_where_the_raw_gain_is_not(n: int) -> None:
    rho1, rho2, gain_true = truth()
    sim = simulate_cells(n, seed=100 + n)
    r1 = sim["r1"]
    for scheme in ("shift", "random"):
        r2 = sim[scheme]
        raw = r1 - r2
        fixed = corrected_gain(r1, r2, n_years=np.full(r1.shape, float(n)), design="other_years")
        fixed_scr = corrected_scrambled(r1, r2, n_years=n, design="other_years")
        np.testing.assert_allclose(fixed, r1 - fixed_scr, atol=1e-12)
        raw_err, fixed_err = raw - gain_true, fixed - gain_true
        scr_err = fixed_scr - rho2
        print(
            f"n={n} {scheme}: acc_scrambled bias {np.mean(r2) - rho2:+.4f}±{mc_se(r2):.4f}, "
            f"raw gain bias {raw_err.mean():+.4f}±{mc_se(raw):.4f}, corrected gain bias "
            f"{fixed_err.mean():+.4f}±{mc_se(fixed):.4f}, corrected acc_scrambled bias "
            f"{scr_err.mean():+.4f}±{mc_se(fixed_scr):.4f} (truth: gain {gain_true:.4f})"
        )
        assert mc_se(raw) < MC_SE_MAX and mc_se(fixed) < MC_SE_MAX
        assert raw_err.mean() >= 0.02, (n, scheme, raw_err.mean())  # the premise
        assert abs(fixed_err.mean()) <= TOL, (n, scheme, fixed_err.mean())
        assert abs(scr_err.mean()) <= TOL, (n, scheme, scr_err.mean())
        # the raw bias is the predicted gain/(n-1) up to the small-sample bias of r itself
        assert abs(raw_err.mean() - gain_true / (n - 1)) <= TOL
    # independent scrambled states: the raw gain is unbiased and the correction is the identity
    r2 = sim["independent"]
    raw = r1 - r2
    same = corrected_gain(r1, r2, n_years=n, design="independent")
    np.testing.assert_array_equal(same, raw)
    np.testing.assert_array_equal(corrected_scrambled(r1, r2, n_years=n, design="independent"), r2)
    print(f"n={n} independent: raw gain bias {raw.mean() - gain_true:+.4f}±{mc_se(raw):.4f}, "
          f"acc_scrambled bias {r2.mean() - rho2:+.4f}±{mc_se(r2):.4f}")
    assert mc_se(raw) < MC_SE_MAX
    assert abs(raw.mean() - gain_true) <= TOL
    assert abs(r2.mean() - rho2) <= TOL
    assert abs(r1.mean() - rho1) <= TOL


# --------------------------------------------------------------------------------------------
# regions: regional-mean series and Fisher-z mean of cell ACCs


def _fisher_mean(r: np.ndarray, w: np.ndarray) -> np.ndarray:
    """cos(lat)-weighted mean in Fisher z space over the last axis, transformed back."""
    z = np.arctanh(np.clip(r, -1 + 1e-12, 1 - 1e-12))
    return np.tanh((z * w).sum(-1) / w.sum())


def _region_chunk(rng: np.random.Generator, n: int, m: int, c: int) -> dict[str, np.ndarray]:
    """Gains of m regions of c cells (coupling strengths 0.5..1.1; shared atmosphere and land
    parts across the cells): raw, corrected and independent-reference, for both aggregations."""
    shape = (n, N_STARTS, m, c)

    def mix(shared_shape: tuple[int, ...], frac: float) -> np.ndarray:
        return np.sqrt(frac) * rng.normal(size=shared_shape) + np.sqrt(1 - frac) * rng.normal(size=shape)

    def land() -> np.ndarray:
        return np.sqrt(PERSIST) * mix((n, 1, m, 1), 0.6)[:, :1] + np.sqrt(1 - PERSIST) * mix((n, N_STARTS, m, 1), 0.6)

    strength = np.linspace(0.5, 1.1, c)
    wcell = np.cos(np.deg2rad(np.linspace(30.0, 45.0, c)))
    lnd, lnd_ind = land(), land()
    other = np.take_along_axis(lnd, np.broadcast_to(shift_derangement(rng, n, m)[..., None], shape), 0)
    atm = np.sqrt(VAR_A) * mix((n, N_STARTS, m, 1), 0.6)
    y = anomalies(atm + GAMMA * strength * lnd + np.sqrt(VAR_O) * rng.normal(size=shape))
    e2 = np.sqrt(VAR_E) * rng.normal(size=shape)
    x1 = anomalies(atm + BETA * strength * lnd + np.sqrt(VAR_E) * rng.normal(size=shape))
    x2o = anomalies(atm + BETA * strength * other + e2)
    x2i = anomalies(atm + BETA * strength * lnd_ind + e2)
    out = {}
    # region_mean_of_acc: correct each cell (n = its years), then the Fisher-z mean
    r1, r2o = correlations_from_sums(total_sums(yearly_sums(x1, x2o, y)))
    _, r2i = correlations_from_sums(total_sums(yearly_sums(x1, x2i, y)))
    zr1 = _fisher_mean(r1, wcell)
    out["z_raw"] = zr1 - _fisher_mean(r2o, wcell)
    out["z_fixed"] = zr1 - _fisher_mean(corrected_scrambled(r1, r2o, n_years=n), wcell)
    out["z_ref"] = zr1 - _fisher_mean(r2i, wcell)

    # acc_of_region_mean: correlation of the weighted regional-mean series, n = its years
    def series(v: np.ndarray) -> np.ndarray:
        num, den = weighted_sums(v, wcell[None, :])
        return num[0] / den[0]

    s1, s2o = correlations_from_sums(total_sums(yearly_sums(series(x1), series(x2o), series(y))))
    _, s2i = correlations_from_sums(total_sums(yearly_sums(series(x1), series(x2i), series(y))))
    out["s_raw"], out["s_fixed"], out["s_ref"] = s1 - s2o, corrected_gain(s1, s2o, n_years=n), s1 - s2i
    return out


@pytest.mark.slow
@pytest.mark.parametrize("n", [15, 30])
def test_region_aggregations_corrected(n: int) -> None:
    # Reference: the same estimator on the same worlds with independent scrambled states (shown
    # unbiased above), so the difference isolates the scramble bias.
    rng = np.random.default_rng(300 + n)
    parts = [_region_chunk(rng, n, 1500, 4) for _ in range(5)]
    g = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    for agg, name in (("z", "region_mean_of_acc"), ("s", "acc_of_region_mean")):
        raw, fixed, ref = g[f"{agg}_raw"], g[f"{agg}_fixed"], g[f"{agg}_ref"]
        print(f"n={n} {name}: raw-ref {np.mean(raw - ref):+.4f}±{mc_se(raw - ref):.4f}, "
              f"corrected-ref {np.mean(fixed - ref):+.4f}±{mc_se(fixed - ref):.4f}"
              + (f", (corrected after averaging)-ref {np.mean(raw * (n - 1) / n - ref):+.4f}" if agg == "z" else ""))
        assert mc_se(fixed - ref) < MC_SE_MAX
        assert np.mean(raw - ref) >= 0.02
        assert abs(np.mean(fixed - ref)) <= TOL


# --------------------------------------------------------------------------------------------
# strata: uncentred correlation about the full-period climatology


def _tercile_masks(z: np.ndarray) -> dict[str, np.ndarray]:
    """app.cube.assess.strata_masks vectorised over the last axis (checked against it below)."""
    n, s, m = z.shape
    flat = z.reshape(n * s, m)
    lo, hi = np.quantile(flat, [1.0 / 3.0, 2.0 / 3.0], axis=0)
    big = np.quantile(np.abs(flat), 2.0 / 3.0, axis=0)
    return {"dry": z <= lo, "middle": (z > lo) & (z < hi), "wet": z >= hi, "large_anomaly": np.abs(z) > big}


def _uncentred(sxy: np.ndarray, sxx: np.ndarray, syy: np.ndarray) -> np.ndarray:
    # DESIGN section 3.8: sum(xy) / sqrt(sum(x^2) sum(y^2)) over the stratum's period anomalies
    return sxy / np.sqrt(sxx * syy)


@pytest.mark.slow
@pytest.mark.parametrize("n", [15, 30])
def test_stratum_correction(n: int) -> None:
    # Reference: the raw uncentred stratum gain with independent scrambled states on the same
    # worlds. Also shown: the naive (n-1)/n factor on the stratum gain is NOT good enough there.
    rng = np.random.default_rng(400 + n)
    m = 30_000 if n < 20 else 20_000  # fewer years, noisier strata: more columns
    w = world(rng, n, m)
    other = np.take_along_axis(w.land, np.broadcast_to(shift_derangement(rng, n, m), w.land.shape), 0)
    y = anomalies(w.observed_raw)
    x1 = anomalies(w.hindcast_raw(w.land, BETA))
    noise = np.sqrt(VAR_E) * rng.normal(size=w.land.shape)
    x2o = anomalies(w.atmos + BETA * other + noise)
    x2i = anomalies(w.atmos + BETA * w.land_independent + noise)
    z = standardized_anomalies(anomalies(w.land))
    masks = _tercile_masks(z)
    for j in range(5):
        ref_masks = strata_masks(z[:, :, j])
        assert all(np.array_equal(ref_masks[k][:, :], masks[k][:, :, j]) for k in ref_masks)
    n_all = float(n * N_STARTS)
    for name, mk in masks.items():
        def s(v: np.ndarray, mk: np.ndarray = mk) -> np.ndarray:
            return np.where(mk, v, 0.0).sum(axis=(0, 1))

        count = mk.sum(axis=(0, 1))
        s1y, s2oy, s2iy = s(x1 * y), s(x2o * y), s(x2i * y)
        s11, s2o2, s2i2, syy = s(x1 * x1), s(x2o * x2o), s(x2i * x2i), s(y * y)
        r1 = _uncentred(s1y, s11, syy)
        ref = r1 - _uncentred(s2iy, s2i2, syy)
        raw = r1 - _uncentred(s2oy, s2o2, syy)
        ref_x2x2 = count / n_all * (x2o * x2o).sum(axis=(0, 1))
        fixed = r1 - corrected_stratum_scrambled(s1y, s2oy, s2o2, syy, reference_x2x2=ref_x2x2, n_years=n)
        naive = corrected_gain(r1, _uncentred(s2oy, s2o2, syy), n_years=n)
        print(f"n={n} {name}: gain {ref.mean():.3f}; raw-ref {np.mean(raw - ref):+.4f}, "
              f"naive-ref {np.mean(naive - ref):+.4f}, corrected-ref {np.mean(fixed - ref):+.4f}"
              f"±{mc_se(fixed - ref):.4f}")
        assert mc_se(fixed - ref) < MC_SE_MAX
        assert abs(np.mean(fixed - ref)) <= TOL, (n, name)
        if name != "middle":  # the middle tercile has little land signal, hence little bias
            assert np.mean(raw - ref) >= 0.02
        # identity under independent: the raw uncentred correlation
        np.testing.assert_allclose(
            corrected_stratum_scrambled(s1y, s2iy, s2i2, syy, reference_x2x2=ref_x2x2, n_years=n,
                                        design="independent"),
            np.clip(_uncentred(s2iy, s2i2, syy), -1, 1), atol=1e-12)


# --------------------------------------------------------------------------------------------
# version comparison


@pytest.mark.slow
def test_difference_of_corrected_gains() -> None:
    # Baseline land coupling 0.3, candidate 0.85, both on the same observations and land;
    # truth: the difference of the closed-form gains. Both other_years, then a mixed pair.
    n, m = 20, 20_000
    rng = np.random.default_rng(500)
    w = world(rng, n, m)
    other = np.take_along_axis(w.land, random_derangement(rng, n, (N_STARTS, m)), 0)
    beta_a, beta_b = 0.3, BETA
    ra1, ra2 = acc(w.hindcast_raw(w.land, beta_a), w.hindcast_raw(other, beta_a), w.observed_raw)
    rb1, rb2 = acc(w.hindcast_raw(w.land, beta_b), w.hindcast_raw(other, beta_b), w.observed_raw)
    _, ra2_ind = acc(w.hindcast_raw(w.land, beta_a), w.hindcast_raw(w.land_independent, beta_a), w.observed_raw)
    diff_true = truth(beta_b)[2] - truth(beta_a)[2]
    raw = (rb1 - rb2) - (ra1 - ra2)
    fixed = corrected_gain_difference((ra1, ra2), (rb1, rb2), n_years=n)
    mixed = corrected_gain_difference((ra1, ra2_ind), (rb1, rb2), n_years=n, baseline_design="independent")
    print(f"difference of gains (truth {diff_true:.4f}): raw bias {raw.mean() - diff_true:+.4f}, corrected "
          f"{fixed.mean() - diff_true:+.4f}±{mc_se(fixed):.4f}, mixed designs {mixed.mean() - diff_true:+.4f}")
    assert mc_se(fixed) < MC_SE_MAX and mc_se(mixed) < MC_SE_MAX
    assert raw.mean() - diff_true >= 0.01  # about (gain difference)/(n-1) = 0.014 too high
    assert abs(fixed.mean() - diff_true) <= TOL
    assert abs(mixed.mean() - diff_true) <= TOL


# --------------------------------------------------------------------------------------------
# the kernels: vectorisation, NaN, bootstrap draws, designs


def test_kernels_vectorised_over_columns_and_draws() -> None:
    rng = np.random.default_rng(7)
    b, w, c = 50, 3, 4
    r1 = rng.uniform(-0.5, 0.95, size=(b, w, c))
    r2 = rng.uniform(-0.5, 0.95, size=(b, w, c))
    n = rng.integers(10, 31, size=(w, c)).astype(float)
    got = corrected_scrambled(r1, r2, n_years=n)
    gain = corrected_gain(r1, r2, n_years=n)
    assert got.shape == gain.shape == (b, w, c)
    for i, j, k in [(0, 0, 0), (49, 2, 3), (17, 1, 2)]:
        nn = n[j, k]
        # the formula written out, column by column
        assert got[i, j, k] == pytest.approx(((nn - 1) * r2[i, j, k] + r1[i, j, k]) / nn, abs=1e-14)
        assert gain[i, j, k] == pytest.approx((nn - 1) / nn * (r1[i, j, k] - r2[i, j, k]), abs=1e-14)
    # a convex combination of two correlations stays a correlation
    assert np.all(np.abs(corrected_scrambled(np.ones(5), -np.ones(5), n_years=2.0)) <= 1.0)
    # point values and draws with a scalar n
    assert corrected_gain(0.5, 0.3, n_years=20) == pytest.approx(0.19)
    np.testing.assert_allclose(gain_factor([15, 20, 30]), [14 / 15, 19 / 20, 29 / 30])
    np.testing.assert_array_equal(gain_factor([15, 20], design="independent"), [1.0, 1.0])


def test_nan_columns_stay_nan() -> None:
    # a column with no data: its ACCs are NaN and so are its corrected values; n < 2 cannot be
    # corrected; a column with data is unaffected by its neighbours
    r1 = np.array([0.6, np.nan, 0.6, 0.6, 0.7])
    r2 = np.array([0.2, np.nan, np.nan, 0.2, 0.1])
    n = np.array([20.0, 0.0, 20.0, 1.0, np.nan])
    got = corrected_scrambled(r1, r2, n_years=n)
    gain = corrected_gain(r1, r2, n_years=n)
    assert got[0] == pytest.approx(0.22) and gain[0] == pytest.approx(0.38)
    assert np.isnan(got[1:]).all() and np.isnan(gain[1:]).all()
    # the same through the engine's kernels: an all-NaN column of real sums
    rng = np.random.default_rng(3)
    x = rng.normal(size=(12, 4, 3))
    x1, x2, y = x + rng.normal(size=x.shape), x + rng.normal(size=x.shape), x.copy()
    y[:, :, 1] = np.nan
    yearly = yearly_sums(x1, x2, y)
    a1, a2 = correlations_from_sums(total_sums(yearly))
    ny = (yearly[:, 0] > 0).sum(axis=0).astype(float)
    d1, d2 = resampled_correlations(yearly, year_block_counts(12, resamples=200, seed=1))
    out = corrected_gain(d1, d2, n_years=ny)
    assert np.isnan(corrected_gain(a1, a2, n_years=ny)[1]) and np.isnan(out[:, 1]).all()
    assert np.isfinite(out[:, [0, 2]]).all()
    ref_nan = corrected_stratum_scrambled(
        np.array([1.0, np.nan, 1.0]), np.array([0.5, 0.5, 0.5]), np.array([2.0, 2.0, 0.0]),
        np.array([2.0, 2.0, 2.0]), reference_x2x2=np.array([2.0, 2.0, 0.0]), n_years=np.array([20.0, 20.0, 20.0]))
    assert ref_nan[0] == pytest.approx((0.5 + 0.5 / 20) / 2.0) and np.isnan(ref_nan[1:]).all()


def test_bootstrap_draws_keep_sign_p_value_and_scale_interval(paired_samples) -> None:  # noqa: ANN001
    # the correction is one positive factor per column: every draw keeps its sign, so the
    # p-value for gain = 0 is that of the raw draws and the interval is the raw one times the
    # factor (order statistics commute with a positive scale; Hesterberg 2015 expanded interval)
    yearly = yearly_sums(*paired_samples.arrays())
    n = paired_samples.n_years
    counts = year_block_counts(n, resamples=999, seed=42)
    d1, d2 = resampled_correlations(yearly, counts)
    raw = d1 - d2
    fixed = corrected_gain(d1, d2, n_years=np.full(raw.shape[1], float(n)))
    np.testing.assert_array_equal(np.sign(fixed), np.sign(raw))
    iv_raw = bootstrap_interval(raw, n_blocks=n)
    iv_fix = bootstrap_interval(fixed, n_blocks=n)
    np.testing.assert_array_equal(iv_fix.p_value, iv_raw.p_value)
    np.testing.assert_allclose(iv_fix.low, (n - 1) / n * iv_raw.low, atol=1e-14)
    np.testing.assert_allclose(iv_fix.high, (n - 1) / n * iv_raw.high, atol=1e-14)
    # the corrected point value lies where the draws are: same factor as the draws
    a1, a2 = correlations_from_sums(total_sums(yearly))
    point = corrected_gain(a1, a2, n_years=n)
    np.testing.assert_allclose(point, (n - 1) / n * (a1 - a2), atol=1e-14)
    # stratum kernel on resampled sums: shape and range
    sums_b = np.einsum("by,ysc->bsc", counts, yearly)
    r = corrected_stratum_scrambled(sums_b[:, 7], sums_b[:, 8], sums_b[:, 5], sums_b[:, 6],
                                    reference_x2x2=sums_b[:, 5], n_years=n)
    assert r.shape == raw.shape and np.all(np.abs(r) <= 1.0)


def test_designs() -> None:
    assert SCRAMBLE_DESIGNS == ("other_years", "independent")
    assert check_design("independent") == "independent"
    with pytest.raises(ParameterError, match="other_years"):
        corrected_gain(0.5, 0.3, n_years=20, design="shuffled")
    with pytest.raises(ParameterError, match="'shuffled'"):
        check_design("shuffled")
