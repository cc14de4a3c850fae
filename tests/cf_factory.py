"""Tiny synthetic CF hindcast, observation and land-state files, with a knob for every defect.

Used by ``tests/test_cube_*.py``, ``tests/test_engine_*.py`` and ``tests/test_cli_*.py``. Nothing
here imports ``app``: the files, and the reference computations that the tests compare the
engine with (``reference_*``), are built with numpy, pandas, xarray and the standard library only,
straight from the definitions of DESIGN section 3.

The synthetic climate (per grid cell, all anomalies standardised unless stated):

* a daily land anomaly ``s`` per year, AR(1) with e-folding time ``land_tau`` days, unit variance;
* a daily weather anomaly ``w``, white noise with standard deviation ``weather_std``;
* observed value = seasonal cycle + ``coupling * s + w`` (temperature, K), or for the flux
  quantity ``FLUX_BASE * exp(FLUX_SCALE * (coupling * s + w))`` (kg m-2 s-1, positive);
* a hindcast member started on day ``t0`` sees ``s0 = s[t0 - 1] + analysis error`` of the same
  year (realistic) or of year ``(i + scramble_shift) mod n_years`` (scrambled), lets it decay as
  ``s0 * phi**d`` and adds its own weather; temperatures get a bias and a drift per lead day.

Arrays are tiny (default 8 years x 2 starts x 3 members x 28 lead days x 3 x 4 cells, float32), so
a whole case is written in a few tens of milliseconds.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

ROLES: tuple[str, ...] = ("realistic", "scrambled", "observations", "land_state")
HINDCASTS: tuple[str, ...] = ("realistic", "scrambled")
TIME_UNITS = "days since 2000-01-01"
#: K -> degC offset (common practice, CF/SI definition of the Celsius scale)
KELVIN = 273.15
#: seconds per day: 1 kg m-2 s-1 of liquid water = 86400 mm day-1 (1 kg m-2 = 1 mm; common practice)
SECONDS_PER_DAY = 86400.0
FLUX_BASE = 3.0e-5  # kg m-2 s-1, about 2.6 mm day-1
FLUX_SCALE = 0.25

#: zone boxes of the committed sample scenario at the cell edges, from sample_data/README.md
SAMPLE_BELT = "box:33.8,57.8,16.25,31.25"
SAMPLE_EAST = "box:33.8,57.8,31.25,43.75"

#: the default lead windows of DESIGN 3.2 as (label, first_day, last_day)
DEFAULT_WINDOWS: tuple[tuple[str, int, int], ...] = (
    ("week 1", 1, 7),
    ("week 2", 8, 14),
    ("week 3", 15, 21),
    ("week 4", 22, 28),
    ("weeks 3-4", 15, 28),
)

#: dim names per role: CF standard names (with standard_name attributes) or accepted aliases
CF_DIMS = {
    "init": "forecast_reference_time",
    "member": "realization",
    "lead": "forecast_period",
    "time": "time",
    "lat": "lat",
    "lon": "lon",
}
ALIAS_DIMS = {
    "init": "init",
    "member": "member",
    "lead": "lead",
    "time": "time",
    "lat": "latitude",
    "lon": "longitude",
}


@dataclass(frozen=True)
class CaseSpec:
    """Everything that decides a synthetic case; the defect knobs default to a clean case."""

    n_years: int = 8
    first_year: int = 2001
    starts: tuple[tuple[int, int], ...] = ((5, 1), (5, 16))
    members: int = 3
    members_scrambled: int | None = None  # None: same as ``members``
    n_leads: int = 28
    lat: tuple[float, ...] = (40.0, 45.0, 50.0)
    lon: tuple[float, ...] = (10.0, 12.5, 15.0, 17.5)
    variable: str = "tas"
    quantity: str = "temperature"  # or "flux" (precipitation-like, positive)
    units: str | None = None  # hindcast units; None: K (temperature) or kg m-2 s-1 (flux)
    obs_units: str | None = None  # None: same as the hindcasts; values are converted to them
    dtype: str = "float32"
    seed: int = 11
    coupling: float = 1.6
    weather_std: float = 1.0
    land_tau: float = 25.0
    analysis_error: float = 0.3
    member_noise: float = 0.8
    scramble_shift: int = 3
    bias: float = -0.5
    drift_per_day: float = 0.04
    # ---- defects ------------------------------------------------------------------------
    #: role -> units text written instead (None removes the attribute)
    units_override: Mapping[str, str | None] = field(default_factory=dict)
    #: role -> name of the data variable in that file
    variable_names: Mapping[str, str] = field(default_factory=dict)
    #: role -> degrees added to that file's latitudes (a different grid)
    lat_offset: Mapping[str, float] = field(default_factory=dict)
    #: role -> years added to every date of that file (start dates or observation days)
    year_offset: Mapping[str, int] = field(default_factory=dict)
    #: role -> dim name the file loses (the first index is kept, the dim dropped)
    drop_dim: Mapping[str, str] = field(default_factory=dict)
    #: roles whose data variable is all NaN
    all_nan: tuple[str, ...] = ()
    #: role -> (coordinate name, "swap" | "duplicate"): the first two values swapped / repeated
    coord_defect: Mapping[str, tuple[str, str]] = field(default_factory=dict)
    #: roles written as bytes that are not NetCDF at all
    not_netcdf: tuple[str, ...] = ()
    #: fraction of (start, member) pairs of both hindcasts that are missing (all NaN)
    missing_members: float = 0.0
    #: fraction of single hindcast values (start, member, lead, cell) that are NaN
    nan_values: float = 0.0
    #: fraction of observed (day, cell) values that are NaN (missing observation days)
    nan_obs: float = 0.0
    #: positions of observation days that are NaN in every cell (a day missing everywhere)
    nan_obs_days: tuple[int, ...] = ()
    #: positions of observation days left out of the file altogether (absent time steps)
    absent_obs_days: tuple[int, ...] = ()
    #: "cf" (CF dim names with standard_name/axis) or "aliases" (init, member, lead, latitude, ...)
    dim_names: str = "cf"
    #: "days" (int lead days 1..N), "days_from_zero" (0..N-1) or "hours" (24, 48, ... 24N)
    lead_encoding: str = "days"
    #: role -> (dim name, size): the data variable gains that extra dim (e.g. a height level)
    extra_dim: Mapping[str, tuple[str, int]] = field(default_factory=dict)
    #: extra data variables written into every file beside the scored one: name -> units
    extra_variables: Mapping[str, str] = field(default_factory=dict)

    def with_(self, **changes: Any) -> CaseSpec:
        return replace(self, **changes)

    @property
    def hindcast_units(self) -> str:
        if self.units is not None:
            return self.units
        return "K" if self.quantity == "temperature" else "kg m-2 s-1"

    @property
    def observation_units(self) -> str:
        return self.obs_units or self.hindcast_units

    @property
    def n_members_scrambled(self) -> int:
        return self.members_scrambled if self.members_scrambled is not None else self.members

    @property
    def years(self) -> list[int]:
        return list(range(self.first_year, self.first_year + self.n_years))


@dataclass(frozen=True)
class CasePaths:
    """The written files of a case."""

    realistic: Path
    scrambled: Path
    observations: Path
    land_state: Path
    spec: CaseSpec

    def engine_args(self, *, land: bool = False) -> tuple[Path, ...]:
        base = (self.realistic, self.scrambled, self.observations)
        return base + ((self.land_state,) if land else ())

    def cli_args(self, *, land: bool = False) -> list[str]:
        out = [
            "--realistic", str(self.realistic),
            "--scrambled", str(self.scrambled),
            "--observations", str(self.observations),
        ]
        if land:
            out += ["--land-state", str(self.land_state)]
        return out

    def path(self, role: str) -> Path:
        return Path(getattr(self, role))


@dataclass
class Truth:
    """The simulated values, float64, in the physical base units (K or kg m-2 s-1)."""

    init_dates: np.ndarray  # (n_init,) datetime64[D], year-major
    obs_dates: np.ndarray  # (n_obs,) datetime64[D]
    realistic: np.ndarray  # (n_init, member, lead, lat, lon)
    scrambled: np.ndarray
    observations: np.ndarray  # (n_obs, lat, lon)
    land_state: np.ndarray  # (n_init, lat, lon) kg m-2


def simulate(spec: CaseSpec) -> Truth:
    """The clean values of a case (deterministic for ``spec.seed``)."""
    rng = np.random.default_rng(spec.seed)
    n_y, n_s, n_l = spec.n_years, len(spec.starts), spec.n_leads
    lat, lon = np.asarray(spec.lat, float), np.asarray(spec.lon, float)
    grid = (lat.size, lon.size)
    first = min(spec.starts)
    last = max(spec.starts)
    inits = np.array(
        [np.datetime64(f"{y}-{m:02d}-{d:02d}") for y in spec.years for (m, d) in spec.starts]
    ).reshape(n_y, n_s)
    season0 = np.array([np.datetime64(f"{y}-{first[0]:02d}-{first[1]:02d}") for y in spec.years])
    season0 = season0 - np.timedelta64(1, "D")  # the day before the first start
    season_end = np.array([np.datetime64(f"{y}-{last[0]:02d}-{last[1]:02d}") for y in spec.years])
    n_days = int((season_end[0] - season0[0]) / np.timedelta64(1, "D")) + n_l
    days = season0[:, None] + np.arange(n_days).astype("timedelta64[D]")  # (year, day)

    phi = float(np.exp(-1.0 / spec.land_tau))
    land = np.empty((n_y, n_days, *grid))
    land[:, 0] = rng.standard_normal((n_y, *grid))
    for t in range(1, n_days):
        land[:, t] = phi * land[:, t - 1] + np.sqrt(1 - phi**2) * rng.standard_normal((n_y, *grid))
    weather = spec.weather_std * rng.standard_normal((n_y, n_days, *grid))

    def clim(dates: np.ndarray) -> np.ndarray:
        doy = (dates - dates.astype("datetime64[Y]")).astype(np.int64) + 1
        cycle = np.cos(2 * np.pi * (doy - 200.0) / 365.25)[..., None, None]
        if spec.quantity == "temperature":
            return 285.0 + 5.0 * cycle - 0.3 * (lat[:, None] - 45.0) + 0.0 * lon[None, :]
        return FLUX_BASE * (1.0 + 0.2 * cycle) * (1.0 + 0.0 * lat[:, None] * lon[None, :])

    def physical(base: np.ndarray, anomaly: np.ndarray) -> np.ndarray:
        if spec.quantity == "temperature":
            return base + anomaly
        return base * np.exp(FLUX_SCALE * anomaly)

    # observations: every day from the first start to the last start + n_leads - 1
    obs_days = days[:, 1:]
    observations = physical(clim(obs_days), spec.coupling * land[:, 1:] + weather[:, 1:])

    start_index = ((inits - season0[:, None]) / np.timedelta64(1, "D")).astype(np.int64)
    yi = np.arange(n_y)[:, None]
    land0 = land[yi, start_index - 1]  # (year, start, lat, lon): the day before each start
    error = spec.analysis_error * rng.standard_normal((n_y, n_s, 1, *grid))
    lead = np.arange(1, n_l + 1)
    valid = start_index[:, :, None] + lead - 1  # (year, start, lead) index into days
    base = clim(days[yi[:, :, None], valid])[:, :, None]  # (year, start, 1, lead, lat, lon)
    hindcasts = {}
    for name, n_mem, source in (
        ("realistic", spec.members, np.arange(n_y)),
        ("scrambled", spec.n_members_scrambled, (np.arange(n_y) + spec.scramble_shift) % n_y),
    ):
        s0 = land0[source][:, :, None] + error + 0.1 * rng.standard_normal((n_y, n_s, n_mem, *grid))
        decay = phi ** lead[:, None, None]
        s = s0[:, :, :, None] * decay  # (year, start, member, lead, lat, lon)
        noise = spec.member_noise * rng.standard_normal((n_y, n_s, n_mem, n_l, *grid))
        anomaly = spec.coupling * s + noise
        values = physical(base, anomaly)
        if spec.quantity == "temperature":
            values = values + spec.bias + spec.drift_per_day * lead[:, None, None]
        hindcasts[name] = values.reshape(n_y * n_s, n_mem, n_l, *grid)
    land_state = 100.0 * np.exp(0.2 * land0).reshape(n_y * n_s, *grid)
    return Truth(
        init_dates=inits.reshape(-1),
        obs_dates=obs_days.reshape(-1),
        realistic=hindcasts["realistic"],
        scrambled=hindcasts["scrambled"],
        observations=observations.reshape(-1, *grid),
        land_state=land_state,
    )


def to_units(values: np.ndarray, *, quantity: str, units: str) -> np.ndarray:
    """Values from the base units (K or kg m-2 s-1) to ``units``, with explicit constants."""
    if quantity == "temperature":
        table = {"K": (1.0, 0.0), "degC": (1.0, -KELVIN), "degree_Celsius": (1.0, -KELVIN)}
    else:
        table = {"kg m-2 s-1": (1.0, 0.0), "mm day-1": (SECONDS_PER_DAY, 0.0), "mm/day": (SECONDS_PER_DAY, 0.0)}
    if units not in table:  # a defect unit: values stay as they are
        return values
    scale, offset = table[units]
    return values * scale + offset


def _coords(spec: CaseSpec, role: str, truth: Truth) -> dict[str, xr.DataArray]:
    names = CF_DIMS if spec.dim_names == "cf" else ALIAS_DIMS
    cf = spec.dim_names == "cf"
    lat = np.asarray(spec.lat, float) + spec.lat_offset.get(role, 0.0)
    lon = np.asarray(spec.lon, float)
    out = {
        names["lat"]: xr.DataArray(
            lat, dims=names["lat"],
            attrs={"standard_name": "latitude", "units": "degrees_north", "axis": "Y"} if cf
            else {"units": "degrees_north"},
        ),
        names["lon"]: xr.DataArray(
            lon, dims=names["lon"],
            attrs={"standard_name": "longitude", "units": "degrees_east", "axis": "X"} if cf
            else {"units": "degrees_east"},
        ),
    }
    years = spec.year_offset.get(role, 0)
    if role == "observations":
        dates = _add_years(truth.obs_dates, years)
        out[names["time"]] = xr.DataArray(
            dates.astype("datetime64[ns]"), dims=names["time"],
            attrs={"standard_name": "time", "axis": "T"} if cf else {},
        )
        return out
    dates = _add_years(truth.init_dates, years)
    out[names["init"]] = xr.DataArray(
        dates.astype("datetime64[ns]"), dims=names["init"],
        attrs={"standard_name": "forecast_reference_time"} if cf else {},
    )
    if role in HINDCASTS:
        n_mem = spec.members if role == "realistic" else spec.n_members_scrambled
        out[names["member"]] = xr.DataArray(
            np.arange(n_mem, dtype=np.int32), dims=names["member"],
            attrs={"standard_name": "realization"} if cf else {},
        )
        lead = np.arange(1, spec.n_leads + 1, dtype=np.int32)
        lead_units = "days"
        if spec.lead_encoding == "days_from_zero":
            lead = lead - 1
        elif spec.lead_encoding == "hours":
            lead, lead_units = lead * 24, "hours"
        out[names["lead"]] = xr.DataArray(
            lead, dims=names["lead"],
            attrs={"standard_name": "forecast_period", "units": lead_units} if cf
            else {"units": lead_units},
        )
    return out


def _add_years(dates: np.ndarray, years: int) -> np.ndarray:
    if not years:
        return dates
    shifted = pd.DatetimeIndex(dates.astype("datetime64[ns]")) + pd.DateOffset(years=years)
    return shifted.values.astype("datetime64[D]")


def build_datasets(spec: CaseSpec, truth: Truth | None = None) -> dict[str, xr.Dataset]:
    """The four datasets of a case, defects applied (``not_netcdf`` aside)."""
    truth = truth or simulate(spec)
    names = CF_DIMS if spec.dim_names == "cf" else ALIAS_DIMS
    rng = np.random.default_rng(spec.seed + 1)
    out: dict[str, xr.Dataset] = {}
    for role in ROLES:
        coords = _coords(spec, role, truth)
        if role in HINDCASTS:
            dims = tuple(names[k] for k in ("init", "member", "lead", "lat", "lon"))
            values = to_units(getattr(truth, role), quantity=spec.quantity, units=spec.hindcast_units)
            values = values.copy()
            if spec.missing_members > 0:
                gone = rng.random(values.shape[:2]) < spec.missing_members
                values[gone] = np.nan
            if spec.nan_values > 0:
                values[rng.random(values.shape) < spec.nan_values] = np.nan
            units = spec.hindcast_units
            var = spec.variable
        elif role == "observations":
            dims = (names["time"], names["lat"], names["lon"])
            values = to_units(truth.observations, quantity=spec.quantity, units=spec.observation_units)
            values = values.copy()
            if spec.nan_obs > 0:
                values[rng.random(values.shape) < spec.nan_obs] = np.nan
            values[list(spec.nan_obs_days)] = np.nan
            units = spec.observation_units
            var = spec.variable
        else:
            dims = (names["init"], names["lat"], names["lon"])
            values = truth.land_state.copy()
            units = "kg m-2"
            var = "mrsos"
        if role in spec.all_nan:
            values = np.full_like(values, np.nan)
        var = spec.variable_names.get(role, var)
        attrs: dict[str, Any] = {"long_name": f"synthetic {role} values"}
        if spec.dim_names == "cf" and role != "land_state" and spec.quantity == "temperature":
            attrs["standard_name"] = "air_temperature"
        units = spec.units_override.get(role, units) if role in spec.units_override else units
        if units is not None:
            attrs["units"] = units
        data = {var: xr.DataArray(values.astype(spec.dtype), dims=dims, attrs=attrs)}
        for extra, extra_units in spec.extra_variables.items():
            data[extra] = xr.DataArray(
                np.zeros(values.shape, dtype=spec.dtype), dims=dims, attrs={"units": extra_units}
            )
        ds = xr.Dataset(data, coords=coords, attrs={"Conventions": "CF-1.8", "title": f"synthetic {role}"})
        if role == "observations" and spec.absent_obs_days:
            keep = np.setdiff1d(np.arange(ds.sizes[names["time"]]), spec.absent_obs_days)
            ds = ds.isel({names["time"]: keep})
        if role in spec.extra_dim:
            dim, size = spec.extra_dim[role]
            ds[var] = ds[var].expand_dims({dim: np.arange(size, dtype=np.float64)}, axis=1)
        if role in spec.drop_dim:
            ds = ds.isel({spec.drop_dim[role]: 0}, drop=True)
        if role in spec.coord_defect:
            name, how = spec.coord_defect[role]
            v = ds[name].values.copy()
            if how == "swap":
                v[[0, 1]] = v[[1, 0]]
            elif how == "duplicate":
                v[1] = v[0]
            else:
                raise ValueError(f"unknown coordinate defect {how!r}")
            ds = ds.assign_coords({name: (name, v, ds[name].attrs)})
        out[role] = ds
    return out


def write_case(directory: str | Path, spec: CaseSpec | None = None, **changes: Any) -> CasePaths:
    """Write the four files of ``spec`` (with ``changes``) into ``directory``; their paths."""
    spec = (spec or CaseSpec()).with_(**changes) if changes else (spec or CaseSpec())
    d = Path(directory)
    d.mkdir(parents=True, exist_ok=True)
    datasets = build_datasets(spec)
    paths: dict[str, Path] = {}
    for role, ds in datasets.items():
        path = d / f"{role}.nc"
        if role in spec.not_netcdf:
            path.write_text("this is a plain text file, not NetCDF\n" * 4)
        else:
            encoding: dict[str, dict[str, Any]] = {
                str(v): {"_FillValue": np.float32(np.nan) if spec.dtype == "float32" else np.nan}
                for v in ds.data_vars
            }
            for c in ds.coords:
                if ds[c].dtype.kind == "M":
                    encoding[str(c)] = {"units": TIME_UNITS, "calendar": "standard", "dtype": "int32"}
                else:
                    encoding[str(c)] = {"_FillValue": None}
            ds.to_netcdf(path, engine="netcdf4", encoding=encoding)
        paths[role] = path
    return CasePaths(spec=spec, **paths)


# ------------------------------------------------------------------------------------------
# Reference computations (DESIGN section 3 from first principles, xarray/pandas/numpy only)


def window_tuples(windows: Sequence[Any] | None) -> list[tuple[str, int, int]]:
    """``(label, first, last)`` from tuples or ``{"label", "first_day", "last_day"}`` dicts."""
    if windows is None:
        return list(DEFAULT_WINDOWS)
    out = []
    for w in windows:
        if isinstance(w, Mapping):
            out.append((str(w["label"]), int(w["first_day"]), int(w["last_day"])))
        else:
            out.append((str(w[0]), int(w[1]), int(w[2])))
    return out


def _hindcast_windows(
    path: Path, *, variable: str, windows: list[tuple[str, int, int]], members: Sequence[int] | None
) -> xr.DataArray:
    with xr.open_dataset(path) as ds:
        da = ds[variable].astype("float64").load()
    if members is not None:
        da = da.isel(realization=list(members))
    ens = da.mean("realization", skipna=True)  # ensemble mean (NaN-aware)
    per_window = [
        ens.sel(forecast_period=slice(first, last)).mean("forecast_period", skipna=True)
        for _, first, last in windows
    ]
    return xr.concat(per_window, dim=pd.Index([w[0] for w in windows], name="window"))


def _observed_windows(
    path: Path, inits: np.ndarray, *, variable: str, windows: list[tuple[str, int, int]],
    scale: float = 1.0, offset: float = 0.0,
) -> xr.DataArray:
    with xr.open_dataset(path) as ds:
        obs = ds[variable].astype("float64").load() * scale + offset
    per_window = []
    for _, first, last in windows:
        # valid date of lead day d = init + d - 1
        lead_days = np.arange(first, last + 1)
        valid = inits.astype("datetime64[D]")[:, None] + (lead_days - 1).astype("timedelta64[D]")
        picked = obs.sel(
            time=xr.DataArray(valid.astype("datetime64[ns]"), dims=("forecast_reference_time", "day"))
        )
        per_window.append(picked.mean("day", skipna=True))
    out = xr.concat(per_window, dim=pd.Index([w[0] for w in windows], name="window"))
    return out.assign_coords(forecast_reference_time=inits.astype("datetime64[ns]"))


def _by_year_and_slot(da: xr.DataArray) -> xr.DataArray:
    t = pd.DatetimeIndex(da["forecast_reference_time"].values)
    da = da.assign_coords(
        year=("forecast_reference_time", np.asarray(t.year)),
        slot=("forecast_reference_time", np.asarray(t.strftime("%m-%d"))),
    )
    return da.set_index(forecast_reference_time=["year", "slot"]).unstack("forecast_reference_time")


def leave_one_year_out(da: xr.DataArray) -> xr.DataArray:
    """Anomalies against the mean over the *other* years, per (slot, window, cell), by a loop."""
    years = da["year"].values
    clim = xr.concat(
        [da.drop_sel(year=y).mean("year", skipna=True) for y in years],
        dim=pd.Index(years, name="year"),
    )
    return da - clim


def reference_anomalies(
    paths: CasePaths,
    *,
    windows: Sequence[Any] | None = None,
    members_realistic: Sequence[int] | None = None,
    members_scrambled: Sequence[int] | None = None,
    obs_scale: float = 1.0,
    obs_offset: float = 0.0,
) -> xr.Dataset:
    """Anomalies ``(year, slot, window, lat, lon)`` of both hindcasts and the observations.

    Ensemble mean over members, window means over lead days, observed window means on valid
    date = init + lead day - 1, then leave-one-year-out anomalies per start calendar day. Files
    of the case use CF dim names (``dim_names="cf"``).
    """
    spec = paths.spec
    wins = window_tuples(windows)
    var = spec.variable
    x1 = _hindcast_windows(paths.realistic, variable=spec.variable_names.get("realistic", var),
                           windows=wins, members=members_realistic)
    x2 = _hindcast_windows(paths.scrambled, variable=spec.variable_names.get("scrambled", var),
                           windows=wins, members=members_scrambled)
    x1, x2 = xr.align(x1, x2, join="inner")
    inits = x1["forecast_reference_time"].values
    y = _observed_windows(paths.observations, inits, variable=spec.variable_names.get("observations", var),
                          windows=wins, scale=obs_scale, offset=obs_offset)
    out = {}
    for name, da in (("realistic", x1), ("scrambled", x2), ("observed", y)):
        out[name] = leave_one_year_out(_by_year_and_slot(da)).transpose("year", "slot", "window", "lat", "lon")
    return xr.Dataset(out)


def paired(ds: xr.Dataset) -> xr.Dataset:
    """The anomalies where all three are finite (both experiments scored on the same samples)."""
    ok = np.isfinite(ds["realistic"]) & np.isfinite(ds["scrambled"]) & np.isfinite(ds["observed"])
    return ds.where(ok)


def coslat_weights(lat: np.ndarray, lon: np.ndarray, mask: np.ndarray | None = None) -> xr.DataArray:
    """cos(latitude) weights on ``(lat, lon)``, zero outside ``mask``."""
    w = np.cos(np.deg2rad(np.asarray(lat, float)))[:, None] * np.ones((1, len(lon)))
    if mask is not None:
        w = np.where(mask, w, 0.0)
    return xr.DataArray(w, dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
