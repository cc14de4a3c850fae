"""Bootstrap benchmark: the engine's per-cell bootstrap against its BLAS floor (DESIGN section 8).

Builds the reference case synthetically (30 years x 8 start slots, 5 lead windows, 20,000 cells,
B = 1000 year-block resamples) and prints ONE JSON line:

``bootstrap_s``
    :func:`app.cube.assess.assess_cells` on the whole cube (yearly sufficient statistics,
    resampled ACCs of both experiments, gain intervals and p-values, Fisher-z region means of
    one region holding every cell, cos(lat) weights).
``kernel_s``
    :func:`app.stats.bootstrap.resampled_correlations` alone on the same yearly sums, called
    per block of cells as the engine calls it.
``floor_s``
    :func:`app.stats.bootstrap.matrix_product_floor`: only the ``counts @ sums`` products over
    the same column blocks; ``unblocked_s_scaled`` is one unblocked product on a slice of
    columns, scaled to all columns (shows what the blocking costs).
``naive_s_scaled``
    A straightforward pipeline (``xskillscore.resample_iterations_idx`` over the year dim of the
    data, then ``xskillscore.pearson_r`` over year x start samples, gain, percentile interval)
    timed on a reduced case and scaled linearly in cells x resamples.
``peak_rss_mb``
    Peak resident memory of the process right after the bootstrap stage (before the kernel,
    floor and naive stages run).

Times are the best of ``--repeats`` runs. Run ``python benchmarks/bootstrap_floor.py``
(``--quick`` for a small case).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from app.cube.assess import (
    BlockStats,
    Bootstrap,
    CellResults,
    Cube,
    assess_cells,
    block_stats,
    cell_blocks,
    combine_blocks,
)
from app.cube.parallel import TaskRunner
from app.stats.bootstrap import (
    BLOCK_BYTES,
    column_block,
    matrix_product_floor,
    resampled_correlations,
)
from app.stats.resample import year_block_counts
from app.stats.sums import N_STATS, yearly_sums

FloatArray = NDArray[np.float64]

REFERENCE = {"years": 30, "starts": 8, "windows": 5, "cells": 20_000, "resamples": 1000}
QUICK = {"years": 6, "starts": 3, "windows": 2, "cells": 48, "resamples": 40}
NAIVE_DEFAULT = {"naive_cells": 200, "naive_resamples": 100}
NAIVE_QUICK = {"naive_cells": 8, "naive_resamples": 5}
TARGETS = {"ratio_to_floor_max": 3.0, "speedup_vs_naive_min": 300.0, "peak_rss_mb_max": 2048.0}
BLOCK_CELLS = 256  # assess_cells' default block of cells
CONFIDENCE = 0.95
SEED = 8_2024
OPENBLAS_VARS = ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE", "OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS")


def build_case(
    *, years: int, starts: int, windows: int, cells: int, seed: int = SEED
) -> tuple[Cube, FloatArray]:
    """Synthetic anomaly cube ``(years, starts, windows, cells)`` and one all-cell region.

    Observation ``y ~ N(0, 1)``; realistic ``x1 = a1 y + e1`` and scrambled ``x2 = a2 y + e2``
    with skill that fades with lead window and varies across cells, the scrambled one a little
    lower, so correlations and gains are spread as in a real hindcast. Filled one window at a
    time so that temporaries stay small beside the three output arrays. Weights are cos(lat) of
    cells spread over 60S..70N.
    """
    rng = np.random.default_rng(seed)
    shape = (years, starts, windows, cells)
    observed = np.empty(shape)
    realistic = np.empty(shape)
    scrambled = np.empty(shape)
    cell_skill = rng.uniform(0.2, 1.0, size=cells)
    cell_gain = rng.uniform(-0.1, 0.5, size=cells)
    for w in range(windows):
        fade = 1.0 / (1.0 + w)
        a1 = (cell_skill * fade)[None, None, :]
        a2 = (cell_skill * fade * (1.0 - cell_gain))[None, None, :]
        y = rng.standard_normal((years, starts, cells))
        observed[:, :, w] = y
        realistic[:, :, w] = a1 * y + rng.standard_normal((years, starts, cells))
        scrambled[:, :, w] = a2 * y + rng.standard_normal((years, starts, cells))
    lat = np.linspace(-60.0, 70.0, cells)
    weights = np.cos(np.deg2rad(lat))[None, :]
    return Cube(realistic=realistic, scrambled=scrambled, observed=observed, land=None), weights


def make_bootstrap(n_years: int, *, resamples: int, seed: int = SEED) -> Bootstrap:
    counts = year_block_counts(n_years, resamples=resamples, seed=seed)
    return Bootstrap(counts=counts, confidence=CONFIDENCE, method="expanded")


def best_time(fn: Callable[[], object], *, repeats: int) -> float:
    """Smallest wall time of ``repeats`` calls of ``fn``."""
    best = float("inf")
    for _ in range(max(1, repeats)):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def machine_busy_s() -> float | None:
    """CPU seconds all processes have spent busy since boot (Linux ``/proc/stat``), else None."""
    try:
        with open("/proc/stat") as f:
            fields = [int(v) for v in f.readline().split()[1:9]]
    except (OSError, ValueError):
        return None
    idle = fields[3] + fields[4]  # idle + iowait
    return (sum(fields) - idle) / os.sysconf("SC_CLK_TCK")


def timed(fn: Callable[[], object]) -> tuple[float, float | None]:
    """Wall seconds of one call of ``fn`` and the share of the machine's CPUs that other
    processes used meanwhile (None where ``/proc/stat`` is missing)."""
    busy0, cpu0, t0 = machine_busy_s(), time.process_time(), time.perf_counter()
    fn()
    wall = time.perf_counter() - t0
    busy1 = machine_busy_s()
    if busy0 is None or busy1 is None:
        return wall, None
    others = (busy1 - busy0) - (time.process_time() - cpu0)
    return wall, min(1.0, max(0.0, others / (max(wall, 1e-9) * (os.cpu_count() or 1))))


def wait_idle(max_wait_s: float, *, threshold: float = 0.1) -> float | None:
    """Wait up to ``max_wait_s`` for a one-second stretch in which other processes use less than
    ``threshold`` of the CPUs; return the share seen last (None: cannot tell)."""
    deadline = time.monotonic() + max_wait_s
    share: float | None = None
    while time.monotonic() < deadline:
        _, share = timed(lambda: time.sleep(1.0))
        if share is None or share < threshold:
            break
    return share


def _cell_block_task(cube: Cube, cells: NDArray[np.int64], boot: Bootstrap, weights: FloatArray) -> BlockStats:
    return block_stats(
        cube.realistic[..., cells], cube.scrambled[..., cells], cube.observed[..., cells],
        cells, boot, weights[:, cells],
    )


def assess_cells_on_pool(
    cube: Cube, boot: Bootstrap, weights: FloatArray, *, threads: int, block_cells: int = BLOCK_CELLS
) -> CellResults:
    """What ``app.cube.pipeline.run`` does with the blocks: ``block_stats`` on the engine's
    :class:`TaskRunner` thread pool (one BLAS thread per task thread), then ``combine_blocks``."""
    blocks = cell_blocks(weights, cube.n_cells, block_cells=block_cells)
    with TaskRunner(None, threads=threads) as runner:
        done = runner.map(_cell_block_task, [(cube, cells, boot, weights) for cells in blocks])
    return combine_blocks(done, boot, weights, n_windows=cube.n_windows, n_cells=cube.n_cells)


def cube_yearly_sums(cube: Cube, *, block_cells: int = BLOCK_CELLS) -> FloatArray:
    """The engine's yearly sums of every cell: ``(n_years, N_STATS, n_windows * n_cells)``."""
    Y, W, C = cube.n_years, cube.n_windows, cube.n_cells
    out = np.empty((Y, N_STATS, W, C))
    for start in range(0, C, block_cells):
        sl = slice(start, min(C, start + block_cells))
        out[..., sl] = yearly_sums(cube.realistic[..., sl], cube.scrambled[..., sl], cube.observed[..., sl])
    return out.reshape(Y, N_STATS, W * C)


def time_kernel(yearly: FloatArray, counts: FloatArray, *, block_columns: int, repeats: int) -> float:
    """``resampled_correlations`` over the columns, one engine block at a time."""
    n_cols = yearly.shape[2]

    def run() -> None:
        for start in range(0, n_cols, block_columns):
            resampled_correlations(yearly[:, :, start : start + block_columns], counts)

    return best_time(run, repeats=repeats)


def time_floor(yearly: FloatArray, counts: FloatArray, *, repeats: int) -> float:
    """Only the blocked BLAS products of the same shape (the floor)."""
    return best_time(lambda: matrix_product_floor(yearly, counts), repeats=repeats)


def time_unblocked(
    yearly: FloatArray, counts: FloatArray, *, columns: int, repeats: int
) -> tuple[float, int]:
    """One unblocked ``counts @ sums`` on the first ``columns`` columns, scaled to all columns."""
    n_years, _, n_cols = yearly.shape
    columns = max(1, min(columns, n_cols))
    part = np.ascontiguousarray(yearly[:, :, :columns]).reshape(n_years, -1)
    t = best_time(lambda: counts @ part, repeats=repeats)
    return t * n_cols / columns, columns


def naive_pipeline(cube: Cube, *, cells: int, resamples: int, seed: int = SEED) -> dict[str, Any]:
    """The straightforward way: resample the data's year dim, then correlate every resample.

    All three fields go through ``resample_iterations_idx`` as one Dataset, so each iteration
    draws the same years for both experiments and the observations (paired, year blocks). Then
    year x start are stacked back into samples and ``pearson_r`` is taken over them; the gain's
    2.5/97.5 % percentiles and the fraction of resamples with gain <= 0 close the pipeline.
    """
    import xarray as xr
    import xskillscore as xs

    cells = min(cells, cube.n_cells)
    dims = ("year", "start", "window", "cell")
    ds = xr.Dataset(
        {
            name: (dims, np.ascontiguousarray(getattr(cube, name)[..., :cells]))
            for name in ("realistic", "scrambled", "observed")
        }
    )
    np.random.seed(seed)  # resample_iterations_idx draws from numpy's global generator
    t0 = time.perf_counter()
    boot = xs.resample_iterations_idx(ds, resamples, dim="year", replace=True)
    samples = boot.stack(sample=("year", "start"), create_index=False)
    acc1 = xs.pearson_r(samples["realistic"], samples["observed"], dim="sample")
    acc2 = xs.pearson_r(samples["scrambled"], samples["observed"], dim="sample")
    gain = acc1 - acc2
    bounds = gain.quantile([0.025, 0.975], dim="iteration")
    p_below = (gain <= 0).mean("iteration")
    bounds.values, p_below.values  # noqa: B018  (make sure everything is computed)
    elapsed = time.perf_counter() - t0
    return {
        "seconds": elapsed,
        "cells": cells,
        "resamples": resamples,
        "gain_shape": [int(s) for s in gain.shape],
    }


def sig(x: float, digits: int = 5) -> float:
    """``x`` rounded to ``digits`` significant figures (times span microseconds to minutes)."""
    return float(f"{x:.{digits}g}")


def peak_rss_mb() -> float:
    """Peak resident set size of this process so far (Linux reports KiB, macOS bytes)."""
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return peak / 2**20 if sys.platform == "darwin" else peak / 2**10


def blas_info() -> dict[str, Any]:
    """BLAS library, version, threads and the kernel it runs (threadpoolctl when installed)."""
    try:
        from threadpoolctl import threadpool_info
    except ImportError:
        threadpool_info = None
    if threadpool_info is not None:
        pools = [p for p in threadpool_info() if p.get("user_api") == "blas"]
        # numpy's own library does the matrix products; scipy may load a second copy
        pools.sort(key=lambda p: "numpy" not in str(p.get("filepath", "")))
        if pools:
            return {
                "source": "threadpoolctl",
                "libraries": [
                    {
                        "library": p.get("internal_api"),
                        "file": Path(str(p.get("filepath", ""))).name,
                        "version": p.get("version"),
                        "threads": p.get("num_threads"),
                        "kernel": p.get("architecture"),
                    }
                    for p in pools
                ],
                "kernel": pools[0].get("architecture"),
            }
    try:
        blas = np.show_config(mode="dicts")["Build Dependencies"]["blas"]
    except Exception:  # noqa: BLE001  (older numpy: no dict mode)
        return {"source": "unknown"}
    return {
        "source": "numpy.show_config",
        "library": blas.get("name"),
        "version": blas.get("version"),
        "configuration": blas.get("openblas configuration"),
        "kernel": None,
    }


def run(
    *,
    years: int,
    starts: int,
    windows: int,
    cells: int,
    resamples: int,
    naive_cells: int,
    naive_resamples: int,
    repeats: int,
    unblocked_columns: int,
    skip_naive: bool = False,
    idle_wait_s: float = 0.0,
) -> dict[str, Any]:
    """Run every stage and return the figures (the JSON line's content)."""
    load_start = os.getloadavg()[0]
    cube, weights = build_case(years=years, starts=starts, windows=windows, cells=cells)
    boot = make_bootstrap(years, resamples=resamples)
    input_mb = sum(a.nbytes for a in (cube.realistic, cube.scrambled, cube.observed)) / 2**20

    # 1. the engine, once, so that its peak memory is read before anything else allocates
    out_cells = assess_cells(cube, boot, weights, block_cells=BLOCK_CELLS)
    peak_engine = peak_rss_mb()
    finite_gain = float(np.isfinite(out_cells.gain).mean())
    region = out_cells.region_mean[0]
    del out_cells

    # 2. then rounds of engine, kernel and floor (on the same yearly sums), interleaved so that
    # the best of each is taken over the same stretch of machine load
    yearly = cube_yearly_sums(cube)
    n_cols = yearly.shape[2]
    pool_threads = min(2, os.cpu_count() or 1)  # the engine's default TaskRunner size
    times: dict[str, list[tuple[float, float | None]]] = {
        "bootstrap": [], "bootstrap_pool": [], "kernel": [], "floor": []
    }
    stages: dict[str, Callable[[], object]] = {
        "bootstrap": lambda: assess_cells(cube, boot, weights, block_cells=BLOCK_CELLS),
        "bootstrap_pool": lambda: assess_cells_on_pool(cube, boot, weights, threads=pool_threads),
        "kernel": lambda: time_kernel(
            yearly, boot.counts, block_columns=BLOCK_CELLS * windows, repeats=1
        ),
        "floor": lambda: time_floor(yearly, boot.counts, repeats=1),
    }
    for _ in range(max(1, repeats)):
        for name, fn in stages.items():
            if idle_wait_s > 0:
                wait_idle(idle_wait_s)
            times[name].append(timed(fn))
    best = {k: min(v, key=lambda t: t[0]) for k, v in times.items()}
    bootstrap_s, kernel_s, floor_s = (best[k][0] for k in ("bootstrap", "kernel", "floor"))
    unblocked_s, unblocked_cols = time_unblocked(
        yearly, boot.counts, columns=unblocked_columns, repeats=repeats
    )
    flops = 2.0 * resamples * years * N_STATS * n_cols

    # 4. the straightforward pipeline, reduced and scaled
    naive: dict[str, Any] | None = None
    if not skip_naive:
        naive_pipeline(cube, cells=2, resamples=2)  # warm-up: first-call costs of xarray
        runs = []
        for _ in range(max(1, repeats)):
            if idle_wait_s > 0:
                wait_idle(idle_wait_s)
            holder: dict[str, Any] = {}
            _, share = timed(
                lambda h=holder: h.update(
                    naive_pipeline(cube, cells=naive_cells, resamples=naive_resamples)
                )
            )
            runs.append({**holder, "others_cpu_share": share})
        naive = min(runs, key=lambda r: r["seconds"])
        best["naive"] = (naive["seconds"], naive["others_cpu_share"])
        scale = (cells / naive["cells"]) * (resamples / naive["resamples"])
        naive["scaled_s"] = naive["seconds"] * scale

    out: dict[str, Any] = {
        "benchmark": "bootstrap_floor",
        "case": {
            "years": years,
            "starts": starts,
            "windows": windows,
            "cells": cells,
            "resamples": resamples,
            "columns": n_cols,
        },
        "bootstrap_s": sig(bootstrap_s),
        "bootstrap_pool_s": sig(best["bootstrap_pool"][0]),
        "pool_threads": pool_threads,
        "ratio_to_floor_pool": sig(best["bootstrap_pool"][0] / floor_s, 4),
        "kernel_s": sig(kernel_s),
        "floor_s": sig(floor_s),
        "unblocked_s_scaled": sig(unblocked_s),
        "unblocked_columns": unblocked_cols,
        "floor_gflops": round(flops / floor_s / 1e9, 2),
        "ratio_to_floor": sig(bootstrap_s / floor_s, 4),
        "kernel_ratio_to_floor": sig(kernel_s / floor_s, 4),
        "naive_s": sig(naive["seconds"]) if naive else None,
        "naive_s_scaled": sig(naive["scaled_s"]) if naive else None,
        "naive_reduced_case": (
            {
                "cells": naive["cells"],
                "resamples": naive["resamples"],
                "scaling": "linear in cells x resamples",
                "us_per_cell_resample": round(naive["seconds"] / (naive["cells"] * naive["resamples"]) * 1e6, 2),
            }
            if naive
            else None
        ),
        "speedup_vs_naive": sig(naive["scaled_s"] / bootstrap_s, 4) if naive else None,
        "peak_rss_mb": round(peak_engine, 1),
        "peak_rss_mb_all_stages": round(peak_rss_mb(), 1),
        "input_mb": round(input_mb, 1),
        "yearly_sums_mb": round(yearly.nbytes / 2**20, 1),
        "finite_gain_fraction": round(finite_gain, 4),
        "region_gain": [round(float(v), 4) for v in region.gain_value],
        "block_cells": BLOCK_CELLS,
        "column_block": column_block(resamples),
        "block_bytes": BLOCK_BYTES,
        "repeats": repeats,
        "targets": TARGETS,
        "blas": blas_info(),
        "numpy": np.__version__,
        "python": platform.python_version(),
        "cpu_count": os.cpu_count(),
        "env": {k: os.environ[k] for k in OPENBLAS_VARS if k in os.environ},
        "load_avg_1m": [round(load_start, 2), round(os.getloadavg()[0], 2)],
        "others_cpu_share": {
            k: (None if b[1] is None else round(b[1], 3)) for k, b in best.items()
        },
        "idle_wait_s": idle_wait_s,
    }
    out["targets_met"] = {
        "ratio_to_floor": out["ratio_to_floor"] <= TARGETS["ratio_to_floor_max"],
        "speedup_vs_naive": (
            out["speedup_vs_naive"] >= TARGETS["speedup_vs_naive_min"] if naive else None
        ),
        "peak_rss_mb": out["peak_rss_mb"] < TARGETS["peak_rss_mb_max"],
    }
    return out


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--cells", type=int, default=None, help="grid cells (default 20000)")
    p.add_argument("--years", type=int, default=None, help="hindcast years (default 30)")
    p.add_argument("--starts", type=int, default=None, help="start slots per year (default 8)")
    p.add_argument("--windows", type=int, default=None, help="lead windows (default 5)")
    p.add_argument("--resamples", type=int, default=None, help="bootstrap resamples (default 1000)")
    p.add_argument("--naive-cells", type=int, default=None, help="cells of the naive run (default 200)")
    p.add_argument(
        "--naive-resamples", type=int, default=None, help="resamples of the naive run (default 100)"
    )
    p.add_argument("--repeats", type=int, default=None, help="best of N runs (default 3; quick: 1)")
    p.add_argument(
        "--unblocked-columns",
        type=int,
        default=10_000,
        help="columns of the unblocked product (default 10000)",
    )
    p.add_argument("--skip-naive", action="store_true", help="leave out the naive pipeline")
    p.add_argument(
        "--idle-wait",
        type=float,
        default=0.0,
        help="before each timed run wait up to this many seconds for the machine to be idle",
    )
    p.add_argument("--quick", action="store_true", help="a small case (smoke test)")
    return p.parse_args(argv)


def options(ns: argparse.Namespace) -> dict[str, Any]:
    """Keyword options of :func:`run` from parsed arguments (``--quick`` changes the defaults)."""
    case = dict(QUICK if ns.quick else REFERENCE)
    case.update(NAIVE_QUICK if ns.quick else NAIVE_DEFAULT)
    for key in ("cells", "years", "starts", "windows", "resamples", "naive_cells", "naive_resamples"):
        value = getattr(ns, key)
        if value is not None:
            if value < 1:
                raise SystemExit(f"--{key.replace('_', '-')} must be >= 1, got {value}")
            case[key] = value
    if case["years"] < 2:
        raise SystemExit(f"--years must be >= 2 for a year-block bootstrap, got {case['years']}")
    case["repeats"] = ns.repeats if ns.repeats is not None else (1 if ns.quick else 3)
    case["unblocked_columns"] = ns.unblocked_columns
    case["skip_naive"] = ns.skip_naive
    case["idle_wait_s"] = max(0.0, ns.idle_wait)
    return case


def main(argv: list[str] | None = None) -> int:
    figures = run(**options(parse_args(argv)))
    print(json.dumps(figures), flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
