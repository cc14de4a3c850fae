"""Units end to end: observations in other units than the hindcasts are converted, not rejected.

References: the test converts the observation file itself with the definitions of the units
(0 degC = 273.15 K, SI; 1 kg m-2 of water = 1 mm, so 1 mm day-1 = 1/86400 kg m-2 s-1, common
practice), writes the converted values as float64 (so no second float32 rounding enters), and
compares the runs. ACC is invariant under a linear change of units, so the converted values
themselves are checked too: the observed anomalies of the cube (a scale shows there) and the
tile that ``Source.read`` returns (an offset shows there).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from cf_factory import KELVIN, SECONDS_PER_DAY, CasePaths, paired, reference_anomalies
from cf_xarray.units import units as cf_ureg
from run_support import run_options
from scipy.stats import pearsonr

from app.cube.inputs import prepare
from app.errors import InputError
from app.runs.scoring import run_engine, score_files

MAP_FIELDS = ("acc_realistic", "acc_scrambled", "gain", "gain_low", "gain_high", "p_value", "significant")


def _rewrite_observations(case: CasePaths, target: Path, *, scale: float, offset: float, units: str) -> Path:
    """The observation file of ``case`` with values ``scale * v + offset`` in ``units`` (float64)."""
    with xr.open_dataset(case.observations) as ds:
        ds = ds.load()
    var = case.spec.variable
    ds[var] = (ds[var].astype("float64") * scale + offset).assign_attrs(units=units)
    ds[var].encoding = {"_FillValue": np.nan}
    ds["time"].encoding.update({"units": "days since 2000-01-01", "dtype": "int32"})
    ds.to_netcdf(target, engine="netcdf4")
    return target


def test_degc_observations_score_like_kelvin(make_cf_case: Callable[..., CasePaths], tmp_path: Path) -> None:
    case = make_cf_case(obs_units="degC")
    kelvin = _rewrite_observations(case, tmp_path / "obs_kelvin.nc", scale=1.0, offset=KELVIN, units="K")
    options = run_options(resamples=300, seed=7)
    mixed = score_files(case.realistic, case.scrambled, case.observations, options=options)
    same = score_files(case.realistic, case.scrambled, kelvin, options=options)
    assert mixed.meta["units"] == "K"
    for field in MAP_FIELDS:
        a, b = mixed.maps[field].values, same.maps[field].values
        if field in ("significant", "p_value"):
            np.testing.assert_array_equal(a, b, err_msg=field)
        else:
            np.testing.assert_allclose(a, b, atol=1e-6, rtol=0, err_msg=field)  # float32 maps
    # and both equal scipy.stats.pearsonr on the test's own anomalies
    anom = paired(reference_anomalies(case))
    x = anom["realistic"].isel(window=1, lat=0, lon=0).values.ravel()
    y = anom["observed"].isel(window=1, lat=0, lon=0).values.ravel()
    ok = np.isfinite(x) & np.isfinite(y)
    ref = pearsonr(x[ok], y[ok]).statistic
    assert float(mixed.maps["acc_realistic"].isel(window=1, lat=0, lon=0)) == pytest.approx(ref, abs=1e-6)


def test_degc_observations_are_read_in_kelvin(make_cf_case: Callable[..., CasePaths]) -> None:
    case = make_cf_case(obs_units="degC")
    prep = prepare(case.realistic, case.scrambled, case.observations)
    try:
        conv = prep.to_units["observations"]
        # pint (cf-xarray registry) maps 0 degC and 1 degC to these kelvin values
        zero = cf_ureg.Quantity(0.0, "degC").to("K").magnitude
        one = cf_ureg.Quantity(1.0, "degC").to("K").magnitude
        assert conv.offset == pytest.approx(zero, abs=1e-9)
        assert conv.scale == pytest.approx(one - zero, abs=1e-12)
        tile = prep.observations.read(lat=slice(0, 2), convert=conv)
        with xr.open_dataset(case.observations) as ds:
            raw = ds["tas"].isel(lat=slice(0, 2)).values.astype(np.float64)
        np.testing.assert_allclose(tile, raw + KELVIN, rtol=0, atol=1e-9)
        assert 250.0 < np.nanmean(tile) < 320.0  # plausible kelvin
    finally:
        prep.close()


def test_precipitation_mm_per_day_converts_to_mass_flux(make_cf_case: Callable[..., CasePaths], tmp_path: Path) -> None:
    case = make_cf_case(quantity="flux", variable="pr", obs_units="mm day-1")
    flux = _rewrite_observations(
        case, tmp_path / "obs_flux.nc", scale=1.0 / SECONDS_PER_DAY, offset=0.0, units="kg m-2 s-1"
    )
    options = run_options(resamples=200)
    mixed = run_engine(case.realistic, case.scrambled, case.observations, options=options)
    same = run_engine(case.realistic, case.scrambled, flux, options=options)
    assert mixed.summary["units"] == "kg m-2 s-1"
    # the anomalies are in the hindcast units: a wrong scale (e.g. 1, or 1/1000) shows here
    np.testing.assert_allclose(mixed.cube.observed, same.cube.observed, rtol=1e-9, atol=1e-18)
    assert np.nanstd(mixed.cube.observed) < 1e-4  # kg m-2 s-1, not mm day-1
    np.testing.assert_allclose(mixed.cells.acc_realistic, same.cells.acc_realistic, atol=1e-10)
    np.testing.assert_array_equal(mixed.cells.p_value, same.cells.p_value)


def test_units_that_do_not_convert(make_cf_case: Callable[..., CasePaths]) -> None:
    case = make_cf_case(units_override={"observations": "m"})
    with pytest.raises(InputError) as err:
        run_engine(*case.engine_args(), options=run_options(resamples=10))
    msg = err.value.message
    assert "observations.nc" in msg and "'tas'" in msg
    assert "units m do not convert to K" in msg and "realistic.nc" in msg
