"""Results of finished experiments: skill curves, maps, conditional gain; regions.

Every representation is derived once from the stored result, kept in the artifact store under a
key made of the result digest and the request's options (:func:`app.store.derived_files.put_cached`), and served from
there afterwards. The ETag is a hash of the same identity, so ``If-None-Match`` is answered with a
304 before any file is read.
"""

from __future__ import annotations

import re
import threading
from collections import OrderedDict
from collections.abc import Callable
from pathlib import Path
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query, Request, Response

from app.api.caching import RESULT_CACHE, cache_headers, make_etag, not_modified
from app.api.deps import ReadAccess, StoreDep
from app.api.schemas import ConditionalTable, RegionsOut, SkillCurve
from app.cube.regions import list_regions
from app.errors import NotFoundError, ParameterError
from app.results.contract import AGGREGATIONS, MAP_FIELDS
from app.runs.options import RegionName
from app.store import Store, derived_files, experiment_rows

router = APIRouter(tags=["results"])

MEDIA = {
    "json": "application/json",
    "csv": "text/csv; charset=utf-8",
    "png": "image/png",
    "netcdf": "application/x-netcdf",
}
EXTENSION = {"json": "json", "csv": "csv", "png": "png", "netcdf": "nc"}

#: one derivation at a time per process: results are shared (LRU) objects that on-demand
#: regions extend, and rendering is CPU-bound anyway
_derive_lock = threading.Lock()


#: finished results are immutable: their digests and derived bytes stay in memory
_digests: dict[tuple[int, str], str] = {}
_bytes: OrderedDict[str, tuple[bytes, str]] = OrderedDict()
_bytes_total = 0
BYTES_CACHE_LIMIT = 64 << 20


def _digest(store: Store, experiment_id: str) -> str:
    key = (id(store), experiment_id)
    found = _digests.get(key)
    if found is None:
        found = experiment_rows.result_digest(store, experiment_id)
        if len(_digests) > 4096:
            _digests.clear()
        _digests[key] = found
    return found


_bytes_lock = threading.Lock()


def _remember(key: str, data: bytes, media_type: str) -> None:
    global _bytes_total
    if len(data) > BYTES_CACHE_LIMIT // 8:
        return
    with _bytes_lock:
        if key in _bytes:
            return
        _bytes[key] = (data, media_type)
        _bytes_total += len(data)
        while _bytes_total > BYTES_CACHE_LIMIT:
            _, (old, _m) = _bytes.popitem(last=False)
            _bytes_total -= len(old)


def _safe(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", text).strip("_") or "x"


def _serve_fast(request: Request, *, key: str, fmt: str, filename: str) -> Response | None:
    """A 304, or the bytes from memory, without a thread hop; None when neither applies."""
    headers = cache_headers(make_etag(key), RESULT_CACHE)
    cached = not_modified(request, headers)
    if cached is not None:
        return cached
    hit = _bytes.get(key)
    if hit is None:
        return None
    disposition = "inline" if fmt in ("json", "png") else "attachment"
    headers["Content-Disposition"] = f'{disposition}; filename="{filename}"'
    return Response(hit[0], media_type=hit[1], headers=headers)


def _serve(
    request: Request,
    store: Store,
    *,
    key: str,
    fmt: str,
    filename: str,
    make: Callable[[], bytes],
) -> Response:
    headers = cache_headers(make_etag(key), RESULT_CACHE)
    cached = not_modified(request, headers)
    if cached is not None:
        return cached
    disposition = "inline" if fmt in ("json", "png") else "attachment"
    headers["Content-Disposition"] = f'{disposition}; filename="{filename}"'
    hit = _bytes.get(key)
    if hit is not None:
        return Response(hit[0], media_type=hit[1], headers=headers)
    found = derived_files.get_cached(store, key)
    if found is None:
        with _derive_lock:
            found = derived_files.get_cached(store, key)
            if found is None:
                data = make()
                path = derived_files.put_cached(store, key, data, media_type=MEDIA[fmt])
                found = (path, MEDIA[fmt])
    path, media_type = found
    data = Path(path).read_bytes()
    _remember(key, data, media_type)
    return Response(data, media_type=media_type, headers=headers)


@router.get(
    "/v1/experiments/{experiment_id}/skill",
    responses={
        200: {
            "content": {
                "application/json": {"schema": {"$ref": "#/components/schemas/SkillCurve"}},
                "text/csv": {},
                "image/png": {},
            },
            "description": "the skill-by-lead curve (DESIGN section 5 shape for JSON)",
            "model": SkillCurve,
        },
        304: {"description": "not modified"},
    },
)
async def skill(
    experiment_id: str,
    request: Request,
    store: StoreDep,
    _: ReadAccess,
    region: Annotated[RegionName, Query()] = "all",
    aggregation: Annotated[str, Query(max_length=50)] = "acc_of_region_mean",
    format: Annotated[Literal["json", "csv", "png"], Query()] = "json",
) -> Response:
    """The skill-by-lead curve of a region and aggregation, as JSON, CSV or PNG."""
    from starlette.concurrency import run_in_threadpool

    if aggregation not in AGGREGATIONS:
        raise ParameterError(
            f"unknown aggregation {aggregation!r}; choose one of {', '.join(AGGREGATIONS)}",
            aggregation=aggregation,
            choices=list(AGGREGATIONS),
        )
    digest = _digests.get((id(store), experiment_id))
    if digest is None:
        digest = await run_in_threadpool(_digest, store, experiment_id)
    key = f"{digest}:skill:{region}:{aggregation}.{EXTENSION[format]}"
    name = f"{experiment_id}_skill_{_safe(region)}_{aggregation}.{EXTENSION[format]}"
    fast = _serve_fast(request, key=key, fmt=format, filename=name)
    if fast is not None:
        return fast

    def make() -> bytes:
        curve = experiment_rows.load_result(store, experiment_id).curve(region, aggregation)
        if format == "json":
            return SkillCurve.model_validate(curve).model_dump_json().encode()
        if format == "csv":
            from app.results.tables import curve_csv

            return curve_csv(curve).encode("utf-8")
        from app.results.figures import skill_png

        return skill_png(curve)

    return await run_in_threadpool(
        lambda: _serve(request, store, key=key, fmt=format, filename=name, make=make)
    )


@router.get(
    "/v1/experiments/{experiment_id}/maps/{window}",
    response_class=Response,
    responses={
        200: {"content": {"image/png": {}, "application/x-netcdf": {}}},
        304: {"description": "not modified"},
    },
)
def maps(
    experiment_id: str,
    window: str,
    request: Request,
    store: StoreDep,
    _: ReadAccess,
    field: Annotated[str | None, Query(max_length=50)] = None,
    format: Annotated[Literal["png", "netcdf"], Query()] = "png",
) -> Response:
    """A map of one lead window: PNG of one field (default ``gain``) or CF NetCDF.

    NetCDF without ``field`` holds every field of the window.
    """
    if field is not None and field not in MAP_FIELDS:
        raise NotFoundError(
            f"unknown map field {field!r}; choose one of {', '.join(MAP_FIELDS)}",
            field=field,
            choices=list(MAP_FIELDS),
        )
    chosen = field or ("gain" if format == "png" else "all")  # the raw gain unless asked
    digest = _digest(store, experiment_id)
    key = f"{digest}:map:{window}:{chosen}.{EXTENSION[format]}"

    def make() -> bytes:
        result = experiment_rows.load_result(store, experiment_id)
        if window not in result.window_labels:
            raise NotFoundError(
                f"unknown lead window {window!r}; choose one of {', '.join(result.window_labels)}",
                window=window,
                choices=result.window_labels,
            )
        if chosen != "all" and chosen not in result.maps:
            raise NotFoundError(
                f"map field {chosen!r} is not in this result: it is written only for "
                f"scramble 'other_years' (this run: {result.meta.get('scramble')!r})",
                field=chosen,
            )
        if format == "png":
            from app.results.figures import map_png

            return map_png(result.maps, window=window, field=chosen)
        return _netcdf_extract(store, result.maps, window=window, field=field)

    name = f"{experiment_id}_{_safe(window)}_{chosen}.{EXTENSION[format]}"
    return _serve(request, store, key=key, fmt=format, filename=name, make=make)


def _netcdf_extract(store: Store, maps: Any, *, window: str, field: str | None) -> bytes:
    """The window (kept as a length-1 ``window`` dim) as CF NetCDF bytes."""
    import shutil

    from app.provenance import history_line

    ds = maps.sel(window=[window])
    if field is not None:
        ds = ds[[field]]
    ds = ds.copy()
    what = f"field {field}" if field else "all fields"
    previous = str(maps.attrs.get("history", "")).rstrip("\n")
    line = history_line(f"extracted lead window {window!r}, {what}, for the HTTP API")
    ds.attrs["history"] = f"{previous}\n{line}" if previous else line
    work = store.artifacts.temp_dir()
    try:
        path = work / "map.nc"
        ds.to_netcdf(path, engine="netcdf4")
        return path.read_bytes()
    finally:
        shutil.rmtree(work, ignore_errors=True)


@router.get(
    "/v1/experiments/{experiment_id}/conditional",
    response_model=ConditionalTable,
    responses={304: {"description": "not modified"}},
)
def conditional(
    experiment_id: str,
    request: Request,
    store: StoreDep,
    _: ReadAccess,
    region: Annotated[RegionName, Query()] = "all",
) -> Response:
    """Gain by initial-land-anomaly stratum (dry, middle, wet terciles) and lead window."""
    digest = _digest(store, experiment_id)
    key = f"{digest}:conditional:{region}.json"

    def make() -> bytes:
        table = experiment_rows.load_result(store, experiment_id).conditional(region)
        return ConditionalTable.model_validate(table).model_dump_json().encode()

    name = f"{experiment_id}_conditional_{_safe(region)}.json"
    return _serve(request, store, key=key, fmt="json", filename=name, make=make)


_regions_cache: list[dict[str, Any]] | None = None


@router.get("/v1/regions", response_model=RegionsOut, responses={304: {"description": "not modified"}})
def regions(request: Request, _: ReadAccess) -> Response:
    """The regions a request may name: ``all`` and the offline reference regions."""
    global _regions_cache
    if _regions_cache is None:
        _regions_cache = list_regions()
    body = RegionsOut(
        regions=_regions_cache,
        patterns={
            "box": "box:LAT0,LAT1,LON0,LON1",
            "polygon": "polygon:NAME (GeoJSON given when the experiment was created)",
        },
    )
    data = body.model_dump_json().encode()
    headers = cache_headers(make_etag("regions", data.decode()), "private, max-age=3600")
    cached = not_modified(request, headers)
    if cached is not None:
        return cached
    return Response(data, media_type="application/json", headers=headers)
