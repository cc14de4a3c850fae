"""Write a synthetic CF hindcast pair, observations and land state of a requested size, streaming.

The files follow the conventions of the sample scenario (``sample_data/README.md``) and DESIGN
section 2, in float32 and uncompressed, so that reading them costs what their bytes cost:

``realistic.nc``, ``scrambled.nc``
    ``tas(forecast_reference_time, realization, forecast_period, lat, lon)`` float32, K.
``observations.nc``
    ``tas(time, lat, lon)`` float32, K: every valid date the hindcasts need.
``land_state.nc``
    ``mrsos(forecast_reference_time, lat, lon)`` float32, kg m-2.

Coordinates: ``forecast_reference_time`` and ``time`` as ``days since 1950-01-01`` (standard
calendar); ``realization`` 0..M-1; ``forecast_period`` int32 lead days 1..N with ``units =
"days"``; ``lat``/``lon`` ascending (axis Y/X, CF standard names).

Layout. Every variable is chunked along space only: one chunk holds every start date, member and
lead day of one latitude row and a run of ``lon_chunk`` longitudes (``(n_init, n_member, n_lead,
1, lon_chunk)``; ``(n_time, 1, lon_chunk)`` for the observations), ``lon_chunk`` the most
longitudes whose hindcast chunk stays within 16 MiB, evened out over the row (33 of 98 for the
4 GiB case: 3 chunks of 14.6 MB per row; the whole row for the smaller cases). The engine's tile reads (whole init, member and lead; a band
of rows or a run of one row) therefore read whole chunks, each of them landing in the tile as
runs of 33 values. Measured on the 4 GiB case (warm cache; netCDF-C's default 64 MiB chunk cache;
``tas[:, :, :, i:i+r, :]`` for bands of r = 1 and 4 rows): whole-row chunks of 43 MB, which go
through the chunk cache, 1.0 GiB/s; 11-22 MB chunks 1.6-2.5 GiB/s; 5 MB chunks 0.9-1.6 GiB/s. On
a 1 GiB case, one chunk per start date (a common layout of hindcast files) read single rows at
0.6 GiB/s and runs of 20 cells at 0.17 GiB/s, a contiguous layout 0.5 and 0.16 GiB/s. ``--zarr``
writes Zarr directory stores (Zarr format 3, consolidated metadata) with the same chunks,
uncompressed.

Streaming. The files are written one latitude row at a time (netCDF4 hyperslab writes, or xarray
``to_zarr(region=...)``): the largest array in memory is one row of one hindcast
(``n_init * n_member * n_lead * n_lon`` float32), never a whole variable. Each row's values come
from a random stream seeded by ``(seed, row)``, so the output does not depend on how it is
written.

The synthetic climate (per cell; invented, no real data behind it): a land anomaly ``s`` per year
(unit variance: 0.8 x a pattern constant over blocks of 8 x 8 cells + 0.6 x a cell's own normal
noise, so that regional means vary from year to year as they do in real fields), a coupling
``c`` (0.2-0.8 K, growing eastward), a seasonal cycle in day of year colder to the north.
Observed ``tas = cycle + c * s + 1.2 K * storm + 1.5 K * noise``, the storm term constant over
5 days and over the 8 x 8 cell blocks (unpredictable large-scale weather). A hindcast member started
in year i: ``cycle(valid date) - 0.4 K + 0.02 K * lead + c * s0 * exp(-lead / 30) + 1.5 K *
noise``, where ``s0`` is year i's anomaly plus analysis error (realistic) or year (i + 7) mod Y's
(scrambled). Land state: ``mrsos = 150 + 40 * s`` kg m-2 at each start.

Usage::

    .venv/bin/python benchmarks/synthetic_pair.py --out DIR --size 4GiB [--zarr]
    .venv/bin/python benchmarks/synthetic_pair.py --out DIR --lat 10 --lon 20 --years 15

prints ONE JSON line (paths, dims, bytes, seconds). From Python: :func:`write_pair`.
"""

from __future__ import annotations

import argparse
import json
import math
import re
import sys
import time
import warnings
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

FIRST_YEAR = 1961
TIME_UNITS = "days since 1950-01-01"
EPOCH = np.datetime64("1950-01-01", "D")
CHUNK_TARGET = 16 << 20  # most bytes of one hindcast chunk
SCRAMBLE_SHIFT = 7
PATTERN_CELLS = 8
ROLES = ("realistic", "scrambled", "observations", "land_state")


@dataclass(frozen=True)
class Layout:
    """Dimensions of a synthetic case."""

    years: int = 30
    starts: int = 8  # weekly from 1 May
    members: int = 10
    leads: int = 46
    n_lat: int = 50
    n_lon: int = 100

    @property
    def n_init(self) -> int:
        return self.years * self.starts

    @property
    def n_cells(self) -> int:
        return self.n_lat * self.n_lon

    @property
    def season_days(self) -> int:
        """Observed days per year: first start to last start + last lead day."""
        return 7 * (self.starts - 1) + self.leads

    def hindcast_bytes(self) -> int:
        return 4 * self.n_init * self.members * self.leads * self.n_cells

    def total_bytes(self, *, land_state: bool = True) -> int:
        obs = 4 * self.years * self.season_days * self.n_cells
        land = 4 * self.n_init * self.n_cells if land_state else 0
        return 2 * self.hindcast_bytes() + obs + land

    def lon_chunk(self) -> int:
        per_cell = 4 * self.n_init * self.members * self.leads
        widest = max(1, min(self.n_lon, CHUNK_TARGET // per_cell))
        return -(-self.n_lon // -(-self.n_lon // widest))  # equal chunks: little padding at the end


_SIZE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*([KMGT]i?B?|B)?\s*$", re.IGNORECASE)


def parse_size(text: str) -> int:
    """``"4GiB"``, ``"512MiB"``, ``"1.5G"`` or a byte count -> bytes (binary multiples)."""
    m = _SIZE.match(text)
    if not m:
        raise ValueError(f"size {text!r} is not a size such as '512MiB' or '4GiB'")
    unit = (m[2] or "B").upper().rstrip("B").rstrip("I")
    return int(float(m[1]) * {"": 1, "K": 2**10, "M": 2**20, "G": 2**30, "T": 2**40}[unit])


def layout_for_size(size: int, **dims: int) -> Layout:
    """The layout with the given time dims whose files total at least ``size`` bytes.

    The grid is about twice as wide as it is tall.
    """
    base = Layout(**dims, n_lat=1, n_lon=1)
    cells = max(1, math.ceil(size / base.total_bytes()))
    n_lat = max(1, round(math.sqrt(cells / 2)))
    n_lon = max(1, math.ceil(cells / n_lat))
    return Layout(**dims, n_lat=n_lat, n_lon=n_lon)


def _axes(lay: Layout) -> dict[str, NDArray[Any]]:
    lat_step = min(1.0, 150.0 / lay.n_lat)
    lon_step = min(1.0, 359.0 / lay.n_lon)
    years = FIRST_YEAR + np.arange(lay.years)
    first = np.array([f"{y}-05-01" for y in years], dtype="datetime64[D]")
    init = (first[:, None] + 7 * np.arange(lay.starts)[None, :]).ravel()
    time_ = (first[:, None] + np.arange(lay.season_days)[None, :]).ravel()
    return {
        "lat": max(-75.0, 45.0 - lat_step * lay.n_lat / 2) + lat_step * (np.arange(lay.n_lat) + 0.5),
        "lon": lon_step * np.arange(lay.n_lon) + lon_step / 2,
        "init": init,
        "time": time_,
        "lead": np.arange(1, lay.leads + 1, dtype=np.int32),
        "member": np.arange(lay.members, dtype=np.int32),
    }


def _cycle(dates: NDArray[np.datetime64], lat: float) -> NDArray[np.float32]:
    doy = (dates - dates.astype("datetime64[Y]")).astype(np.int64)
    return (288.0 - 0.4 * (lat - 45.0) + 9.0 * np.cos(2 * np.pi * (doy - 200) / 365.25)).astype(np.float32)


def _row(lay: Layout, axes: dict[str, NDArray[Any]], i: int, seed: int) -> dict[str, NDArray[np.float32]]:
    """Every file's values of latitude row ``i`` (see the module docstring)."""
    rng = np.random.default_rng([seed, i])
    Y, S, M, L, X = lay.years, lay.starts, lay.members, lay.leads, lay.n_lon
    lat = float(axes["lat"][i])
    coupling = np.linspace(0.2, 0.8, X, dtype=np.float32)
    blocks = (lay.n_lat // PATTERN_CELLS + 1, lay.n_lon // PATTERN_CELLS + 1)
    shared = np.random.default_rng([seed, 1 << 30])  # the same large-scale patterns for every row
    pattern = shared.standard_normal((Y, *blocks), dtype=np.float32)
    storms = shared.standard_normal((Y * lay.season_days // 5 + 1, *blocks), dtype=np.float32)
    block = np.arange(X) // PATTERN_CELLS
    land = 0.8 * pattern[:, i // PATTERN_CELLS, block]
    land += 0.6 * rng.standard_normal((Y, X), dtype=np.float32)
    err = 0.3 * rng.standard_normal((Y, S, X), dtype=np.float32)
    days = np.arange(Y * lay.season_days)
    obs = rng.standard_normal((Y * lay.season_days, X), dtype=np.float32)
    obs *= 1.5
    obs += 1.2 * storms[days // 5][:, i // PATTERN_CELLS, block]
    obs += _cycle(axes["time"], lat)[:, None]
    obs += coupling * np.repeat(land, lay.season_days, axis=0)
    valid = axes["init"][:, None] + (axes["lead"].astype(np.int64) - 1)[None, :]
    base = _cycle(valid.ravel(), lat).reshape(Y * S, L) - 0.4 + 0.02 * axes["lead"][None, :]
    decay = np.exp(-axes["lead"] / 30.0).astype(np.float32)
    out = {"observations": obs, "land_state": (150.0 + 40.0 * np.repeat(land, S, axis=0)).astype(np.float32)}
    for key, source in (("realistic", land), ("scrambled", np.roll(land, -SCRAMBLE_SHIFT, axis=0))):
        s0 = (source[:, None, :] + err).reshape(Y * S, X) * coupling  # (init, lon)
        h = rng.standard_normal((Y * S, M, L, X), dtype=np.float32)
        h *= 1.5
        h += base[:, None, :, None]
        h += s0[:, None, None, :] * decay[None, None, :, None]
        out[key] = h
    return out


def _attrs(role: str) -> dict[str, str]:
    if role == "land_state":
        return {
            "standard_name": "mass_content_of_water_in_soil_layer",
            "long_name": "root-zone soil moisture at the start date",
            "units": "kg m-2",
        }
    return {"standard_name": "air_temperature", "long_name": "near-surface air temperature",
            "units": "K", "cell_methods": "time: mean"}


def _dims(role: str) -> tuple[str, ...]:
    if role in ("realistic", "scrambled"):
        return ("forecast_reference_time", "realization", "forecast_period", "lat", "lon")
    if role == "observations":
        return ("time", "lat", "lon")
    return ("forecast_reference_time", "lat", "lon")


def _shape(lay: Layout, role: str) -> tuple[int, ...]:
    if role in ("realistic", "scrambled"):
        return (lay.n_init, lay.members, lay.leads, lay.n_lat, lay.n_lon)
    if role == "observations":
        return (lay.years * lay.season_days, lay.n_lat, lay.n_lon)
    return (lay.n_init, lay.n_lat, lay.n_lon)


def _chunks(lay: Layout, role: str) -> tuple[int, ...]:
    shape = list(_shape(lay, role))
    shape[-2], shape[-1] = 1, lay.lon_chunk()
    return tuple(shape)


def _coord_values(axes: dict[str, NDArray[Any]]) -> dict[str, tuple[NDArray[Any], dict[str, str]]]:
    return {
        "forecast_reference_time": ((axes["init"] - EPOCH).astype(np.int32),
                                    {"standard_name": "forecast_reference_time", "units": TIME_UNITS,
                                     "calendar": "standard"}),
        "time": ((axes["time"] - EPOCH).astype(np.int32),
                 {"standard_name": "time", "units": TIME_UNITS, "calendar": "standard", "axis": "T"}),
        "realization": (axes["member"], {"standard_name": "realization"}),
        "forecast_period": (axes["lead"], {"standard_name": "forecast_period", "units": "days",
                                           "long_name": "lead day (valid date = start + lead - 1)"}),
        "lat": (axes["lat"], {"standard_name": "latitude", "units": "degrees_north", "axis": "Y"}),
        "lon": (axes["lon"], {"standard_name": "longitude", "units": "degrees_east", "axis": "X"}),
    }


def _variable(role: str) -> str:
    return "mrsos" if role == "land_state" else "tas"


def _write_netcdf(out: Path, lay: Layout, roles: tuple[str, ...], seed: int) -> dict[str, Path]:
    import netCDF4

    axes = _axes(lay)
    coords = _coord_values(axes)
    files: dict[str, Any] = {}
    paths = {role: out / f"{role}.nc" for role in roles}
    try:
        for role in roles:
            nc = netCDF4.Dataset(paths[role].with_suffix(".nc.part"), "w", format="NETCDF4")
            files[role] = nc
            nc.setncatts({"Conventions": "CF-1.8", "title": f"landlift synthetic benchmark case: {role}",
                          "source": "benchmarks/synthetic_pair.py (synthetic, invented values)",
                          "history": f"written by benchmarks/synthetic_pair.py with seed {seed}"})
            for dim in _dims(role):
                values, attrs = coords[dim]
                nc.createDimension(dim, values.size)
                var = nc.createVariable(dim, values.dtype, (dim,))
                var.setncatts(attrs)
                var[:] = values
            v = nc.createVariable(_variable(role), "f4", _dims(role), chunksizes=_chunks(lay, role),
                                  fill_value=False)
            v.setncatts(_attrs(role))
        for i in range(lay.n_lat):
            for role, values in _row(lay, axes, i, seed).items():
                if role in files:
                    v = files[role][_variable(role)]
                    if values.ndim == 4:
                        v[:, :, :, i, :] = values
                    else:
                        v[:, i, :] = values
    finally:
        for nc in files.values():
            nc.close()
    for role in roles:
        paths[role].with_suffix(".nc.part").replace(paths[role])
    return paths


def _write_zarr(out: Path, lay: Layout, roles: tuple[str, ...], seed: int) -> dict[str, Path]:
    import shutil

    import dask.array as da
    import xarray as xr

    axes = _axes(lay)
    coords = _coord_values(axes)
    paths = {role: out / f"{role}.zarr" for role in roles}
    for role in roles:
        if paths[role].exists():
            shutil.rmtree(paths[role])
        dims = _dims(role)
        ds = xr.Dataset(
            {_variable(role): (dims, da.zeros(_shape(lay, role), dtype=np.float32, chunks=_chunks(lay, role)),
                               _attrs(role))},
            coords={d: (d, coords[d][0], coords[d][1]) for d in dims},
            attrs={"Conventions": "CF-1.8", "title": f"landlift synthetic benchmark case: {role}",
                   "history": f"written by benchmarks/synthetic_pair.py with seed {seed}"},
        )
        enc = {_variable(role): {"chunks": _chunks(lay, role), "compressors": None}}
        for d in dims:
            enc[d] = {"compressors": None}
        ds.to_zarr(paths[role], mode="w", compute=False, encoding=enc, consolidated=False)
    for i in range(lay.n_lat):
        for role, values in _row(lay, axes, i, seed).items():
            if role not in paths:
                continue
            dims = _dims(role)
            arr = values[..., None, :]  # (..., 1, lon)
            part = xr.Dataset({_variable(role): (dims, arr)})
            part.to_zarr(paths[role], region={"lat": slice(i, i + 1)}, mode="r+", consolidated=False)
    import zarr

    for path in paths.values():  # consolidated metadata: one read opens the store
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # "not part of the Zarr format 3 specification"
            zarr.consolidate_metadata(str(path))
    return paths


def write_pair(
    out: str | Path,
    layout: Layout,
    *,
    zarr: bool = False,
    land_state: bool = True,
    seed: int = 2024,
) -> dict[str, Path]:
    """Write the case into ``out`` (created); ``{role: path}``."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    roles = ROLES if land_state else ROLES[:3]
    writer = _write_zarr if zarr else _write_netcdf
    return writer(out, layout, roles, seed)


def disk_bytes(path: Path) -> int:
    if path.is_dir():
        return sum(p.stat().st_size for p in path.rglob("*") if p.is_file())
    return path.stat().st_size


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--out", required=True, help="output folder")
    p.add_argument("--size", help="total size of the files such as 4GiB (sets the grid)")
    p.add_argument("--lat", type=int, default=10, help="latitudes (without --size)")
    p.add_argument("--lon", type=int, default=20, help="longitudes (without --size)")
    p.add_argument("--years", type=int, default=30)
    p.add_argument("--starts", type=int, default=8, help="weekly start dates per year from 1 May (<= 20)")
    p.add_argument("--members", type=int, default=10)
    p.add_argument("--leads", type=int, default=46, help="lead days 1..N")
    p.add_argument("--zarr", action="store_true", help="write Zarr directory stores instead of NetCDF")
    p.add_argument("--no-land-state", action="store_true")
    p.add_argument("--seed", type=int, default=2024)
    a = p.parse_args(argv)
    dims = {"years": a.years, "starts": a.starts, "members": a.members, "leads": a.leads}
    lay = layout_for_size(parse_size(a.size), **dims) if a.size else Layout(**dims, n_lat=a.lat, n_lon=a.lon)
    t0 = time.perf_counter()
    paths = write_pair(a.out, lay, zarr=a.zarr, land_state=not a.no_land_state, seed=a.seed)
    seconds = time.perf_counter() - t0
    sizes = {role: disk_bytes(path) for role, path in paths.items()}
    print(json.dumps({
        "benchmark": "synthetic_pair", "format": "zarr" if a.zarr else "netcdf",
        "layout": asdict(lay), "lon_chunk": lay.lon_chunk(),
        "paths": {r: str(v) for r, v in paths.items()}, "bytes": sizes,
        "total_gib": round(sum(sizes.values()) / 2**30, 3), "seconds": round(seconds, 2),
    }))
    return 0


if __name__ == "__main__":
    sys.exit(main())
