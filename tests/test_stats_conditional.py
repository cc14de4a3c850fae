"""Conditional gain without range restriction (app.stats.conditional; issue 7 item 2).

Closed forms used below, for z ~ N(0, 1), phi and Phi its density and distribution function, and
the tercile q = Phi^{-1}(2/3) = 0.4307 (truncated-normal moments: Johnson, Kotz and Balakrishnan
1994, Continuous Univariate Distributions vol. 1, ch. 13, from memory; each is also checked
against scipy.stats.truncnorm here):
    E[z | z > q]       = phi(q) / (1/3)                      = 1.0908  (wet; dry by symmetry)
    E[z^2 | z > q]     = 1 + q phi(q) / (1/3)                = 1.4698
    Var(z | z > q)     = 1.4698 - 1.0908^2                   = 0.2800
    E[z^2 | |z| < q]   = 1 - 2 q phi(q) / (1/3)              = 0.0603  (middle)
    E[z^2 | |z| > c]   = 1 + c phi(c) / (1/6), c = Phi^{-1}(5/6) = 0.9674:  2.4507  (large_anomaly)

The issue's linear system (no state dependence, true gain 0.75): y = z + e_y, realistic
x1 = z + e_1, Var(e) = 1/3, scrambled x2 = z' + e_2 with z' an independent land state. Over the
whole sample ACC(x1, y) = 1 / (1 + 1/3) = 0.75 and ACC(x2, y) = 0. In a stratum S chosen on z:
    uncentred r1(S) = E[z^2 | S] / (E[z^2 | S] + 1/3)     (dry, wet 0.815; middle 0.153; large 0.880)
    centred   r1(S) = Var(z | S) / (Var(z | S) + 1/3)     (dry, wet 0.457: today's understatement)
    r2(S) = 0, so gain(S) = r1(S).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as sps

from app.stats.conditional import (
    COND_STAT_NAMES,
    QUANTITIES,
    STRATA,
    conditional_gain,
    conditional_sums,
    linear_expectation,
    msess_from_sums,
    standardize_series,
    strata_masks,
    stratum_interval,
    uncentred_correlations,
)
from app.stats.intervals import bootstrap_interval
from app.stats.resample import year_block_counts
from app.stats.sums import correlations_from_sums, total_sums, yearly_sums

Q = float(sps.norm.ppf(2.0 / 3.0))
C_BIG = float(sps.norm.ppf(5.0 / 6.0))
NOISE_VAR = 1.0 / 3.0


def second_moment(stratum: str) -> float:
    """E[z^2 | stratum] for z ~ N(0, 1) (closed forms of the module docstring)."""
    phi_q, phi_c = sps.norm.pdf(Q), sps.norm.pdf(C_BIG)
    return {
        "dry": 1.0 + Q * phi_q * 3.0,
        "wet": 1.0 + Q * phi_q * 3.0,
        "middle": 1.0 - 2.0 * Q * phi_q * 3.0,
        "large_anomaly": 1.0 + C_BIG * phi_c * 6.0,
    }[stratum]


def test_closed_forms_agree_with_scipy_truncnorm() -> None:
    # scipy.stats.truncnorm: moments of the standard normal truncated to (a, b)
    assert second_moment("wet") == pytest.approx(sps.truncnorm.moment(2, Q, np.inf), rel=1e-9)
    assert second_moment("middle") == pytest.approx(sps.truncnorm.moment(2, -Q, Q), rel=1e-9)
    assert second_moment("large_anomaly") == pytest.approx(sps.truncnorm.moment(2, C_BIG, np.inf), rel=1e-9)
    assert sps.norm.pdf(Q) * 3.0 == pytest.approx(sps.truncnorm.mean(Q, np.inf), rel=1e-9)
    assert second_moment("wet") == pytest.approx(1.4698, abs=1e-4)
    assert sps.truncnorm.var(Q, np.inf) == pytest.approx(0.2800, abs=1e-4)


def _issue_case(rng: np.random.Generator, n_years: int, n_per_year: int = 8):
    shape = (n_years, n_per_year)
    z = rng.standard_normal(shape)
    y = z + np.sqrt(NOISE_VAR) * rng.standard_normal(shape)
    x1 = z + np.sqrt(NOISE_VAR) * rng.standard_normal(shape)
    x2 = rng.standard_normal(shape) + np.sqrt(NOISE_VAR) * rng.standard_normal(shape)
    return x1[..., None], x2[..., None], y[..., None], z


# ------------------------------------------------------------------------------------------------
# (i) the issue's linear case


def test_issue_linear_case_about_the_full_climatology(rng: np.random.Generator) -> None:
    x1, x2, y, z = _issue_case(rng, 3000)  # 24 000 samples, 8 000 per tercile
    counts = year_block_counts(3000, resamples=50, seed=1)
    out = conditional_gain(x1, x2, y, z, counts, quantities=("gain",))
    whole_r1, _ = correlations_from_sums(total_sums(yearly_sums(x1, x2, y)))
    assert whole_r1[0] == pytest.approx(0.75, abs=0.01)
    for name in STRATA:
        m2 = second_moment(name)
        truth = m2 / (m2 + NOISE_VAR)
        est = out[name]
        # sampling SE of r about (1 - r^2)/sqrt(n) < 0.01 here
        assert est.values["acc_realistic"][0] == pytest.approx(truth, abs=0.02), name
        assert est.values["acc_scrambled"][0] == pytest.approx(0.0, abs=0.03), name
        assert est.gain[0] == pytest.approx(truth, abs=0.04), name
        # the linear-system expectation is the same closed form, and no state dependence
        assert est.values["expected_acc_realistic"][0] == pytest.approx(truth, abs=0.02), name
        assert est.values["state_dependence"][0] == pytest.approx(0.0, abs=0.04), name
        assert est.mean_z2[0] == pytest.approx(m2, rel=0.05), name
    g = {name: out[name].gain[0] for name in STRATA}
    assert g["dry"] > whole_r1[0] > g["middle"] and g["wet"] > whole_r1[0]
    assert g["large_anomaly"] > g["dry"]


def test_centred_correlation_in_a_stratum_understates_skill(rng: np.random.Generator) -> None:
    # today's rule (centred ACC inside the stratum) against its closed form Var/(Var + 1/3):
    # the range restriction this module removes
    x1, x2, y, z = _issue_case(rng, 3000)
    masks = strata_masks(standardize_series(z))
    keep = masks["dry"][..., None]
    r1, _ = correlations_from_sums(
        total_sums(yearly_sums(*(np.where(keep, v, np.nan) for v in (x1, x2, y))))
    )
    var = sps.truncnorm.var(Q, np.inf)
    assert r1[0] == pytest.approx(var / (var + NOISE_VAR), abs=0.03)
    assert r1[0] < 0.5 < 0.75


# ------------------------------------------------------------------------------------------------
# (ii) re-standardisation and the strata


def test_terciles_of_a_regional_mean_have_mean_z_1_09_after_restandardising(rng: np.random.Generator) -> None:
    # 16 000 samples of a regional mean of 20 standardised cell anomalies sharing a common part
    # (inter-cell correlation 0.1): its standard deviation is sqrt(0.1 + 0.9/20) = 0.38
    n_years, n_per_year, n_cells = 2000, 8, 20
    common = rng.standard_normal((n_years, n_per_year, 1))
    cells = np.sqrt(0.1) * common + np.sqrt(0.9) * rng.standard_normal((n_years, n_per_year, n_cells))
    regional = cells.mean(axis=2)
    assert np.std(regional) == pytest.approx(np.sqrt(0.1 + 0.9 / 20), abs=0.02)
    raw = strata_masks(regional)
    assert np.mean(regional[raw["wet"]]) == pytest.approx(1.0908 * 0.381, abs=0.03)  # too small
    z = standardize_series(regional)
    masks = strata_masks(z)
    expect = sps.norm.pdf(Q) / (1.0 / 3.0)  # inverse Mills ratio; = scipy truncnorm mean
    assert expect == pytest.approx(1.0908, abs=1e-4)
    assert np.mean(z[masks["wet"]]) == pytest.approx(expect, abs=0.03)
    assert np.mean(z[masks["dry"]]) == pytest.approx(-expect, abs=0.03)
    assert abs(np.mean(z[masks["middle"]])) < 0.02
    # and the estimate reports it
    x = rng.standard_normal(regional.shape + (1,))
    out = conditional_gain(x, x.copy(), x.copy(), regional, year_block_counts(n_years, resamples=20, seed=2),
                           quantities=())
    assert out["wet"].mean_z[0] == pytest.approx(expect, abs=0.03)
    assert out["dry"].mean_z[0] == pytest.approx(-expect, abs=0.03)


def test_standardize_series_is_nan_aware_and_per_column(rng: np.random.Generator) -> None:
    z = rng.normal(3.0, 0.4, (10, 6, 3))
    z[0, 0, 0] = np.nan
    z[:, :, 2] = np.nan
    z[0, 1, 2] = 1.0  # one finite sample: no spread
    s = standardize_series(z)
    for c in range(2):
        col = z[:, :, c][np.isfinite(z[:, :, c])]
        np.testing.assert_allclose(s[:, :, c][np.isfinite(z[:, :, c])], (col - col.mean()) / col.std())
    assert np.isnan(s[0, 0, 0]) and np.isnan(s[:, :, 2]).all()
    # a second standardisation changes nothing
    np.testing.assert_allclose(standardize_series(s)[:, :, :2], s[:, :, :2], atol=1e-12)


def test_strata_rule(rng: np.random.Generator) -> None:
    z = rng.standard_normal((12, 5))
    z[3, 2] = np.nan
    m = strata_masks(z)
    assert tuple(m) == STRATA
    fin = z[np.isfinite(z)]
    lo, hi = np.quantile(fin, [1 / 3, 2 / 3])
    big = np.quantile(np.abs(fin), 2 / 3)
    with np.errstate(invalid="ignore"):
        np.testing.assert_array_equal(m["dry"], np.isfinite(z) & (z <= lo))
        np.testing.assert_array_equal(m["middle"], (z > lo) & (z < hi))
        np.testing.assert_array_equal(m["wet"], np.isfinite(z) & (z >= hi))
        np.testing.assert_array_equal(m["large_anomaly"], np.abs(z) > big)
    assert (m["dry"].astype(int) + m["middle"] + m["wet"] == np.isfinite(z)).all()
    # per column on a (Y, S, C) anomaly, and empty strata without data
    zc = np.stack([z, 2.5 * z, np.full_like(z, np.nan)], axis=-1)
    mc = strata_masks(zc)
    for name in STRATA:
        np.testing.assert_array_equal(mc[name][..., 0], m[name])
        np.testing.assert_array_equal(mc[name][..., 1], m[name])
        assert not mc[name][..., 2].any()


# ------------------------------------------------------------------------------------------------
# (iii) scores from sums against direct computations


def _data(rng: np.random.Generator, n_years: int = 14, n_per_year: int = 6, n_cols: int = 3):
    shape = (n_years, n_per_year, n_cols)
    z = np.sqrt(0.6) * rng.standard_normal((n_years, 1, n_cols)) + np.sqrt(0.4) * rng.standard_normal(shape)
    y = 0.8 * z + 0.3 + rng.standard_normal(shape)
    x1 = 0.7 * z + 0.1 + rng.standard_normal(shape)
    x2 = 0.2 + rng.standard_normal(shape)
    for a in (x1, x2, y):
        a[rng.random(shape) < 0.05] = np.nan
    return x1, x2, y, z


def _direct(x1, x2, y, z, keep):
    """Direct numpy scores of one column: uncentred r, MSESS and Murphy terms, linear expectation."""
    ok = keep & np.isfinite(x1) & np.isfinite(x2) & np.isfinite(y) & np.isfinite(z)
    out: dict[str, float] = {}
    every = np.isfinite(x1) & np.isfinite(x2) & np.isfinite(y) & np.isfinite(z)
    zw = z[every]
    fits = {}
    for name, v in (("x1", x1), ("x2", x2), ("y", y)):
        slope, icept = np.polyfit(zw, v[every], 1)  # least squares with intercept (numpy.polyfit)
        fits[name] = (slope, icept, v[every] - icept - slope * zw)
    m1, m2 = z[ok].mean(), (z[ok] ** 2).mean()

    def expected(a: str, b: str) -> float:
        sa, ia, ua = fits[a]
        sb, ib, ub = fits[b]
        return ia * ib + (ia * sb + ib * sa) * m1 + sa * sb * m2 + np.mean(ua * ub)

    for tag, x in (("1", x1), ("2", x2)):
        f, o = x[ok], y[ok]
        out["r" + tag] = np.sum(f * o) / np.sqrt(np.sum(f * f) * np.sum(o * o))
        out["msess" + tag] = 1.0 - np.mean((f - o) ** 2) / np.mean(o**2)
        r = np.corrcoef(f, o)[0, 1]
        sf, so = f.std(), o.std()
        w = so**2 / np.mean(o**2)
        out["corr" + tag] = w * r * r
        out["cbias" + tag] = w * (r - sf / so) ** 2
        out["ubias" + tag] = (f.mean() - o.mean()) ** 2 / np.mean(o**2)
        out["shift" + tag] = o.mean() ** 2 / np.mean(o**2)
        xn = "x" + tag
        out["e" + tag] = expected(xn, "y") / np.sqrt(expected(xn, xn) * expected("y", "y"))
    return out


def test_point_scores_match_direct_numpy(rng: np.random.Generator) -> None:
    x1, x2, y, z = _data(rng)
    zs = standardize_series(z)
    masks = strata_masks(zs)
    sums = conditional_sums(x1, x2, y, zs, masks).sum(axis=0)  # (G, K, C)
    assert sums.shape == (1 + len(STRATA), len(COND_STAT_NAMES), 3)
    for g, name in enumerate(STRATA, start=1):
        r1, r2 = uncentred_correlations(sums[g])
        m1, m2 = msess_from_sums(sums[g])
        e1, e2 = linear_expectation(sums[0], sums[g])
        for c in range(3):
            d = _direct(x1[..., c], x2[..., c], y[..., c], zs[..., c], masks[name][..., c])
            for tag, r, m, e in (("1", r1, m1, e1), ("2", r2, m2, e2)):
                assert r[c] == pytest.approx(d["r" + tag], rel=1e-10), name
                assert e[c] == pytest.approx(d["e" + tag], rel=1e-9), name
                assert m.value[c] == pytest.approx(d["msess" + tag], rel=1e-10, abs=1e-12), name
                assert m.correlation[c] == pytest.approx(d["corr" + tag], rel=1e-9), name
                assert m.conditional_bias[c] == pytest.approx(d["cbias" + tag], rel=1e-8, abs=1e-14)
                assert m.unconditional_bias[c] == pytest.approx(d["ubias" + tag], rel=1e-8, abs=1e-14)
                assert m.climatology_shift[c] == pytest.approx(d["shift" + tag], rel=1e-8, abs=1e-14)
            # the stratum's means are not zero here, so the climatology-shift term is not idle
            assert d["shift1"] > 1e-4
        # Murphy terms add up to MSESS exactly (up to rounding)
        for m in (m1, m2):
            total = m.correlation - m.conditional_bias - m.unconditional_bias + m.climatology_shift
            np.testing.assert_allclose(total, m.value, rtol=0, atol=1e-13)


def test_murphy_terms_reduce_to_murphy_1988_when_the_stratum_mean_is_zero(rng: np.random.Generator) -> None:
    # Murphy (1988): about the sample climatology, SS = r^2 - (r - s_f/s_o)^2 - ((f - o)/s_o)^2
    f = rng.standard_normal(500) + 0.2
    o = rng.standard_normal(500)
    o -= o.mean()
    x = f[:, None, None] * np.ones((1, 1, 1))
    sums = total_sums(yearly_sums(x, x, o[:, None, None]))
    m, _ = msess_from_sums(sums)
    r = np.corrcoef(f, o)[0, 1]
    murphy = r**2 - (r - f.std() / o.std()) ** 2 - ((f.mean() - o.mean()) / o.std()) ** 2
    assert m.value[0] == pytest.approx(murphy, rel=1e-10)
    assert m.climatology_shift[0] == pytest.approx(0.0, abs=1e-25)


def test_each_resample_matches_a_direct_computation_on_the_resampled_years(rng: np.random.Generator) -> None:
    x1, x2, y, z = _data(rng)
    counts = year_block_counts(x1.shape[0], resamples=40, seed=11)
    out = conditional_gain(x1, x2, y, z, counts, keep_draws=True)
    zs = standardize_series(z)  # fixed on the original sample: strata move with their years
    masks = strata_masks(zs)
    for b in (0, 7, 23):
        years = np.repeat(np.arange(x1.shape[0]), counts[b].astype(int))  # the resampled data
        rx1, rx2, ry, rz = (v[years] for v in (x1, x2, y, zs))
        for name in STRATA:
            keep = masks[name][years]
            draws = out[name].draws
            assert draws is not None
            for c in range(3):
                d = _direct(rx1[..., c], rx2[..., c], ry[..., c], rz[..., c], keep[..., c])
                assert draws["acc_realistic"][b, c] == pytest.approx(d["r1"], rel=1e-10)
                assert draws["gain"][b, c] == pytest.approx(d["r1"] - d["r2"], rel=1e-9, abs=1e-12)
                assert draws["expected_gain"][b, c] == pytest.approx(d["e1"] - d["e2"], rel=1e-8, abs=1e-12)
                assert draws["state_dependence"][b, c] == pytest.approx(
                    (d["r1"] - d["r2"]) - (d["e1"] - d["e2"]), rel=1e-8, abs=1e-12
                )
                assert draws["msess_realistic"][b, c] == pytest.approx(d["msess1"], rel=1e-9, abs=1e-12)


def test_intervals_use_the_stratum_own_years(rng: np.random.Generator) -> None:
    # land anomaly shared by all starts of a year: each tercile holds only about a third of the years
    n_years = 24
    x1, x2, y, _ = _data(rng, n_years=n_years, n_per_year=4, n_cols=2)
    z = np.repeat(rng.standard_normal((n_years, 1)), 4, axis=1)
    counts = year_block_counts(n_years, resamples=300, seed=5)
    out = conditional_gain(x1, x2, y, z, counts, keep_draws=True, block=1)
    zs = standardize_series(z)
    for name in ("dry", "wet"):
        est = out[name]
        ny = int(est.n_years[0])
        assert ny == int((strata_masks(zs)[name].any(axis=1)).sum()) == 8
        assert est.n_samples[0] == pytest.approx(np.sum(strata_masks(zs)[name][..., None] & np.isfinite(x1 + x2 + y), axis=(0, 1))[0])
        assert est.draws is not None
        for q in QUANTITIES:
            ref = bootstrap_interval(est.draws[q], n_blocks=ny)
            np.testing.assert_allclose(est.intervals[q].low, ref.low)
            np.testing.assert_allclose(est.intervals[q].high, ref.high)
            np.testing.assert_allclose(est.intervals[q].p_value, ref.p_value)
        wide = est.intervals["gain"]
        narrow = bootstrap_interval(est.draws["gain"], n_blocks=n_years)
        assert (wide.high - wide.low > narrow.high - narrow.low).all()


def test_stratum_interval_groups_columns_by_their_years(rng: np.random.Generator) -> None:
    d = rng.standard_normal((200, 5)) + 0.3
    ny = np.array([10.0, 20.0, 10.0, 1.0, 20.0])
    iv = stratum_interval(d, ny)
    for c in range(5):
        if ny[c] < 2:
            assert np.isnan(iv.low[c]) and np.isnan(iv.p_value[c])
            continue
        ref = bootstrap_interval(d[:, c : c + 1], n_blocks=int(ny[c]))
        assert iv.low[c] == ref.low[0] and iv.high[c] == ref.high[0] and iv.p_value[c] == ref.p_value[0]


def test_shared_land_series_equals_per_column_copy(rng: np.random.Generator) -> None:
    x1, x2, y, z = _data(rng, n_cols=2)
    z2 = z[..., 0]
    counts = year_block_counts(x1.shape[0], resamples=60, seed=3)
    a = conditional_gain(x1, x2, y, z2, counts)
    b = conditional_gain(x1, x2, y, np.repeat(z2[..., None], 2, axis=2), counts, block=1)
    for name in STRATA:
        for q in QUANTITIES:
            np.testing.assert_allclose(a[name].values[q], b[name].values[q], rtol=1e-12, equal_nan=True)
            np.testing.assert_allclose(a[name].intervals[q].p_value, b[name].intervals[q].p_value)


def test_column_without_land_data_is_nan(rng: np.random.Generator) -> None:
    x1, x2, y, z = _data(rng, n_cols=2)
    z[..., 1] = np.nan
    out = conditional_gain(x1, x2, y, z, year_block_counts(x1.shape[0], resamples=30, seed=1))
    for name in STRATA:
        assert out[name].n_samples[1] == 0 and np.isnan(out[name].gain[1])
        assert np.isnan(out[name].intervals["gain"].p_value[1])
        assert np.isfinite(out[name].gain[0])


# ------------------------------------------------------------------------------------------------
# (iv) calibration and (v) power of the state-dependence test


N_PER_YEAR = 8
RESAMPLES = 1000
TERCILE = -Q  # lower tercile of a standard normal


def _year_shared(rng: np.random.Generator, shape: tuple[int, int, int], share: float) -> np.ndarray:
    y, s, c = shape
    return np.sqrt(share) * rng.standard_normal((y, 1, c)) + np.sqrt(1 - share) * rng.standard_normal(shape)


def _simulate(rng: np.random.Generator, n_years: int, n_rep: int, *, dry_only: bool):
    """Paired experiments, one replicate per column, in units of the observed anomaly's scale.

    Land anomaly z: 60 % of its variance shared by the 8 starts of a year (soil moisture persists);
    the scrambled run starts from an independent land state z' of the same kind. Other
    predictable signal s (an ocean-like part, variance 0.25, half year-shared) and weather noise
    (variance 1, 30 % year-shared) for each of y, x1, x2.
      linear:   land response g(z) = 0.7 z
      dry only: g(z) = 3 (z - q) for z below the lower tercile q, else 0 (the atmosphere responds
                only where evaporation is moisture-limited)
    y = g(z) + s + n_y;  x1 = g(z) + s + n_1;  x2 = g(z') + s + n_2.
    """
    shape = (n_years, N_PER_YEAR, n_rep)
    z, z_other = _year_shared(rng, shape, 0.6), _year_shared(rng, shape, 0.6)
    s = 0.5 * _year_shared(rng, shape, 0.5)

    def g(v: np.ndarray) -> np.ndarray:
        return 3.0 * np.where(v < TERCILE, v - TERCILE, 0.0) if dry_only else 0.7 * v

    n_y, n_1, n_2 = (_year_shared(rng, shape, 0.3) for _ in range(3))
    return g(z) + s + n_1, g(z_other) + s + n_2, g(z) + s + n_y, z


TESTS = ("state_dependence", "state_dependence_realistic")


def _rates(n_years: int, n_rep: int, *, dry_only: bool, seed: int) -> dict[str, dict[str, float]]:
    rng = np.random.default_rng([seed, n_years])
    counts = year_block_counts(n_years, resamples=RESAMPLES, seed=seed + n_years)
    x1, x2, y, z = _simulate(rng, n_years, n_rep, dry_only=dry_only)
    out = conditional_gain(x1, x2, y, z, counts, quantities=TESTS)
    rates: dict[str, dict[str, float]] = {}
    for name in STRATA:
        for q in TESTS:
            iv = out[name].intervals[q]
            p = iv.p_value
            assert np.isfinite(p).all()
            # DESIGN 3.6: the interval excludes 0 exactly when p < 0.05
            np.testing.assert_array_equal((iv.low > 0) | (iv.high < 0), p < 0.05)
            rates[f"{name}:{q}"] = {
                "rate": float(np.mean(p < 0.05)),
                "mean": float(np.mean(out[name].values[q])),
            }
    return rates


def _report(title: str, rates: dict[str, dict[str, float]], n_rep: int, record_property) -> None:
    print(f"\n{title}")
    for key, v in rates.items():
        se = np.sqrt(v["rate"] * (1 - v["rate"]) / n_rep)
        print(f"  {key:44s} rejection {v['rate']:.4f} +- {se:.4f}   mean D {v['mean']:+.4f}")
        record_property(f"{title}:{key}", round(v["rate"], 4))


@pytest.mark.slow
@pytest.mark.parametrize("n_years", [15, 30])
def test_no_state_dependence_is_rejected_at_most_6_percent(n_years: int, record_property) -> None:
    n_rep = 3000  # binomial SE at 5 %: sqrt(.05 * .95 / 3000) = 0.004
    rates = _rates(n_years, n_rep, dry_only=False, seed=907)
    _report(f"size Y={n_years} reps={n_rep} B={RESAMPLES}", rates, n_rep, record_property)
    for key, v in rates.items():
        assert abs(v["mean"]) < 0.02, key  # D is centred on zero in a linear system
        assert v["rate"] >= 0.01, f"{key}: {v['rate']:.4f} (uselessly conservative)"
        if key.endswith(":state_dependence"):  # the test on the gain: the issue's criterion
            assert v["rate"] <= 0.06, f"{key}: {v['rate']:.4f}"
        else:  # the realistic-only variant: 6 % plus one binomial SE per stratum, 5.5 % pooled
            assert v["rate"] <= 0.065, f"{key}: {v['rate']:.4f}"
    pooled = np.mean([v["rate"] for k, v in rates.items() if k.endswith("_realistic")])
    assert pooled <= 0.055, pooled


@pytest.mark.slow
@pytest.mark.parametrize("n_years", [15, 30])
def test_dry_only_land_effect_is_detected(n_years: int, record_property) -> None:
    n_rep = 1000
    rates = _rates(n_years, n_rep, dry_only=True, seed=311)
    _report(f"power Y={n_years} reps={n_rep} B={RESAMPLES}", rates, n_rep, record_property)
    # the dry stratum gains more than the linear fit predicts, the wet one less
    assert rates["dry:state_dependence"]["mean"] > 0.05
    assert rates["wet:state_dependence"]["mean"] < -0.2
    # measured with this seed: wet gain test 0.453 (Y=15) / 0.828 (Y=30); dry realistic-only
    # test 0.440 / 0.813; dry gain test 0.120 / 0.262 (the scrambled run's stratum sampling noise,
    # which carries no land signal, dilutes the test on the gain there)
    if n_years == 30:
        assert rates["wet:state_dependence"]["rate"] >= 0.7
        assert rates["dry:state_dependence_realistic"]["rate"] >= 0.7
        assert rates["dry:state_dependence"]["rate"] >= 0.15
    else:
        assert rates["wet:state_dependence"]["rate"] >= 0.3
        assert rates["dry:state_dependence_realistic"]["rate"] >= 0.3
