"""Open and validate CF hindcasts, observations and land states (NetCDF files or Zarr stores).

A :class:`Source` wraps one opened file: it finds the dims from CF ``standard_name``/``axis``
attributes (through cf-xarray), then from the accepted aliases of DESIGN section 2; checks
coordinates (monotonic, unique, dates decodable) and units; and reads spatial tiles in the
canonical dim order, converted to the units asked for. Data are read tile by tile from disk, so
nothing here loads a whole variable.

Lead days: an integer ``forecast_period`` with units of days or hours is taken as the lead day
``d >= 1`` (the d-th day after initialisation, valid date = init date + d - 1). A timedelta
``forecast_period`` is taken as the end of each daily-mean interval (1 day -> lead day 1), or,
when it starts at 0, as the start of each interval (0 days -> lead day 1).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import cf_xarray  # noqa: F401  (registers the .cf accessor)
import numpy as np
import xarray as xr
from numpy.typing import NDArray

from app.cube.units import Conversion, parse_units
from app.errors import InputError
from app.stats.resample import MIN_YEAR_BLOCKS

ROLES: tuple[str, ...] = ("hindcast", "observations", "land_state")
Role = Literal["hindcast", "observations", "land_state"]

INIT, MEMBER, LEAD, TIME, LAT, LON = (
    "forecast_reference_time",
    "realization",
    "forecast_period",
    "time",
    "lat",
    "lon",
)
#: canonical dim -> (CF standard names, accepted names)
DIM_RULES: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    INIT: (("forecast_reference_time",), ("forecast_reference_time", "init", "time")),
    MEMBER: (("realization",), ("realization", "member", "number")),
    LEAD: (("forecast_period",), ("forecast_period", "lead", "step")),
    TIME: (("time",), ("time", "valid_time")),
    LAT: (("latitude",), ("lat", "latitude")),
    LON: (("longitude",), ("lon", "longitude")),
}
ROLE_DIMS: dict[str, tuple[str, ...]] = {
    "hindcast": (INIT, MEMBER, LEAD, LAT, LON),
    "observations": (TIME, LAT, LON),
    "land_state": (INIT, LAT, LON),
}
GRID_TOLERANCE = 1e-5
MIN_YEARS = MIN_YEAR_BLOCKS


@dataclass
class Source:
    """One opened data file in canonical form (see module docstring)."""

    path: str
    role: str
    variable: str
    dims: dict[str, str]  # canonical -> name in the file
    units: str
    dataset: xr.Dataset = field(repr=False)
    lat: NDArray[np.float64] = field(repr=False)
    lon: NDArray[np.float64] = field(repr=False)
    init_dates: NDArray[np.datetime64] | None = field(default=None, repr=False)
    lead_days: NDArray[np.int64] | None = field(default=None, repr=False)
    members: int | None = None
    dates: NDArray[np.datetime64] | None = field(default=None, repr=False)
    warnings: list[str] = field(default_factory=list)
    #: the variable asked for when the file lacked it and its only variable stands in
    substitutes: str | None = None

    @property
    def name(self) -> str:
        return Path(self.path).name

    @property
    def shape(self) -> dict[str, int]:
        return {c: int(self.dataset.sizes[d]) for c, d in self.dims.items()}

    def read(
        self,
        *,
        lat: slice = slice(None),
        lon: slice = slice(None),
        convert: Conversion | None = None,
        members: NDArray[np.int64] | None = None,
    ) -> NDArray[np.floating]:
        """A tile in canonical dim order (ROLE_DIMS), read from disk now.

        Without ``convert`` the values keep their decoded floating dtype (float32 data stay
        float32, halving the working set); with it they come back as converted float64.
        """
        da = self.dataset[self.variable]
        index: dict[str, Any] = {self.dims[LAT]: lat, self.dims[LON]: lon}
        if members is not None:
            index[self.dims[MEMBER]] = members
        tile = da.isel(index).transpose(*(self.dims[c] for c in ROLE_DIMS[self.role]))
        values = np.asarray(tile.values)
        if values.dtype.kind != "f":
            values = values.astype(np.float64)
        return values if convert is None else convert.apply(values)

    def close(self) -> None:
        self.dataset.close()


def open_dataset_file(path: str | Path) -> xr.Dataset:
    """Open a NetCDF file or a Zarr directory store lazily (no data are read)."""
    p = Path(path)
    if not p.exists():
        raise InputError("does not exist", file=str(path))
    try:
        if p.is_dir():
            return xr.open_zarr(p, chunks=None, decode_timedelta=False)
        return xr.open_dataset(p, chunks=None, decode_timedelta=False, cache=False)
    except InputError:
        raise
    except Exception as exc:  # the backends raise many types for unreadable files
        raise InputError(f"cannot be read as NetCDF or Zarr ({type(exc).__name__}: {exc})", file=p.name) from exc


def open_source(path: str | Path, *, role: str, variable: str | None = None) -> Source:
    """Open and validate one file for ``role``; raise InputError naming file, variable, problem."""
    if role not in ROLES:
        raise InputError(f"unknown role {role!r}; choose one of {', '.join(ROLES)}", file=Path(path).name)
    ds = open_dataset_file(path)
    name = Path(path).name
    try:
        dims = _find_dims(ds, role=role, file=name)
        var = _pick_variable(ds, dims=dims, role=role, variable=variable, file=name)
        src = Source(
            path=str(path),
            role=role,
            variable=var,
            dims=dims,
            units="",
            dataset=ds,
            lat=_grid_axis(ds, dims[LAT], file=name),
            lon=_grid_axis(ds, dims[LON], file=name),
        )
        parse_units(ds[var].attrs.get("units"), file=name, variable=var)
        src.units = str(ds[var].attrs["units"])
        if role in ("hindcast", "land_state"):
            src.init_dates = _dates(ds, dims[INIT], file=name, what="forecast_reference_time")
            years = np.unique(src.init_dates.astype("datetime64[Y]"))
            if years.size < MIN_YEARS:
                raise InputError(
                    f"has {years.size} year(s) of start dates; at least {MIN_YEARS} are needed",
                    file=name,
                    variable=var,
                )
        if role == "hindcast":
            src.lead_days = _lead_days(ds, dims[LEAD], file=name)
            src.members = int(ds.sizes[dims[MEMBER]])
        if role == "observations":
            src.dates = _dates(ds, dims[TIME], file=name, what="time")
        return src
    except Exception:
        ds.close()
        raise


def check_not_all_nan(src: Source, *, tile_cells: int = 4096) -> None:
    """Read the variable tile by tile; InputError if it holds no finite value at all."""
    n_lat, n_lon = src.lat.size, src.lon.size
    rows = max(1, tile_cells // max(1, n_lon))
    for i in range(0, n_lat, rows):
        if np.isfinite(src.read(lat=slice(i, i + rows))).any():
            return
    raise InputError("holds no finite value (all NaN or all missing)", file=src.name, variable=src.variable)


def describe_dataset(path: str | Path, *, role: str, variable: str | None = None) -> dict[str, Any]:
    """JSON-able summary of a validated file (what ``GET /v1/datasets/{id}`` shows)."""
    src = open_source(path, role=role, variable=variable)
    try:
        check_not_all_nan(src)
        ds = src.dataset
        data_vars = [str(v) for v in ds.data_vars]
        out: dict[str, Any] = {
            "role": role,
            "variables": data_vars,
            "variable": src.variable,
            "dims": {c: n for c, n in src.shape.items()},
            "units": src.units,
            "grid": _grid_summary(src),
            "warnings": list(src.warnings),
        }
        if src.init_dates is not None:
            out["init_dates"] = [str(d) for d in src.init_dates.astype("datetime64[D]")]
        if src.lead_days is not None:
            out["lead_days"] = [int(d) for d in src.lead_days]
        if src.members is not None:
            out["members"] = src.members
        if src.dates is not None:
            out["time_range"] = [str(src.dates[0]), str(src.dates[-1])]
        return out
    finally:
        src.close()


def same_grid(a: Source, b: Source) -> None:
    """InputError unless ``b`` is on the grid of ``a``."""
    for axis, va, vb in ((LAT, a.lat, b.lat), (LON, a.lon, b.lon)):
        if va.shape != vb.shape or not np.allclose(va, vb, atol=GRID_TOLERANCE, rtol=0.0):
            raise InputError(
                f"{axis} grid ({_axis_text(vb)}) differs from the grid of {a.name} ({_axis_text(va)})",
                file=b.name,
                variable=b.variable,
            )


def _axis_text(v: NDArray[np.float64]) -> str:
    return f"{v.size} points {v[0]:g}..{v[-1]:g}" if v.size else "empty"


def _grid_summary(src: Source) -> dict[str, Any]:
    def axis(v: NDArray[np.float64]) -> dict[str, Any]:
        step = float(np.median(np.diff(v))) if v.size > 1 else None
        return {"size": int(v.size), "first": float(v[0]), "last": float(v[-1]), "step": step}

    return {"lat": axis(src.lat), "lon": axis(src.lon)}


def _find_dims(ds: xr.Dataset, *, role: str, file: str) -> dict[str, str]:
    found: dict[str, str] = {}
    by_standard: dict[str, list[str]] = {}
    for name in ds.variables:
        sn = ds[name].attrs.get("standard_name")
        if sn and name in ds.dims:
            by_standard.setdefault(str(sn), []).append(str(name))
    axes = {k: [str(v) for v in vals] for k, vals in ds.cf.axes.items()}
    for canon in ROLE_DIMS[role]:
        standard, aliases = DIM_RULES[canon]
        candidates = [n for s in standard for n in by_standard.get(s, [])]
        if not candidates and canon in (LAT, LON):
            candidates = [n for n in axes.get("Y" if canon == LAT else "X", []) if n in ds.dims]
        if not candidates:
            candidates = [a for a in aliases if a in ds.dims]
        candidates = [c for c in candidates if c not in found.values()]
        if not candidates:
            raise InputError(
                f"has no {canon} dimension (looked for standard_name {'/'.join(standard)} "
                f"and names {', '.join(aliases)}; dims present: {', '.join(map(str, ds.dims)) or 'none'})",
                file=file,
            )
        found[canon] = candidates[0]
    return found


def _pick_variable(
    ds: xr.Dataset, *, dims: dict[str, str], role: str, variable: str | None, file: str
) -> str:
    need = {dims[c] for c in ROLE_DIMS[role]}
    fitting = [str(v) for v in ds.data_vars if need <= set(map(str, ds[v].dims))]
    if variable is not None:
        if variable not in ds.data_vars:
            raise InputError(
                f"has no variable {variable!r}; variables present: {', '.join(map(str, ds.data_vars)) or 'none'}",
                file=file,
                variable=variable,
            )
        if variable not in fitting:
            raise InputError(
                f"has dims {tuple(map(str, ds[variable].dims))}, but a {role} needs {tuple(dims[c] for c in ROLE_DIMS[role])}",
                file=file,
                variable=variable,
            )
        extra = set(map(str, ds[variable].dims)) - need
        if extra:
            raise InputError(f"has extra dims {sorted(extra)}; select one level first", file=file, variable=variable)
        return variable
    if len(fitting) == 1:
        extra = set(map(str, ds[fitting[0]].dims)) - need
        if extra:
            raise InputError(f"has extra dims {sorted(extra)}; select one level first", file=file, variable=fitting[0])
        return fitting[0]
    if not fitting:
        raise InputError(
            f"has no variable on the {role} dims {tuple(dims[c] for c in ROLE_DIMS[role])}",
            file=file,
        )
    raise InputError(
        f"has several {role} variables ({', '.join(fitting)}); name the one to score",
        file=file,
    )


def _grid_axis(ds: xr.Dataset, name: str, *, file: str) -> NDArray[np.float64]:
    v = np.asarray(ds[name].values, dtype=np.float64)
    _monotonic(v, name=name, file=file)
    return v


def _monotonic(v: NDArray[Any], *, name: str, file: str) -> None:
    if v.size < 1:
        raise InputError(f"coordinate {name!r} is empty", file=file)
    if v.size > 1:
        d = np.diff(v.astype(np.float64) if v.dtype.kind != "M" else v.astype("datetime64[s]").astype(np.int64))
        if np.any(d == 0):
            raise InputError(f"coordinate {name!r} has duplicated values", file=file)
        if not (np.all(d > 0) or np.all(d < 0)):
            raise InputError(f"coordinate {name!r} is not monotonic", file=file)


def _dates(ds: xr.Dataset, name: str, *, file: str, what: str) -> NDArray[np.datetime64]:
    values = ds[name].values
    if values.dtype.kind != "M":
        raise InputError(
            f"coordinate {name!r} ({what}) is not decodable as standard-calendar dates "
            f"(dtype {values.dtype}); give CF time units such as 'days since 2000-01-01'",
            file=file,
        )
    days = values.astype("datetime64[D]")
    _monotonic(days, name=name, file=file)
    if np.any(np.diff(days.astype(np.int64)) < 0):
        raise InputError(f"coordinate {name!r} must increase", file=file)
    return days


def _lead_days(ds: xr.Dataset, name: str, *, file: str) -> NDArray[np.int64]:
    coord = ds[name]
    raw = coord.values
    if raw.dtype.kind == "m":
        days = raw / np.timedelta64(1, "D")
        base = 1 if np.nanmin(days) == 0 else 0
    else:
        units = str(coord.attrs.get("units", "days")).split(" since ")[0].strip().lower()
        per_day = {"days": 1.0, "day": 1.0, "d": 1.0, "hours": 24.0, "hour": 24.0, "h": 24.0}
        if units not in per_day:
            raise InputError(
                f"coordinate {name!r} has units {units!r}; use days or hours", file=file
            )
        days = np.asarray(raw, dtype=np.float64) / per_day[units]
        base = 1 if np.nanmin(days) == 0 else 0
    if not np.allclose(days, np.round(days)):
        raise InputError(f"coordinate {name!r} holds fractional days; daily means are needed", file=file)
    lead = np.round(days).astype(np.int64) + base
    _monotonic(lead, name=name, file=file)
    if lead.size > 1 and lead[1] < lead[0]:
        raise InputError(f"coordinate {name!r} must increase (lead days run {lead[0]}..{lead[-1]})", file=file)
    if lead[0] < 1:
        raise InputError(f"coordinate {name!r} starts at lead day {lead[0]}; lead days start at 1", file=file)
    return lead
