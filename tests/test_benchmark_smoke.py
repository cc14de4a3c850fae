"""Smoke test of benchmarks/bootstrap_floor.py on a tiny case: fields and sane values, no timing.

The speed targets themselves live in the benchmark's JSON line (RULES: never in timed tests).
"""

from __future__ import annotations

import importlib.util
import json
import math
from pathlib import Path
from types import ModuleType

import numpy as np
import pytest
from scipy import stats as sps

BENCH_PATH = Path(__file__).resolve().parents[1] / "benchmarks" / "bootstrap_floor.py"

TIME_FIELDS = ("bootstrap_s", "bootstrap_pool_s", "kernel_s", "floor_s", "unblocked_s_scaled", "naive_s", "naive_s_scaled")


@pytest.fixture(scope="module")
def bench() -> ModuleType:
    spec = importlib.util.spec_from_file_location("bootstrap_floor", BENCH_PATH)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def tiny(bench: ModuleType) -> dict:
    return bench.run(
        years=8,
        starts=3,
        windows=2,
        cells=40,
        resamples=30,
        naive_cells=6,
        naive_resamples=4,
        repeats=1,
        unblocked_columns=16,
    )


def test_figures_have_every_field(tiny: dict) -> None:
    # the line's fields, not the speed (timing belongs to the benchmark run itself)
    for key in TIME_FIELDS:
        assert isinstance(tiny[key], float) and math.isfinite(tiny[key]), key
    for key in ("ratio_to_floor", "ratio_to_floor_pool", "speedup_vs_naive"):
        assert isinstance(tiny[key], float), key
    assert {k: tiny["naive_reduced_case"][k] for k in ("cells", "resamples")} == {"cells": 6, "resamples": 4}
    assert tiny["unblocked_columns"] == 16
    assert tiny["case"] == {
        "years": 8,
        "starts": 3,
        "windows": 2,
        "cells": 40,
        "resamples": 30,
        "columns": 80,
    }
    # memory: the engine's peak holds at least the three input arrays; never more than the end
    assert tiny["input_mb"] == pytest.approx(3 * 8 * 3 * 2 * 40 * 8 / 2**20, abs=0.05)
    assert tiny["input_mb"] <= tiny["peak_rss_mb"] <= tiny["peak_rss_mb_all_stages"]
    assert tiny["finite_gain_fraction"] == 1.0
    assert len(tiny["region_gain"]) == 2
    assert all(-2.0 <= g <= 2.0 for g in tiny["region_gain"])
    assert tiny["column_block"] >= 1 and tiny["block_cells"] >= 1
    assert set(tiny["targets_met"]) == {"ratio_to_floor", "speedup_vs_naive", "peak_rss_mb"}
    assert all(isinstance(v, bool) for v in tiny["targets_met"].values())
    assert tiny["blas"]["source"] in ("threadpoolctl", "numpy.show_config", "unknown")
    assert tiny["numpy"] == np.__version__
    assert tiny["cpu_count"] >= 1
    assert all(k.startswith(("OPENBLAS_", "OMP_")) for k in tiny["env"])
    assert set(tiny["others_cpu_share"]) == {"bootstrap", "bootstrap_pool", "kernel", "floor", "naive"}
    assert tiny["pool_threads"] >= 1
    assert all(v is None or 0.0 <= v <= 1.0 for v in tiny["others_cpu_share"].values())
    json.dumps(tiny)  # one JSON-serialisable record


def test_main_prints_one_json_line(bench: ModuleType, capsys: pytest.CaptureFixture[str]) -> None:
    assert bench.main(["--quick", "--cells", "20", "--resamples", "12", "--skip-naive"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert len(lines) == 1
    line = json.loads(lines[0])
    assert line["case"]["cells"] == 20 and line["case"]["resamples"] == 12
    assert line["case"]["years"] == bench.QUICK["years"]
    assert line["naive_s_scaled"] is None and line["targets_met"]["speedup_vs_naive"] is None


def test_bad_option_is_refused_with_its_value(bench: ModuleType) -> None:
    with pytest.raises(SystemExit, match="--years must be >= 2.*got 1"):
        bench.options(bench.parse_args(["--quick", "--years", "1"]))
    with pytest.raises(SystemExit, match="--cells must be >= 1, got 0"):
        bench.options(bench.parse_args(["--cells", "0"]))


def test_synthetic_case_scores_like_scipy(bench: ModuleType) -> None:
    """The benchmark's cube is what the engine scores: its point ACC of a cell equals
    scipy.stats.pearsonr over that cell's years x starts samples (reference: scipy)."""
    cube, weights = bench.build_case(years=8, starts=4, windows=2, cells=10, seed=5)
    assert weights.shape == (1, 10) and (weights > 0).all()
    boot = bench.make_bootstrap(8, resamples=20, seed=5)
    from app.cube.assess import assess_cells

    res = assess_cells(cube, boot, weights)
    for w, c in ((0, 0), (1, 7)):
        obs = cube.observed[:, :, w, c].ravel()
        r1 = sps.pearsonr(cube.realistic[:, :, w, c].ravel(), obs).statistic
        r2 = sps.pearsonr(cube.scrambled[:, :, w, c].ravel(), obs).statistic
        assert res.acc_realistic[w, c] == pytest.approx(r1, abs=1e-12)
        assert res.acc_scrambled[w, c] == pytest.approx(r2, abs=1e-12)


def test_pool_run_gives_the_serial_results(bench: ModuleType) -> None:
    """The thread-pool timing stage computes what assess_cells computes (same resampled years)."""
    from app.cube.assess import assess_cells

    cube, weights = bench.build_case(years=8, starts=3, windows=2, cells=50, seed=2)
    boot = bench.make_bootstrap(8, resamples=25, seed=2)
    serial = assess_cells(cube, boot, weights, block_cells=16)
    pooled = bench.assess_cells_on_pool(cube, boot, weights, threads=2, block_cells=16)
    for name in ("acc_realistic", "acc_scrambled", "gain_low", "gain_high", "p_value"):
        np.testing.assert_array_equal(getattr(pooled, name), getattr(serial, name))
    np.testing.assert_allclose(
        pooled.region_mean[0].gain.low, serial.region_mean[0].gain.low, rtol=0, atol=1e-12
    )
