"""Opening and validating CF files (app.cube.sources) and the tile reduction (app.cube.inputs).

Dims are found from CF ``standard_name`` attributes first, then from the accepted names of
DESIGN section 2 (CF standard names: forecast_reference_time, realization, forecast_period,
latitude, longitude; CF conventions 1.8, appendix A). References: the files' own coordinates
read back with xarray, and the test's own anomalies (tests/cf_factory.py).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from cf_factory import CasePaths, CaseSpec, build_datasets, reference_anomalies
from run_support import run_options

from app.cube.inputs import prepare, reduce_tile
from app.cube.sources import check_not_all_nan, describe_dataset, open_source
from app.errors import InputError
from app.runs.scoring import run_engine


def test_cf_dims_and_layout(cf_case: CasePaths) -> None:
    src = open_source(cf_case.realistic, role="hindcast")
    try:
        assert src.variable == "tas" and src.units == "K" and src.members == 3
        assert src.dims == {
            "forecast_reference_time": "forecast_reference_time", "realization": "realization",
            "forecast_period": "forecast_period", "lat": "lat", "lon": "lon",
        }
        np.testing.assert_array_equal(src.lead_days, np.arange(1, 29))
        with xr.open_dataset(cf_case.realistic) as ds:
            np.testing.assert_array_equal(src.init_dates, ds["forecast_reference_time"].values.astype("datetime64[D]"))
            tile = ds["tas"].isel(lat=slice(1, 3)).values.astype(np.float64)
        np.testing.assert_array_equal(src.read(lat=slice(1, 3)), tile)
    finally:
        src.close()


def test_standard_names_find_dims_whatever_they_are_called(tmp_path: Path) -> None:
    ds = build_datasets(CaseSpec())["realistic"]
    renamed = ds.rename({"forecast_reference_time": "t0", "realization": "ens", "forecast_period": "fc",
                         "lat": "y", "lon": "x"})
    path = tmp_path / "odd_names.nc"
    renamed.to_netcdf(path, encoding={"t0": {"units": "days since 2000-01-01", "dtype": "int32"}})
    src = open_source(path, role="hindcast")
    try:
        assert src.dims == {"forecast_reference_time": "t0", "realization": "ens", "forecast_period": "fc",
                            "lat": "y", "lon": "x"}
        assert src.read().shape == (16, 3, 28, 3, 4)
    finally:
        src.close()


def test_alias_dim_names_score_like_cf_names(make_cf_case: Callable[..., CasePaths]) -> None:
    options = run_options(resamples=30)
    cf = run_engine(*make_cf_case().engine_args(), options=options)
    alias = run_engine(*make_cf_case(dim_names="aliases").engine_args(), options=options)
    np.testing.assert_array_equal(alias.cells.acc_realistic, cf.cells.acc_realistic)
    np.testing.assert_array_equal(alias.lat, cf.lat)


def test_describe_dataset(cf_case: CasePaths) -> None:
    d = describe_dataset(cf_case.realistic, role="hindcast")
    assert d["variable"] == "tas" and d["units"] == "K" and d["members"] == 3
    assert d["lead_days"] == list(range(1, 29))
    assert d["init_dates"][:2] == ["2001-05-01", "2001-05-16"] and len(d["init_dates"]) == 16
    assert d["grid"]["lat"] == {"size": 3, "first": 40.0, "last": 50.0, "step": 5.0}
    obs = describe_dataset(cf_case.observations, role="observations")
    assert obs["time_range"][0] == "2001-05-01"


def test_all_nan_variable_is_found(make_cf_case: Callable[..., CasePaths]) -> None:
    case = make_cf_case(all_nan=("observations",))
    src = open_source(case.observations, role="observations")
    try:
        with pytest.raises(InputError) as err:
            check_not_all_nan(src, tile_cells=4)
        assert "observations.nc" in err.value.message and "'tas'" in err.value.message
        assert "all NaN" in err.value.message
    finally:
        src.close()


def test_role_and_variable_errors(cf_case: CasePaths) -> None:
    with pytest.raises(InputError, match="unknown role 'forecast'; choose one of hindcast, observations, land_state"):
        open_source(cf_case.realistic, role="forecast")
    with pytest.raises(InputError) as err:
        open_source(cf_case.realistic, role="hindcast", variable="pr")
    assert "realistic.nc" in err.value.message and "'pr'" in err.value.message and "tas" in err.value.message


def test_several_candidate_variables_must_be_named(make_cf_case: Callable[..., CasePaths]) -> None:
    case = make_cf_case(extra_variables={"tasmax": "K"})
    with pytest.raises(InputError) as err:
        open_source(case.realistic, role="hindcast")
    assert "several" in err.value.message and "tas" in err.value.message and "tasmax" in err.value.message
    src = open_source(case.realistic, role="hindcast", variable="tas")
    src.close()


def test_tiles_reduce_like_the_whole_grid(cf_case: CasePaths) -> None:
    prep = prepare(*cf_case.engine_args(land=True))
    try:
        whole = reduce_tile(prep, lat=slice(None), lon=slice(None))
        parts = [reduce_tile(prep, lat=slice(i, i + 1), lon=slice(None)) for i in range(prep.lat.size)]
        for name in ("realistic", "scrambled", "observed", "land"):
            joined = np.concatenate([getattr(p, name) for p in parts], axis=-1)
            np.testing.assert_array_equal(joined, getattr(whole, name), err_msg=name)
        ref = reference_anomalies(cf_case)
        shape = whole.realistic.shape[:3] + (prep.lat.size, prep.lon.size)
        np.testing.assert_allclose(whole.observed.reshape(shape), ref["observed"].values, atol=1e-9)
        # the land state enters standardised per start slot: mean 0, std 1 over years (ddof=1)
        z = whole.land
        np.testing.assert_allclose(np.nanmean(z, axis=0), 0.0, atol=1e-12)
        np.testing.assert_allclose(np.nanstd(z, axis=0, ddof=1), 1.0, atol=1e-12)
    finally:
        prep.close()
