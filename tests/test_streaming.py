"""A hindcast larger than the memory budget is scored tile by tile, and the budget changes nothing.

The case is written by ``benchmarks/synthetic_pair.py`` (streaming, float32, chunked along
space): each hindcast is about 26 MB, larger than the 16 MiB budget given to the run. The test
wraps :meth:`app.cube.sources.Source.read` and ``app.cube.tiles.reduce_tile`` (the real reads
and reductions still happen) to record every read the engine makes, and traces Python/numpy
allocations with :mod:`tracemalloc` while it runs.
"""

from __future__ import annotations

import importlib.util
import sys
import threading
import tracemalloc
from collections.abc import Iterator
from dataclasses import fields
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from run_support import run_options
from scipy import stats

from app.cube import tiles
from app.cube.assess import Estimate
from app.cube.inputs import prepare
from app.cube.pipeline import RunOutput
from app.cube.sources import Source
from app.cube.tiles import plan_tiles, task_budget, tile_bytes_per_cell
from app.runs.scoring import run_engine

BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "synthetic_pair.py"
BUDGET = 16 * 2**20
LARGE = 2**30
THREADS = 2
RESAMPLES = 200
TOL = 1e-12
ROLES = ("realistic", "scrambled", "observations", "land_state")


def _synthetic() -> Any:
    spec = importlib.util.spec_from_file_location("synthetic_pair", BENCH)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules["synthetic_pair"] = module
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def case(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    sp = _synthetic()
    layout = sp.Layout(years=8, starts=4, members=6, leads=30, n_lat=12, n_lon=96)
    paths = sp.write_pair(tmp_path_factory.mktemp("streaming"), layout, seed=7)
    assert layout.hindcast_bytes() > BUDGET  # each hindcast alone exceeds the budget
    return {role: paths[role] for role in ROLES}


@pytest.fixture
def reads(monkeypatch: pytest.MonkeyPatch) -> Iterator[list[dict[str, Any]]]:
    """Every read by Source.read: file, role, lat/lon slices, bytes returned, and whether it
    happened inside a tile reduction (``tiles.reduce_tile``) or before (input validation)."""
    log: list[dict[str, Any]] = []
    inside = threading.local()
    original_read, original_reduce = Source.read, tiles.reduce_tile

    def recording(self: Source, **kwargs: Any) -> np.ndarray:
        values = original_read(self, **kwargs)
        log.append({"file": self.name, "role": self.role, "lat": kwargs.get("lat", slice(None)),
                    "lon": kwargs.get("lon", slice(None)), "nbytes": values.nbytes, "shape": values.shape,
                    "tile": getattr(inside, "tile", False)})
        return values

    def reducing(*args: Any, **kwargs: Any) -> Any:
        inside.tile = True
        try:
            return original_reduce(*args, **kwargs)
        finally:
            inside.tile = False

    monkeypatch.setattr(Source, "read", recording)
    monkeypatch.setattr(tiles, "reduce_tile", reducing)
    yield log


def _run(case: dict[str, Path], budget: int) -> RunOutput:
    return run_engine(*case.values(), options=run_options(resamples=RESAMPLES), memory_budget=budget, threads=THREADS)


def test_tiles_read_within_the_task_budget(case: dict[str, Path], reads: list[dict[str, Any]]) -> None:
    out = _run(case, BUDGET)
    n_lat, n_lon = out.lat.size, out.lon.size
    limit = task_budget(BUDGET, workers=THREADS)
    assert reads, "no tile was read"
    assert max(r["nbytes"] for r in reads) <= limit
    for role, path in case.items():
        mine = [r for r in reads if r["file"] == path.name and r["tile"]]
        assert len(mine) > 1, f"{path.name} read in one piece"
        hit = np.zeros((n_lat, n_lon), dtype=np.int64)
        for r in mine:
            hit[r["lat"], r["lon"]] += 1
        assert (hit == 1).all(), f"{role}: every cell must be read exactly once"
        if role == "realistic":
            assert path.stat().st_size > BUDGET
            assert sum(r["nbytes"] for r in mine) >= path.stat().st_size * 0.99  # all of it, in tiles
    # one row of the grid exceeds a task's share: the rows were cut into longitude runs
    runs = [r for r in reads if r["role"] == "hindcast" and r["tile"] and r["shape"][-1] < n_lon]
    assert runs and all(r["shape"][-2] == 1 for r in runs)


def test_working_set_stays_within_the_budget(case: dict[str, Path]) -> None:
    """Python/numpy allocations (tracemalloc) stay inside the budget although each hindcast is
    larger than it: nothing holds a whole variable, and the tile tasks keep to their share."""
    tracemalloc.start()
    try:
        _run(case, BUDGET)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < BUDGET, f"traced peak {peak / 2**20:.1f} MiB exceeds the {BUDGET / 2**20:.0f} MiB budget"


def test_plan_tiles_cuts_rows_into_longitude_runs(case: dict[str, Path]) -> None:
    prep = prepare(*case.values())
    try:
        per_cell = tile_bytes_per_cell(prep)
        n_lat, n_lon = prep.lat.size, prep.lon.size
        for cells, expect in (
            (n_lat * n_lon * 4, "whole"),
            (3 * n_lon + 5, "rows"),
            (n_lon - 1, "runs"),
            (10, "runs"),
            (0, "runs"),  # a budget below one cell still makes progress, one cell per tile
        ):
            budget = cells * per_cell
            tiles = plan_tiles(prep, budget=budget)
            hit = np.zeros((n_lat, n_lon), dtype=np.int64)
            for rows, cols in tiles:
                hit[rows, cols] += 1
                size = len(range(*rows.indices(n_lat))) * len(range(*cols.indices(n_lon)))
                assert size * per_cell <= max(budget, per_cell)
            assert (hit == 1).all(), f"budget {cells} cells: tiles must cover the grid once"
            if expect == "whole":
                assert tiles == [(slice(0, n_lat), slice(0, n_lon))]
            elif expect == "rows":
                assert all(cols == slice(0, n_lon) for _, cols in tiles) and len(tiles) == -(-n_lat // 3)
            else:
                width = max(1, cells)
                assert all(rows.stop - rows.start == 1 for rows, _ in tiles)
                assert len(tiles) == n_lat * -(-n_lon // width)
    finally:
        prep.close()


def _flat(obj: Any, name: str) -> Iterator[tuple[str, np.ndarray]]:
    """Every array inside a run output (dataclasses, lists and dicts walked)."""
    if isinstance(obj, np.ndarray):
        yield name, obj
    elif isinstance(obj, Estimate) or hasattr(obj, "__dataclass_fields__"):
        for f in fields(obj):
            yield from _flat(getattr(obj, f.name), f"{name}.{f.name}")
    elif isinstance(obj, list | tuple):
        for i, item in enumerate(obj):
            yield from _flat(item, f"{name}[{i}]")
    elif isinstance(obj, dict):
        for k, item in obj.items():
            yield from _flat(item, f"{name}[{k}]")


def test_results_do_not_depend_on_the_budget(case: dict[str, Path], reads: list[dict[str, Any]]) -> None:
    small = _run(case, BUDGET)
    tiles_small = sum(r["file"] == case["realistic"].name and r["tile"] for r in reads)
    reads.clear()
    large = _run(case, LARGE)
    tiles_large = sum(r["file"] == case["realistic"].name and r["tile"] for r in reads)
    assert tiles_large < tiles_small
    compared = 0
    for field_ in ("cube", "cells", "significant", "series", "strata", "counts", "region_masks", "lat", "lon"):
        a = dict(_flat(getattr(small, field_), field_))
        b = dict(_flat(getattr(large, field_), field_))
        assert a.keys() == b.keys() and a
        for key in a:
            np.testing.assert_allclose(a[key], b[key], rtol=0, atol=TOL, equal_nan=True, err_msg=key)
            compared += a[key].size
    assert compared > 100_000
    # anchor outside the project: a few cells' ACCs against scipy's Pearson correlation
    rng = np.random.default_rng(3)
    for cell in rng.choice(small.cube.n_cells, size=5, replace=False):
        for w in range(small.cube.n_windows):
            x = small.cube.realistic[:, :, w, cell].ravel()
            y = small.cube.observed[:, :, w, cell].ravel()
            ok = np.isfinite(x) & np.isfinite(y)
            expected = stats.pearsonr(x[ok], y[ok]).statistic
            assert small.cells.acc_realistic[w, cell] == pytest.approx(expected, abs=1e-10)
