"""Regions: boxes, GeoJSON polygons and the offline reference regions, and the errors for others.

References: the box rule is the definition (cell centres with LAT0 <= lat <= LAT1 and
LON0 <= lon <= LON1, longitudes modulo 360); reference regions are checked against
``regionmask.defined_regions.srex`` called directly (the SREX regions, Seneviratne et al. 2012,
as regionmask ships them); polygons against shapely's point-in-polygon test.
"""

from __future__ import annotations

import json
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
import regionmask
from cf_factory import CasePaths
from run_support import run_options
from shapely.geometry import Point, box

from app.cli.score import read_geojson_region
from app.cube.regions import (
    list_regions,
    region_mask,
    region_weights,
    resolve_region,
)
from app.errors import NotFoundError, ParameterError
from app.runs.scoring import run_engine

REPO = Path(__file__).resolve().parents[1]


def test_box_mask_is_the_box_rule() -> None:
    lat = np.array([30.0, 35.0, 40.0, 45.0])
    lon = np.array([0.0, 10.0, 20.0, 30.0, 40.0])
    m = region_mask(resolve_region("box:35,40,10,30"), lat, lon)
    expected = ((lat >= 35) & (lat <= 40))[:, None] & ((lon >= 10) & (lon <= 30))[None, :]
    np.testing.assert_array_equal(m, expected)
    assert m.sum() == 6


def test_box_across_the_date_line_and_0_360_longitudes() -> None:
    lat = np.array([10.0, 20.0])
    lon360 = np.array([0.0, 90.0, 170.0, 190.0, 350.0])  # 190 = -170 E, 350 = -10 E
    wrap = region_mask(resolve_region("box:0,30,160,-160"), lat, lon360)  # LON0 > LON1 wraps
    np.testing.assert_array_equal(wrap[0], [False, False, True, True, False])
    west = region_mask(resolve_region("box:0,30,-20,5"), lat, lon360)
    np.testing.assert_array_equal(west[0], [True, False, False, False, True])


@pytest.mark.parametrize("spec", ["box:40,30,0,10", "box:1,2,3", "box:a,b,c,d", "box:-95,0,0,10"])
def test_bad_boxes(spec: str) -> None:
    with pytest.raises(ParameterError) as err:
        resolve_region(spec)
    assert spec in err.value.message


def test_region_without_cells_is_named() -> None:
    with pytest.raises(ParameterError) as err:
        region_weights([resolve_region("box:-10,0,0,10")], np.array([40.0, 50.0]), np.array([0.0, 5.0]))
    assert "box:-10,0,0,10" in err.value.message and "holds no cell" in err.value.message


def test_srex_region_mask_equals_regionmask() -> None:
    lat = np.array([42.0, 47.0, 52.0, 57.0, 63.0])
    lon = np.array([-5.0, 5.0, 15.0, 25.0, 35.0, 44.0])
    srex = regionmask.defined_regions.srex
    number = srex.map_keys("CEU")
    expected = np.asarray(srex.mask(lon, lat).values == number)  # regionmask, called directly
    assert 0 < expected.sum() < expected.size
    got = region_mask(resolve_region("srex:CEU"), lat, lon)
    np.testing.assert_array_equal(got, expected)
    # the same cells on a 0..360 longitude grid
    lon360 = np.sort(np.mod(lon, 360.0))
    order = np.argsort(np.mod(lon, 360.0))
    np.testing.assert_array_equal(region_mask(resolve_region("srex:CEU"), lat, lon360), expected[:, order])


def test_reference_regions_work_offline() -> None:
    """A fresh interpreter with every socket connection refused resolves and masks srex:CEU."""
    code = (
        "import socket\n"
        "def _refuse(*a, **k):\n"
        "    raise OSError('network disabled by the test')\n"
        "socket.socket.connect = _refuse\n"
        "socket.socket.connect_ex = _refuse\n"
        "socket.create_connection = _refuse\n"
        "import numpy as np\n"
        "from app.cube.regions import list_regions, region_mask, resolve_region\n"
        "import regionmask\n"
        "lat, lon = np.array([42.0, 50.0, 60.0]), np.array([5.0, 15.0])\n"
        "m = region_mask(resolve_region('srex:CEU'), lat, lon)\n"
        "srex = regionmask.defined_regions.srex\n"
        "ref = srex.mask(lon, lat).values == srex.map_keys('CEU')\n"
        "ids = [x['id'] for x in list_regions()]\n"
        "print(int(m.sum()), bool((m == ref).all()), 'srex:CEU' in ids, 'giorgi:MED' in ids)\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.split() == ["2", "True", "True", "True"]  # lat 50 x lon 5, 15 lie in CEU


def test_list_regions_holds_all_and_the_reference_sets() -> None:
    items = list_regions()
    assert items[0]["id"] == "all"
    ids = {i["id"] for i in items}
    srex = regionmask.defined_regions.srex
    assert {f"srex:{a}" for a in srex.abbrevs} <= ids
    assert all(set(i) == {"id", "name", "kind"} for i in items)


def test_unknown_reference_region_lists_the_choices() -> None:
    with pytest.raises(NotFoundError) as err:
        resolve_region("srex:XYZ")
    msg = err.value.message
    assert "'XYZ'" in msg
    for abbrev in regionmask.defined_regions.srex.abbrevs:
        assert abbrev in msg


@pytest.mark.parametrize("name", ["atlantis", "srexCEU", "nowhere:CEU"])
def test_unknown_region_lists_the_kinds_of_valid_names(name: str) -> None:
    with pytest.raises(NotFoundError) as err:
        resolve_region(name)
    msg = err.value.message
    assert repr(name) in msg
    assert "'all'" in msg and "box:LAT0,LAT1,LON0,LON1" in msg and "srex:" in msg
    with pytest.raises(NotFoundError):
        run_options(regions=[name]).scoring()  # names resolve once, when the run is planned


def _square(lat0: float, lat1: float, lon0: float, lon1: float) -> dict:
    return {"type": "Polygon", "coordinates": [[[lon0, lat0], [lon1, lat0], [lon1, lat1], [lon0, lat1], [lon0, lat0]]]}


def test_geojson_polygon_mapping_and_file(tmp_path: Path) -> None:
    lat = np.array([40.0, 45.0, 50.0])
    lon = np.array([10.0, 12.5, 15.0, 17.5])
    poly = box(11.0, 43.0, 16.0, 52.0)  # shapely, lon/lat order
    expected = np.array([[poly.contains(Point(x, y)) for x in lon] for y in lat])
    gj = {"type": "Feature", "properties": {"name": "middle"}, "geometry": _square(43, 52, 11, 16)}
    from_mapping = resolve_region({"name": "middle", "geojson": gj})
    np.testing.assert_array_equal(region_mask(from_mapping, lat, lon), expected)
    path = tmp_path / "middle.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": [gj]}))
    from_file = resolve_region(read_geojson_region(path))
    assert from_file.id == "polygon:middle"
    np.testing.assert_array_equal(region_mask(from_file, lat, lon), expected)
    # a name is never read as a path: a region sent over HTTP cannot reach the server's disk
    with pytest.raises(NotFoundError, match="unknown region"):
        resolve_region(str(path))
    with pytest.raises(ParameterError, match="Polygon"):
        resolve_region({"name": "pt", "geojson": {"type": "Point", "coordinates": [1, 2]}})


def test_engine_scores_a_reference_region(make_cf_case: Callable[..., CasePaths]) -> None:
    case = make_cf_case(lat=(42.0, 47.0, 52.0, 57.0), lon=(5.0, 15.0, 25.0, 44.0))
    out = run_engine(*case.engine_args(), options=run_options(regions=["srex:CEU"], resamples=50))
    assert [r.id for r in out.regions] == ["all", "srex:CEU"]
    srex = regionmask.defined_regions.srex
    expected = np.asarray(srex.mask(out.lon, out.lat).values == srex.map_keys("CEU"))
    np.testing.assert_array_equal(out.region_masks[1].reshape(expected.shape) > 0, expected)
    assert np.isfinite(out.series[1].acc_realistic).all()
