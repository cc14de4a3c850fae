"""The committed sample scenario (DESIGN section 7): reproducible, CF-conformant, right gain pattern.

The skill checks here use plain numpy plus ``scipy.stats.pearsonr`` / ``scipy.stats.linregress``
(external references), never landlift's own engine. The thresholds are the design targets of the
scenario (DESIGN section 7 and the generator docstring), not measured values copied back.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path
from types import ModuleType

import numpy as np
import pytest
import xarray as xr
from scipy.stats import linregress, pearsonr

SAMPLE_DIR = Path(__file__).resolve().parents[1] / "sample_data"
ROLES = ("realistic", "scrambled", "observations", "land_state")
WEEKS_2_TO_4 = {"week 2": (8, 14), "week 3": (15, 21), "week 4": (22, 28), "weeks 3-4": (15, 28)}


def _load_generator() -> ModuleType:
    spec = importlib.util.spec_from_file_location(
        "landlift_sample_generate", SAMPLE_DIR / "generate.py"
    )
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # so that lookups by module name (dataclasses, pickle) work
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def generator() -> ModuleType:
    return _load_generator()


@pytest.fixture(scope="module")
def committed() -> dict[str, xr.Dataset]:
    missing = [r for r in ROLES if not (SAMPLE_DIR / f"{r}.nc").is_file()]
    assert not missing, f"committed sample files missing: {missing}; run sample_data/generate.py"
    out = {r: xr.load_dataset(SAMPLE_DIR / f"{r}.nc", engine="netcdf4") for r in ROLES}
    return out


@pytest.fixture(scope="module")
def regions(generator: ModuleType, committed: dict[str, xr.Dataset]) -> dict[str, np.ndarray]:
    lon = committed["realistic"]["lon"].values
    cols = {name: np.asarray(c) for name, c in generator.REGION_COLUMNS.items()}
    # The zones are the west third, the middle belt and the east third of the columns.
    assert lon[cols["west"]].max() < lon[cols["belt"]].min()
    assert lon[cols["belt"]].max() < lon[cols["east"]].min()
    assert sorted(np.concatenate(list(cols.values())).tolist()) == list(range(lon.size))
    return cols


# ---------------------------------------------------------------- reproducibility


def test_regeneration_reproduces_committed_values(
    generator: ModuleType, committed: dict[str, xr.Dataset], tmp_path: Path
) -> None:
    paths = generator.write_sample(tmp_path)
    assert set(paths) == set(ROLES)
    for role in ROLES:
        assert paths[role] == tmp_path / f"{role}.nc"
        fresh = xr.load_dataset(paths[role], engine="netcdf4")
        old = committed[role]
        assert set(fresh.variables) == set(old.variables), role
        for name in old.variables:
            a, b = np.asarray(fresh[name].values), np.asarray(old[name].values)
            assert a.dtype == b.dtype, (role, name)
            assert np.array_equal(a, b), f"{role}.nc: {name} differs after regeneration"
        assert fresh.attrs == old.attrs, role


def test_committed_output_is_small() -> None:
    total = sum((SAMPLE_DIR / f"{r}.nc").stat().st_size for r in ROLES)
    assert total <= 8 * 1024 * 1024, f"sample output is {total / 1e6:.2f} MB, budget 8 MB"


# ---------------------------------------------------------------- conventions


def _check_grid(ds: xr.Dataset) -> None:
    lat, lon = ds["lat"], ds["lon"]
    assert lat.attrs["standard_name"] == "latitude"
    assert lat.attrs["units"] == "degrees_north" and lat.attrs["axis"] == "Y"
    assert lon.attrs["standard_name"] == "longitude"
    assert lon.attrs["units"] == "degrees_east" and lon.attrs["axis"] == "X"
    assert np.all(np.diff(lat.values) > 0) and np.all(np.diff(lon.values) > 0)
    assert np.allclose(np.diff(lat.values), np.diff(lat.values)[0])  # regular grid
    assert np.allclose(np.diff(lon.values), np.diff(lon.values)[0])
    assert 8 <= lat.size <= 12 and 14 <= lon.size <= 18
    assert lat.values.min() >= 30 and lat.values.max() <= 60  # mid-latitudes


def _check_global_attrs(ds: xr.Dataset) -> None:
    assert ds.attrs["Conventions"] == "CF-1.8"
    assert (
        ds.attrs["source"] == "landlift sample scenario generator (synthetic, fictional continent)"
    )
    assert ds.attrs["title"] and ds.attrs["history"]


def _check_packed(path: Path, name: str) -> None:
    enc = xr.open_dataset(path, engine="netcdf4")[name].encoding
    assert enc["dtype"] == np.dtype("int16"), path
    assert "scale_factor" in enc and "add_offset" in enc, path
    assert enc["zlib"] is True, path


@pytest.mark.parametrize("role", ["realistic", "scrambled"])
def test_hindcast_conventions(role: str, committed: dict[str, xr.Dataset]) -> None:
    ds = committed[role]
    _check_global_attrs(ds)
    _check_grid(ds)
    assert ds.attrs["experiment"] == f"{role} land initial states"
    tas = ds["tas"]
    assert tas.dims == ("forecast_reference_time", "realization", "forecast_period", "lat", "lon")
    assert tas.sizes["forecast_reference_time"] == 80
    assert tas.sizes["realization"] == 4
    assert tas.attrs["standard_name"] == "air_temperature"
    assert tas.attrs["units"] == "K" and tas.attrs["cell_methods"] == "time: mean"
    assert tas.attrs["long_name"]
    assert not np.isnan(tas.values).any()
    assert float(tas.min()) > 260 and float(tas.max()) < 320  # plausible K, not degC

    frt = ds["forecast_reference_time"]
    assert np.issubdtype(frt.dtype, np.datetime64)
    assert frt.attrs["standard_name"] == "forecast_reference_time"
    assert frt.encoding["units"] == "days since 2001-01-01"
    dates = frt.values.astype("datetime64[D]")
    assert np.all(np.diff(dates) > np.timedelta64(0, "D"))
    years = dates.astype("datetime64[Y]").astype(int) + 1970
    assert sorted(set(years.tolist())) == list(range(2001, 2021))
    assert all((years == y).sum() == 4 for y in range(2001, 2021))
    month_day = {str(d)[5:] for d in dates}
    assert month_day == {"05-01", "05-16", "06-01", "06-16"}

    fp = ds["forecast_period"]
    assert np.issubdtype(fp.dtype, np.integer), f"forecast_period decoded as {fp.dtype}"
    assert fp.values.tolist() == list(range(1, 31))
    assert fp.attrs["standard_name"] == "forecast_period" and fp.attrs["units"] == "days"

    real = ds["realization"]
    assert np.issubdtype(real.dtype, np.integer) and real.attrs["standard_name"] == "realization"
    assert len(set(real.values.tolist())) == 4
    _check_packed(SAMPLE_DIR / f"{role}.nc", "tas")


def test_observation_conventions(committed: dict[str, xr.Dataset]) -> None:
    obs, hc = committed["observations"], committed["realistic"]
    _check_global_attrs(obs)
    _check_grid(obs)
    tas = obs["tas"]
    assert tas.dims == ("time", "lat", "lon")
    assert tas.attrs["units"] == "degC" and tas.attrs["standard_name"] == "air_temperature"
    assert tas.attrs["cell_methods"] == "time: mean"
    assert not np.isnan(tas.values).any()
    assert float(tas.min()) > -20 and float(tas.max()) < 50  # plausible degC, not K
    assert np.array_equal(obs["lat"].values, hc["lat"].values)
    assert np.array_equal(obs["lon"].values, hc["lon"].values)
    times = obs["time"].values.astype("datetime64[D]")
    assert np.all(np.diff(times) > np.timedelta64(0, "D"))  # increasing, no duplicates
    # Every valid date init + d - 1 (d = 1..30) is present, and nothing else.
    init = hc["forecast_reference_time"].values.astype("datetime64[D]")
    needed = np.unique(init[:, None] + np.arange(30).astype("timedelta64[D]"))
    assert np.array_equal(needed, times)
    _check_packed(SAMPLE_DIR / "observations.nc", "tas")


def test_land_state_conventions(
    committed: dict[str, xr.Dataset], regions: dict[str, np.ndarray]
) -> None:
    land, hc = committed["land_state"], committed["realistic"]
    _check_global_attrs(land)
    _check_grid(land)
    mrsos = land["mrsos"]
    assert mrsos.dims == ("forecast_reference_time", "lat", "lon")
    assert mrsos.attrs["standard_name"] == "mass_content_of_water_in_soil_layer"
    assert mrsos.attrs["units"] == "kg m-2"
    assert np.array_equal(
        land["forecast_reference_time"].values, hc["forecast_reference_time"].values
    )
    values = mrsos.values
    assert np.all(values > 0)
    col_mean = values.mean(axis=(0, 1))
    # Arid west, wetter belt, humid east: climatological mean roughly 20 -> 300 kg m-2.
    west, belt, east = (col_mean[regions[r]].mean() for r in ("west", "belt", "east"))
    assert west < belt < east
    assert col_mean[0] < 50 and col_mean[-1] > 200
    _check_packed(SAMPLE_DIR / "land_state.nc", "mrsos")


# ---------------------------------------------------------------- physics and skill


def _by_year_start(x: np.ndarray) -> np.ndarray:
    """(80, ...) ordered by year then start -> (20 years, 4 starts, ...)."""
    return x.reshape(20, 4, *x.shape[1:])


def _anomaly(x: np.ndarray) -> np.ndarray:
    """Anomaly against the per-start-date climatology over years: x is (year, start, ...)."""
    return x - x.mean(axis=0, keepdims=True)


def _window_fields(
    committed: dict[str, xr.Dataset], first: int, last: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Ensemble-mean window means of both experiments and the verifying observed window means.

    Returned as anomalies (80 samples, cells), observations converted from degC to K
    (the offset cancels in anomalies but is applied for clarity).
    """
    hc = committed["realistic"]
    init = hc["forecast_reference_time"].values.astype("datetime64[D]")
    times = committed["observations"]["time"].values.astype("datetime64[D]")
    obs = committed["observations"]["tas"].values.astype(np.float64) + 273.15
    leads = np.arange(first, last + 1)
    valid = init[:, None] + (leads - 1).astype("timedelta64[D]")  # valid date = init + d - 1
    idx = np.searchsorted(times, valid)
    assert np.array_equal(times[idx], valid)
    obs_win = obs[idx].mean(axis=1)  # (80, lat, lon)
    fp = hc["forecast_period"].values
    sel = (fp >= first) & (fp <= last)
    out = []
    for role in ("realistic", "scrambled"):
        tas = committed[role]["tas"].values.astype(np.float64)
        out.append(tas.mean(axis=1)[:, sel].mean(axis=1))  # ensemble mean, then window mean
    ncell = obs_win.shape[1] * obs_win.shape[2]
    anoms = [_anomaly(_by_year_start(a)).reshape(80, ncell) for a in (*out, obs_win)]
    return anoms[0], anoms[1], anoms[2]


def _cell_gain(committed: dict[str, xr.Dataset], first: int, last: int) -> np.ndarray:
    fr, fs, ob = _window_fields(committed, first, last)
    acc_r = pearsonr(fr, ob, axis=0).statistic  # scipy reference for the centred correlation
    acc_s = pearsonr(fs, ob, axis=0).statistic
    shape = committed["realistic"]["tas"].shape[-2:]
    return (acc_r - acc_s).reshape(shape)


@pytest.fixture(scope="module")
def gains(committed: dict[str, xr.Dataset]) -> dict[str, np.ndarray]:
    return {label: _cell_gain(committed, a, b) for label, (a, b) in WEEKS_2_TO_4.items()}


@pytest.mark.parametrize("label", list(WEEKS_2_TO_4))
def test_gain_largest_in_belt_near_zero_in_east(
    label: str, gains: dict[str, np.ndarray], regions: dict[str, np.ndarray]
) -> None:
    gain = gains[label]
    mean = {r: float(gain[:, cols].mean()) for r, cols in regions.items()}
    assert mean["belt"] > 0.2, f"{label}: belt mean gain {mean['belt']:.3f}"
    assert abs(mean["east"]) < 0.12, f"{label}: east mean gain {mean['east']:.3f}"
    assert mean["belt"] > mean["west"] + 0.1, f"{label}: {mean}"  # the far west gains little
    assert mean["belt"] > mean["east"] + 0.1, f"{label}: {mean}"


def test_soil_moisture_persists_longer_where_dry(
    committed: dict[str, xr.Dataset], regions: dict[str, np.ndarray]
) -> None:
    """Lag-15-day autocorrelation of the initial land anomaly between successive starts.

    Starts 1 May -> 16 May and 1 June -> 16 June are 15 days apart, so the correlation of the
    (log) soil-moisture anomaly estimates exp(-15 / tau): about 0.69 for tau = 40 days,
    0.15 for tau = 8 days (AR(1) lag correlation, common practice).
    """
    z = _anomaly(_by_year_start(np.log(committed["land_state"]["mrsos"].values)))
    pairs = [(0, 1), (2, 3)]
    x = np.concatenate([z[:, a] for a, _ in pairs]).reshape(40, -1)
    y = np.concatenate([z[:, b] for _, b in pairs]).reshape(40, -1)
    r = pearsonr(x, y, axis=0).statistic.reshape(z.shape[-2:])
    west, belt, east = (float(r[:, regions[k]].mean()) for k in ("west", "belt", "east"))
    assert west > belt > east, (west, belt, east)
    assert west > 0.5 and east < 0.4, (west, belt, east)


def test_scrambled_land_comes_from_the_deranged_year(
    committed: dict[str, xr.Dataset], regions: dict[str, np.ndarray]
) -> None:
    """Lead-1 belt temperature anomaly follows -(soil anomaly) of the source year: year i in the
    realistic experiment, year (i + 7) mod 20 in the scrambled one."""
    belt = regions["belt"]
    z = _anomaly(_by_year_start(np.log(committed["land_state"]["mrsos"].values)))[..., belt]
    shifted = z[(np.arange(20) + 7) % 20]

    def lead1(role: str) -> np.ndarray:
        tas = committed[role]["tas"].values[:, :, 0].astype(np.float64).mean(axis=1)
        return _anomaly(_by_year_start(tas))[..., belt]

    def corr(a: np.ndarray, b: np.ndarray) -> float:
        return float(pearsonr(a.ravel(), b.ravel()).statistic)

    assert corr(lead1("realistic"), -z) > 0.6
    assert corr(lead1("scrambled"), -shifted) > 0.6
    assert abs(corr(lead1("scrambled"), -z)) < 0.2


def test_hindcast_drift_and_observation_units(committed: dict[str, xr.Dataset]) -> None:
    """Mean hindcast-minus-observation error grows with lead (the drift the anomaly method must
    remove), and observations are degC: without the 273.15 K offset the error would be ~273 K."""
    hc = committed["realistic"]
    init = hc["forecast_reference_time"].values.astype("datetime64[D]")
    times = committed["observations"]["time"].values.astype("datetime64[D]")
    obs_c = committed["observations"]["tas"].values.astype(np.float64)
    valid = init[:, None] + np.arange(30).astype("timedelta64[D]")
    obs_k = obs_c[np.searchsorted(times, valid)] + 273.15  # (80, 30, lat, lon)
    err = (hc["tas"].values.astype(np.float64).mean(axis=1) - obs_k).mean(axis=(0, 2, 3))
    fit = linregress(np.arange(1, 31), err)
    assert 0.015 < fit.slope < 0.045, fit
    assert abs(err[0]) < 1.5, err[0]
