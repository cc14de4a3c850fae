"""Per-cell ACC and both regional aggregations of the engine against outside references.

The anomalies are rebuilt by the test straight from the synthetic files (tests/cf_factory.py,
``reference_anomalies``: xarray ensemble mean, window means over lead days, observed window means
on valid date = init + lead day - 1, leave-one-year-out anomalies per start calendar day by an
explicit loop over years). The correlations come from ``scipy.stats.pearsonr`` and
``xskillscore.pearson_r``; regional means from xarray's ``DataArray.weighted(...).mean``.

Precision: the files are float32; the engine and the references read the same float32 values and
work in float64, so the float64 arrays of ``app.cube.pipeline.run`` agree to 1e-10. The maps of the
result (``ScoreResult.maps``) are stored as float32: 1e-6 there. Skill-curve JSON rounds to 6
decimals: 1e-6 there as well.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest
import xarray as xr
import xskillscore as xs
from cf_factory import CasePaths, CaseSpec, coslat_weights, paired, reference_anomalies, write_case
from run_support import run_options
from scipy.stats import pearsonr

from app.cube.pipeline import RunOutput
from app.runs.scoring import run_engine, score_files

FLOAT64_TOL = 1e-10
FLOAT32_TOL = 1e-6
BOX = "box:42,51,11,16"  # lat 45, 50 and lon 12.5, 15 of the default synthetic grid


def cell_acc_scipy(anom: xr.Dataset, name: str) -> np.ndarray:
    """``(window, lat, lon)`` pearsonr of ``name`` against the observed anomalies (paired samples)."""
    a = paired(anom)
    out = np.full((a.sizes["window"], a.sizes["lat"], a.sizes["lon"]), np.nan)
    for w in range(a.sizes["window"]):
        for i in range(a.sizes["lat"]):
            for j in range(a.sizes["lon"]):
                x = a[name].isel(window=w, lat=i, lon=j).values.ravel()
                y = a["observed"].isel(window=w, lat=i, lon=j).values.ravel()
                ok = np.isfinite(x) & np.isfinite(y)
                out[w, i, j] = pearsonr(x[ok], y[ok]).statistic  # scipy.stats.pearsonr
    return out


def cell_acc_xskillscore(anom: xr.Dataset, name: str) -> np.ndarray:
    a = paired(anom)
    r = xs.pearson_r(a[name], a["observed"], dim=["year", "slot"], skipna=True)  # xskillscore
    return r.transpose("window", "lat", "lon").values


@pytest.fixture(scope="module")
def scored(tmp_path_factory: pytest.TempPathFactory) -> tuple[CasePaths, RunOutput, object, xr.Dataset]:
    """The clean synthetic case, run through both entry points once per module."""
    cf_case = write_case(tmp_path_factory.mktemp("acc"), CaseSpec())
    options = run_options(regions=[BOX], resamples=200)
    out = run_engine(*cf_case.engine_args(), options=options)
    result = score_files(*cf_case.engine_args(), options=options)
    return cf_case, out, result, reference_anomalies(cf_case)


def test_cell_acc_matches_scipy_and_xskillscore(scored: tuple) -> None:
    case, out, result, anom = scored
    shape = (len(out.windows), out.lat.size, out.lon.size)
    for name, engine_acc, map_name in (
        ("realistic", out.cells.acc_realistic, "acc_realistic"),
        ("scrambled", out.cells.acc_scrambled, "acc_scrambled"),
    ):
        ref_scipy = cell_acc_scipy(anom, name)
        ref_xs = cell_acc_xskillscore(anom, name)
        assert np.isfinite(ref_scipy).all()
        # the two outside references agree with each other first
        np.testing.assert_allclose(ref_xs, ref_scipy, atol=1e-12)
        np.testing.assert_allclose(engine_acc.reshape(shape), ref_scipy, atol=FLOAT64_TOL, rtol=0)
        np.testing.assert_allclose(engine_acc.reshape(shape), ref_xs, atol=FLOAT64_TOL, rtol=0)
        maps = result.maps[map_name].transpose("window", "lat", "lon").values.astype(np.float64)
        np.testing.assert_allclose(maps, ref_scipy, atol=FLOAT32_TOL, rtol=0)
    gain = result.maps["gain"].values.astype(np.float64)
    np.testing.assert_allclose(
        gain, cell_acc_scipy(anom, "realistic") - cell_acc_scipy(anom, "scrambled"), atol=2 * FLOAT32_TOL
    )


def test_anomaly_cube_equals_reference_anomalies(scored: tuple) -> None:
    """The engine's cube is the test's own anomalies (DESIGN 3.1-3.3), cell for cell."""
    case, out, _, anom = scored
    shape = (out.years.size, len(out.slots), len(out.windows), out.lat.size, out.lon.size)
    assert list(anom["year"].values) == list(out.years)
    assert list(anom["slot"].values) == out.slots
    for name, cube in (("realistic", out.cube.realistic), ("scrambled", out.cube.scrambled),
                       ("observed", out.cube.observed)):
        np.testing.assert_allclose(cube.reshape(shape), anom[name].values, atol=1e-9, rtol=0)


def test_custom_windows_match_reference(make_cf_case: Callable[..., CasePaths]) -> None:
    case = make_cf_case(n_leads=20)
    windows = [{"label": "days 3-10", "first_day": 3, "last_day": 10},
               {"label": "day 20", "first_day": 20, "last_day": 20}]
    out = run_engine(*case.engine_args(), options=run_options(lead_windows=windows, resamples=50))
    assert [w.label for w in out.windows] == ["days 3-10", "day 20"]
    anom = reference_anomalies(case, windows=windows)
    ref = cell_acc_scipy(anom, "realistic")
    np.testing.assert_allclose(out.cells.acc_realistic.reshape(ref.shape), ref, atol=FLOAT64_TOL)


def _box_mask(lat: np.ndarray, lon: np.ndarray, lat0: float, lat1: float, lon0: float, lon1: float) -> np.ndarray:
    return ((lat >= lat0) & (lat <= lat1))[:, None] & ((lon >= lon0) & (lon <= lon1))[None, :]


def test_box_region_selects_the_right_cells(scored: tuple) -> None:
    _, out, _, _ = scored
    assert [r.id for r in out.regions] == ["all", BOX]
    lat, lon = out.lat, out.lon
    expected = _box_mask(lat, lon, 42, 51, 11, 16)
    assert expected.sum() == 4  # lat 45, 50 x lon 12.5, 15
    weights = out.region_masks.reshape(2, lat.size, lon.size)
    np.testing.assert_array_equal(weights[1] > 0, expected)
    # cos(latitude) weights (common practice for area weighting on a regular grid)
    coslat = np.cos(np.deg2rad(lat))[:, None] * np.ones((1, lon.size))
    np.testing.assert_allclose(weights[1][expected], coslat[expected], rtol=1e-14)
    np.testing.assert_allclose(weights[0], coslat, rtol=1e-14)


@pytest.mark.parametrize("region_index", [0, 1], ids=["all", "box"])
def test_acc_of_region_mean_is_pearsonr_of_weighted_mean_series(scored: tuple, region_index: int) -> None:
    case, out, result, anom = scored
    lat, lon = out.lat, out.lon
    mask = None if region_index == 0 else _box_mask(lat, lon, 42, 51, 11, 16)
    w = coslat_weights(lat, lon, mask)
    # xarray's weighted mean (skips NaN, renormalises the weights) over (lat, lon)
    series = {k: anom[k].weighted(w).mean(("lat", "lon")) for k in ("realistic", "scrambled", "observed")}
    est = out.series[region_index]
    region_id = out.regions[region_index].id
    curve = result.curve(region_id, "acc_of_region_mean")
    for wi, label in enumerate(anom["window"].values):
        y = series["observed"].sel(window=label).values.ravel()
        for name, engine_value, key in (("realistic", est.acc_realistic, "acc_realistic"),
                                        ("scrambled", est.acc_scrambled, "acc_scrambled")):
            x = series[name].sel(window=label).values.ravel()
            ok = np.isfinite(x) & np.isfinite(y)
            ref = pearsonr(x[ok], y[ok]).statistic  # scipy.stats.pearsonr
            assert engine_value[wi] == pytest.approx(ref, abs=FLOAT64_TOL)
            assert curve["windows"][wi][key]["value"] == pytest.approx(ref, abs=FLOAT32_TOL)
            assert curve["windows"][wi]["n_samples"] == int(ok.sum())


@pytest.mark.parametrize("region_index", [0, 1], ids=["all", "box"])
def test_region_mean_of_acc_is_fisher_z_weighted_mean(scored: tuple, region_index: int) -> None:
    """tanh of the cos(lat)-weighted mean of arctanh(cell ACC): Fisher z averaging (common practice)."""
    case, out, result, anom = scored
    lat, lon = out.lat, out.lon
    mask = None if region_index == 0 else _box_mask(lat, lon, 42, 51, 11, 16)
    w = coslat_weights(lat, lon, mask)
    est = out.cells.region_mean[region_index]
    curve = result.curve(out.regions[region_index].id, "region_mean_of_acc")
    for name, engine_value, key in (("realistic", est.acc_realistic, "acc_realistic"),
                                    ("scrambled", est.acc_scrambled, "acc_scrambled")):
        cells = xr.DataArray(cell_acc_scipy(anom, name), dims=("window", "lat", "lon"),
                             coords={"window": anom["window"].values, "lat": lat, "lon": lon})
        ref = np.tanh(np.arctanh(cells).weighted(w).mean(("lat", "lon"))).values
        np.testing.assert_allclose(engine_value, ref, atol=FLOAT64_TOL, rtol=0)
        np.testing.assert_allclose([c[key]["value"] for c in curve["windows"]], ref, atol=FLOAT32_TOL)
    gains = [c["gain"]["value"] for c in curve["windows"]]
    np.testing.assert_allclose(gains, est.acc_realistic - est.acc_scrambled, atol=FLOAT32_TOL)
