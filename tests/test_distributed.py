"""Scoring on a real dask.distributed cluster equals scoring on the local thread pool.

A ``distributed.LocalCluster`` with two worker processes (one thread each) runs the tile tasks of
:func:`app.runs.scoring.score_files` on the committed sample scenario; every number of the result
(skill.json curves, conditional tables, every variable of maps.nc and the float64 anomaly cube
of anomalies.nc) must equal the local run's to 1e-12. The local run is the reference: the tile
tasks need nothing from each other, so where they run may change only the order of additions.
A small memory budget (16 MiB) makes several tile tasks, and the local and the distributed runs
cut the grid differently (the local budget is split over two threads), so the check also covers
tiling independence. Progress must follow the real task count: the scheduler's own count of
completed ``tile_task`` tasks. Zarr input (the sample files converted in the test) must give the
NetCDF numbers.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import xarray as xr
from run_support import run_options

from app.cube.inputs import prepare
from app.cube.tiles import plan_tiles, task_budget
from app.runs.options import RunOptions
from app.runs.scoring import score_files

distributed = pytest.importorskip("distributed")

SAMPLE = Path(__file__).resolve().parents[1] / "sample_data"
ROLES = ("realistic", "scrambled", "observations", "land_state")
FILES = {role: SAMPLE / f"{role}.nc" for role in ROLES}
BUDGET = 16 * 2**20
RESAMPLES = 400
TOL = 1e-12


@pytest.fixture(scope="module")
def cluster() -> Iterator[Any]:
    with distributed.LocalCluster(
        n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None
    ) as c:
        yield c


def _options() -> RunOptions:
    return run_options(resamples=RESAMPLES, regions=["box:33.8,57.8,16.25,31.25"])


@pytest.fixture(scope="module")
def local(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The reference: the local thread-pool run, saved."""
    out = tmp_path_factory.mktemp("local")
    score_files(*FILES.values(), options=_options(), memory_budget=BUDGET).save(out)
    return out


def _tile_tasks_done(cluster: Any) -> int:
    prefix = cluster.scheduler.task_prefixes.get("tile_task")
    return 0 if prefix is None else int(prefix.state_counts["memory"])


def _same_json(a: Any, b: Any, where: str = "") -> None:
    """Equal structure; numbers equal to TOL (None for NaN on both sides)."""
    if isinstance(a, dict):
        assert isinstance(b, dict) and a.keys() == b.keys(), where
        for k in a:
            _same_json(a[k], b[k], f"{where}.{k}")
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            _same_json(x, y, f"{where}[{i}]")
    elif isinstance(a, float) and not isinstance(b, bool) and isinstance(b, int | float):
        assert math.isclose(a, b, rel_tol=0.0, abs_tol=TOL), f"{where}: {a} != {b}"
    else:
        assert a == b, f"{where}: {a!r} != {b!r}"


def _numbers(result: dict[str, Any]) -> dict[str, Any]:
    """result.json without what legitimately differs between runs (time stamps, inputs' paths)."""
    meta = dict(result["meta"])
    meta.pop("provenance", None)
    return {"meta": meta, "conditional": result["conditional"]}


def _assert_same_results(a: Path, b: Path, *, atol: float = TOL) -> int:
    """Every curve, table, map and anomaly of two saved results agree; the number of values."""
    checked = 0
    skill_a, skill_b = json.loads((a / "skill.json").read_text()), json.loads((b / "skill.json").read_text())
    assert len(skill_a) >= 4  # two regions x two aggregations
    if atol == TOL:
        _same_json(skill_a, skill_b, "skill")
        _same_json(_numbers(json.loads((a / "result.json").read_text())),
                   _numbers(json.loads((b / "result.json").read_text())), "result")
    for name in ("maps.nc", "anomalies.nc"):
        with xr.open_dataset(a / name) as da, xr.open_dataset(b / name) as db:
            assert set(da.data_vars) == set(db.data_vars)
            for v in da.data_vars:
                x, y = da[v].values, db[v].values
                assert x.shape == y.shape
                assert np.isfinite(x).any(), f"{name}:{v} holds no finite value"
                if atol != TOL and v in ("p_value", "significant"):
                    # inputs that differ by rounding can move one resample of a gain that is
                    # about 0 across 0: its tail count, so its p-value, moves by one draw
                    differ = ~np.isclose(x, y, rtol=0.0, atol=atol, equal_nan=True)
                    near_zero = np.abs(da["gain"].values) < 0.01
                    assert (differ <= near_zero).all(), f"{name}:{v} differs where the gain is not ~0"
                    assert differ.mean() <= 0.01, f"{name}:{v} differs in {differ.mean():.1%} of cells"
                    checked += x.size
                    continue
                np.testing.assert_allclose(x, y, rtol=0.0, atol=atol, equal_nan=True, err_msg=f"{name}:{v}")
                checked += x.size
    return checked


def test_cluster_equals_local_and_counts_real_tasks(cluster: Any, local: Path, tmp_path: Path) -> None:
    events: list[tuple[float, str]] = []
    before = _tile_tasks_done(cluster)
    result = score_files(
        *FILES.values(), options=_options(), scheduler=cluster.scheduler_address, memory_budget=BUDGET,
        progress=lambda fraction, message: events.append((fraction, message)),
    )
    ran = _tile_tasks_done(cluster) - before
    result.save(tmp_path)
    assert _assert_same_results(local, tmp_path) > 100_000

    # the distributed run gives each task the budget's whole task share (one task per worker)
    prep = prepare(*FILES.values())
    try:
        planned = len(plan_tiles(prep, budget=task_budget(BUDGET, workers=1)))
        local_planned = len(plan_tiles(prep, budget=task_budget(BUDGET, workers=2)))
    finally:
        prep.close()
    assert planned >= 3 and local_planned > planned  # several tasks, and a different tiling locally
    assert ran == planned  # the scheduler completed exactly the planned tile tasks
    fractions = [f for f, _ in events]
    assert all(b >= a for a, b in zip(fractions, fractions[1:], strict=False)), fractions
    assert fractions[-1] == 1.0
    task_messages = [m for _, m in events if "tile tasks" in m]
    assert task_messages == [f"{k}/{planned} tile tasks done" for k in range(1, planned + 1)]

    # the comparison can fail: another seed resamples other years and moves the intervals
    other = tmp_path / "other_seed"
    opts = run_options(resamples=RESAMPLES, seed=99, regions=["box:33.8,57.8,16.25,31.25"])
    score_files(*FILES.values(), options=opts, scheduler=cluster.scheduler_address, memory_budget=BUDGET).save(other)
    with pytest.raises(AssertionError):
        _assert_same_results(local, other)


def test_cli_score_on_scheduler(cluster: Any, local: Path, tmp_path: Path) -> None:
    landlift = Path(sys.executable).with_name("landlift")
    out = tmp_path / "cli"
    before = _tile_tasks_done(cluster)
    proc = subprocess.run(
        [str(landlift), "score", *(f"--{role.replace('_', '-')}={path}" for role, path in FILES.items()),
         "--scheduler", cluster.scheduler_address, "--memory-budget", "16MiB",
         "--resamples", str(RESAMPLES), "--region", "box:33.8,57.8,16.25,31.25", "--out", str(out)],
        capture_output=True, text=True, timeout=300,
    )
    assert proc.returncode == 0, proc.stderr
    assert _tile_tasks_done(cluster) - before >= 3  # the work ran on the cluster
    assert "week 1" in proc.stdout
    _assert_same_results(local, out)


def test_zarr_input_equals_netcdf(cluster: Any, local: Path, tmp_path: Path) -> None:
    """The sample files converted to Zarr directory stores score like the NetCDF files, here
    and on the cluster (each worker opens the stores itself)."""
    stores = {}
    for role, path in FILES.items():  # Zarr format 2 with consolidated metadata, as tools write it
        stores[role] = tmp_path / f"{role}.zarr"
        with xr.open_dataset(path, decode_timedelta=False) as ds:
            ds.to_zarr(stores[role], mode="w", zarr_format=2, consolidated=True)
    for role, path in FILES.items():
        var = "mrsos" if role == "land_state" else "tas"
        with xr.open_dataset(path) as a, xr.open_zarr(stores[role], chunks=None) as b:
            # the int16 packing decodes in float32 from NetCDF (float32 scale_factor) and in
            # float64 from Zarr (JSON attributes): they agree to the float32 spacing of the
            # largest decoded magnitude (value or add_offset)
            top = max(float(np.nanmax(np.abs(a[var].values))), abs(float(a[var].encoding["add_offset"])))
            np.testing.assert_allclose(b[var].values, a[var].values, rtol=0,
                                       atol=2 * float(np.spacing(np.float32(top))))
    out_local, out_cluster = tmp_path / "zarr_local", tmp_path / "zarr_cluster"
    score_files(*stores.values(), options=_options(), memory_budget=BUDGET).save(out_local)
    score_files(*stores.values(), options=_options(), scheduler=cluster.scheduler_address, memory_budget=BUDGET).save(out_cluster)
    # inputs that differ by float32 rounding (spacing 3.05e-5 at 290 K) give anomalies within a
    # few 1e-6 K and ACCs within about 3e-6 of the NetCDF ones (measured); 5e-5 is that spacing
    # with margin, still far below the 0.01 packing quantum of the files
    _assert_same_results(local, out_local, atol=5e-5)
    _assert_same_results(out_local, out_cluster)
    skill_nc = json.loads((local / "skill.json").read_text())
    skill_zarr = json.loads((out_local / "skill.json").read_text())
    for c_nc, c_zarr in zip(skill_nc, skill_zarr, strict=True):
        for w_nc, w_zarr in zip(c_nc["windows"], c_zarr["windows"], strict=True):
            for key in ("acc_realistic", "acc_scrambled", "gain"):
                for part in ("value", "low", "high"):
                    assert w_zarr[key][part] == pytest.approx(w_nc[key][part], abs=1e-5)
