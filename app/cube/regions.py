"""Regions of the domain and their cos(latitude) weights.

Names a request may use:
    ``all``                          every cell of the domain that has data
    ``box:LAT0,LAT1,LON0,LON1``      a latitude-longitude rectangle (LON0 > LON1 wraps across 0)
    ``srex:ABBREV``, ``giorgi:ABBREV`` the published reference regions that regionmask ships
                                     offline (the SREX regions, Seneviratne et al. 2012; the
                                     regions of Giorgi and Francisco 2000)
    a GeoJSON Feature, FeatureCollection or Polygon given as a mapping (``{"name", "geojson"}``)

Region names never make this module read a file: the CLI reads a GeoJSON file itself and passes
the mapping on, so a name sent over HTTP cannot reach the server's disk.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache
from typing import Any

import numpy as np
from numpy.typing import NDArray

from app.errors import NotFoundError, ParameterError

REFERENCE_SETS: tuple[str, ...] = ("srex", "giorgi")


@dataclass(frozen=True)
class Region:
    """A named area; ``geometry`` is a shapely geometry, or None for ``all`` and boxes."""

    id: str
    name: str
    kind: str  # "all", "box", "reference", "polygon"
    box: tuple[float, float, float, float] | None = None
    geometry: Any = None

    def to_dict(self) -> dict[str, Any]:
        return {"id": self.id, "name": self.name, "kind": self.kind}


ALL = Region(id="all", name="every cell with data", kind="all")


@cache
def _reference_set(name: str) -> Any:
    import regionmask

    return getattr(regionmask.defined_regions, name)


def list_regions() -> list[dict[str, Any]]:
    """``all`` and every offline reference region, as ``{"id", "name", "kind"}``."""
    out = [ALL.to_dict()]
    for set_name in REFERENCE_SETS:
        regions = _reference_set(set_name)
        for abbrev, name in zip(regions.abbrevs, regions.names, strict=True):
            out.append({"id": f"{set_name}:{abbrev}", "name": str(name), "kind": "reference"})
    return out


def resolve_region(spec: str | dict[str, Any]) -> Region:
    """The Region a name or a GeoJSON mapping stands for; NotFoundError / ParameterError."""
    if isinstance(spec, dict):
        return _geojson_region(spec)
    text = spec.strip()
    if text == "all":
        return ALL
    if text.startswith("box:"):
        return _box_region(text)
    if ":" in text:
        set_name, abbrev = text.split(":", 1)
        if set_name in REFERENCE_SETS:
            regions = _reference_set(set_name)
            abbrevs = list(regions.abbrevs)
            if abbrev in abbrevs:
                r = regions[abbrev]
                return Region(id=text, name=str(r.name), kind="reference", geometry=r.polygon)
            raise NotFoundError(
                f"unknown {set_name} region {abbrev!r}; choose one of {', '.join(abbrevs)}",
                region=text,
            )
    raise NotFoundError(
        f"unknown region {text!r}; use 'all', 'box:LAT0,LAT1,LON0,LON1', a GeoJSON polygon, "
        f"or an id of GET /v1/regions such as 'srex:{_reference_set('srex').abbrevs[0]}'",
        region=text,
    )


def _box_region(text: str) -> Region:
    try:
        lat0, lat1, lon0, lon1 = (float(v) for v in text[4:].split(","))
    except ValueError as exc:
        raise ParameterError(f"region {text!r} is not of the form box:LAT0,LAT1,LON0,LON1") from exc
    if not (-90 <= lat0 < lat1 <= 90):
        raise ParameterError(f"region {text!r}: need -90 <= LAT0 < LAT1 <= 90")
    return Region(id=text, name=text, kind="box", box=(lat0, lat1, lon0, lon1))


def _geojson_region(spec: dict[str, Any]) -> Region:
    from shapely.geometry import shape
    from shapely.ops import unary_union

    gj = spec.get("geojson", spec)
    name = str(spec.get("name") or (gj.get("properties") or {}).get("name") or "polygon")
    try:
        if gj.get("type") == "FeatureCollection":
            geom = unary_union([shape(f["geometry"]) for f in gj["features"]])
        elif gj.get("type") == "Feature":
            geom = shape(gj["geometry"])
        else:
            geom = shape(gj)
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise ParameterError(f"region {name!r}: not a valid GeoJSON polygon ({exc})") from exc
    if geom.is_empty or geom.geom_type not in ("Polygon", "MultiPolygon"):
        raise ParameterError(f"region {name!r}: GeoJSON must hold a Polygon or MultiPolygon, got {geom.geom_type}")
    return Region(id=f"polygon:{name}", name=name, kind="polygon", geometry=geom)


def region_mask(region: Region, lat: NDArray[np.float64], lon: NDArray[np.float64]) -> NDArray[np.bool_]:
    """``(n_lat, n_lon)`` cells whose centre lies in the region."""
    if region.kind == "all":
        return np.ones((lat.size, lon.size), dtype=bool)
    if region.kind == "box":
        assert region.box is not None
        lat0, lat1, lon0, lon1 = region.box
        in_lat = (lat >= lat0) & (lat <= lat1)
        lo, a, b = np.mod(lon, 360.0), np.mod(lon0, 360.0), np.mod(lon1, 360.0)
        in_lon = (lo >= a) & (lo <= b) if a <= b else (lo >= a) | (lo <= b)
        if lon1 - lon0 >= 360:
            in_lon = np.ones_like(lo, dtype=bool)
        return in_lat[:, None] & in_lon[None, :]
    import regionmask

    regions = regionmask.Regions([region.geometry], numbers=[0], names=[region.name], abbrevs=["r"])
    lon_wrapped = np.where(lon > 180.0, lon - 360.0, lon) if region.kind == "reference" else lon
    order = np.argsort(lon_wrapped)
    mask = regions.mask(lon_wrapped[order], lat)
    out = np.zeros((lat.size, lon.size), dtype=bool)
    out[:, order] = np.asarray(mask.values == 0)
    return out


def region_weights(
    regions: list[Region], lat: NDArray[np.float64], lon: NDArray[np.float64]
) -> NDArray[np.float64]:
    """``(n_regions, n_lat * n_lon)`` cos(latitude) weights inside each region, 0 outside.

    A region that holds no cell of the grid is an error naming it.
    """
    coslat = np.cos(np.deg2rad(lat))[:, None] * np.ones((1, lon.size))
    out = np.zeros((len(regions), lat.size * lon.size))
    for k, region in enumerate(regions):
        m = region_mask(region, lat, lon)
        if not m.any():
            raise ParameterError(
                f"region {region.id!r} holds no cell of the grid "
                f"(lat {lat.min():g}..{lat.max():g}, lon {lon.min():g}..{lon.max():g})",
                region=region.id,
            )
        out[k] = np.where(m, coslat, 0.0).ravel()
    return out
