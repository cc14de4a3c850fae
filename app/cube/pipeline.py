"""The scoring pipeline: open the inputs, reduce them tile by tile, assess the anomaly cube.

:func:`run` opens the inputs (:mod:`app.cube.inputs`), reduces them to an anomaly cube one
spatial tile at a time (:mod:`app.cube.tiles`, tile size from the memory budget), then assesses
the cube (:mod:`app.cube.assess`): per-cell maps with field significance, both regional
aggregations for every requested region, and the gain conditioned on the initial land anomaly.
The result layer turns the returned :class:`RunOutput` into files and JSON.

What decides the numbers arrives as a :class:`Scoring` (built by the run layer from its validated
options, :mod:`app.runs.options`); nothing here checks an option again.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from app.cube.assess import (
    Bootstrap,
    CellResults,
    Cube,
    Estimate,
    assess_cells,
    combine_blocks,
    estimate_series,
    estimate_strata,
    region_series,
    significant_cells,
)
from app.cube.inputs import DEFAULT_MIN_COVERAGE, Prepared, prepare
from app.cube.parallel import TaskRunner
from app.cube.regions import ALL, Region, region_weights
from app.cube.tiles import InputSpec, TileOutput, block_size, plan_tiles, task_budget, tile_task
from app.cube.windows import LeadWindow
from app.errors import InputError
from app.stats.conditional import StratumEstimate
from app.stats.fisher import MIN_CELL_SAMPLES
from app.stats.resample import year_block_counts
from app.stats.scramble import DEFAULT_SCRAMBLE

Progress = Callable[[float, str], None]


@dataclass(frozen=True)
class Resampling:
    """The year-block bootstrap of a run: how many resamples, their seed, how intervals are read."""

    resamples: int = 1000
    seed: int = 1234
    confidence: float = 0.95
    interval: str = "expanded"

    def bootstrap(
        self, n_years: int, *, scramble: str = DEFAULT_SCRAMBLE, min_cell_samples: int = MIN_CELL_SAMPLES
    ) -> Bootstrap:
        counts = year_block_counts(n_years, resamples=self.resamples, seed=self.seed)
        return Bootstrap(
            counts=counts, confidence=self.confidence, method=self.interval,  # type: ignore[arg-type]
            scramble=scramble, min_cell_samples=min_cell_samples,
        )

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class Scoring:
    """Everything that decides the numbers of a run besides the input files (already valid)."""

    variable: str | None = None
    lead_windows: tuple[LeadWindow, ...] | None = None
    regions: tuple[Region, ...] = ()
    bootstrap: Resampling = field(default_factory=Resampling)
    fdr_alpha: float = 0.10
    equalize_members: bool = False
    leave_one_out: bool = True
    scramble: str = DEFAULT_SCRAMBLE
    min_cell_samples: int = MIN_CELL_SAMPLES
    min_coverage: float = DEFAULT_MIN_COVERAGE

    def make_bootstrap(self, n_years: int) -> Bootstrap:
        return self.bootstrap.bootstrap(
            n_years, scramble=self.scramble, min_cell_samples=self.min_cell_samples
        )


def check_inputs(
    realistic: str | Path,
    scrambled: str | Path,
    observations: str | Path,
    land_state: str | Path | None = None,
    *,
    variable: str | None = None,
    lead_windows: tuple[LeadWindow, ...] | None = None,
    regions: tuple[Region, ...] = (),
    min_coverage: float = DEFAULT_MIN_COVERAGE,
) -> dict[str, Any]:
    """Open and cross-check the inputs without scoring: the layout summary, or InputError (and
    ParameterError for a region that holds no cell of the grid)."""
    prep = prepare(
        realistic, scrambled, observations, land_state, variable=variable,
        windows=list(lead_windows) if lead_windows else None, min_coverage=min_coverage,
    )
    try:
        if regions:
            region_weights(list(regions), prep.lat, prep.lon)
        return prep.summary()
    finally:
        prep.close()


@dataclass
class RunOutput:
    """Everything a run computed, as arrays and metadata (the result layer formats it)."""

    scoring: Scoring
    summary: dict[str, Any]
    windows: list[LeadWindow]
    lat: NDArray[np.float64]
    lon: NDArray[np.float64]
    years: NDArray[np.int64]
    slots: list[str]
    cube: Cube
    cells: CellResults
    significant: NDArray[np.bool_]
    regions: list[Region]
    series: list[Estimate]  # acc_of_region_mean per region
    strata: list[dict[str, StratumEstimate]] | None  # per region
    counts: NDArray[np.float64] = field(repr=False)
    region_masks: NDArray[np.float64] = field(repr=False)


def run(
    realistic: str | Path,
    scrambled: str | Path,
    observations: str | Path,
    land_state: str | Path | None = None,
    *,
    scoring: Scoring,
    memory_budget: int | None = None,
    progress: Progress | None = None,
    scheduler: str | None = None,
    threads: int | None = None,
) -> RunOutput:
    """Score a hindcast pair (see module docstring). Deterministic for a given seed.

    With ``scheduler`` (a dask.distributed address) the tile tasks run on that cluster, each
    worker opening the files itself; otherwise on a local thread pool.
    """
    report = progress or (lambda fraction, message: None)
    windows = list(scoring.lead_windows) if scoring.lead_windows else None
    prep = prepare(
        realistic, scrambled, observations, land_state,
        variable=scoring.variable, windows=windows,
        equalize_members=scoring.equalize_members, seed=scoring.bootstrap.seed,
        min_coverage=scoring.min_coverage,
    )
    try:
        regions = [ALL] + [r for r in scoring.regions if r.id != "all"]
        weights = region_weights(regions, prep.lat, prep.lon)
        boot = scoring.make_bootstrap(prep.years.size)
        with TaskRunner(scheduler, threads=threads or min(2, os.cpu_count() or 1)) as runner:
            budget = task_budget(memory_budget, workers=1 if runner.distributed else runner.threads)
            block = block_size(budget, resamples=boot.resamples, n_windows=len(prep.windows))
            source: Prepared | InputSpec = prep
            if runner.distributed:
                source = InputSpec(
                    str(Path(realistic).resolve()), str(Path(scrambled).resolve()),
                    str(Path(observations).resolve()),
                    str(Path(land_state).resolve()) if land_state is not None else None,
                    scoring.variable, scoring.lead_windows,
                    scoring.equalize_members, scoring.bootstrap.seed, scoring.min_coverage,
                )
            tasks = [
                (source, rows, cols, weights, boot, scoring.leave_one_out, block)
                for rows, cols in plan_tiles(prep, budget=budget)
            ]
            outputs = runner.map(
                tile_task, tasks,
                progress=lambda done, total: report(0.95 * done / total, f"{done}/{total} tile tasks done"),
            )
        cube = _assemble(prep, outputs)
        _check_has_data(prep, cube)
        cells = combine_blocks(
            [b for o in outputs for b in o.blocks], boot, weights, n_windows=cube.n_windows, n_cells=cube.n_cells
        )
        significant = significant_cells(cells.p_value, alpha=scoring.fdr_alpha)
        x1r, x2r, yr, zr = region_series(cube, weights)
        series = [estimate_series(x1r[k], x2r[k], yr[k], boot) for k in range(len(regions))]
        strata = None
        if zr is not None:
            strata = [estimate_strata(x1r[k], x2r[k], yr[k], zr[k], boot) for k in range(len(regions))]
        summary: dict[str, Any] = prep.summary()
        cell_drops = np.sum([o.anomalies.coverage_dropped for o in outputs], axis=0)
        summary["coverage"] = dict(summary["coverage"])  # type: ignore[call-overload]
        summary["coverage"]["dropped_cell_samples"] = {
            w.label: int(d) for w, d in zip(prep.windows, cell_drops, strict=True)
        }
        out = RunOutput(
            scoring=scoring, summary=summary, windows=prep.windows, lat=prep.lat, lon=prep.lon,
            years=prep.years, slots=prep.slots, cube=cube, cells=cells, significant=significant,
            regions=regions, series=series, strata=strata, counts=boot.counts, region_masks=weights,
        )
    finally:
        prep.close()
    report(1.0, "assessed")
    return out


def _assemble(prep: Prepared, outputs: list[TileOutput]) -> Cube:
    Y, S, W = prep.years.size, len(prep.slots), len(prep.windows)
    n_cells = prep.n_cells
    fields = {k: np.full((Y, S, W, n_cells), np.nan) for k in ("x1", "x2", "y")}
    land = np.full((Y, S, n_cells), np.nan) if prep.land_state is not None else None
    for out in outputs:
        cells = out.cells
        fields["x1"][..., cells] = out.anomalies.realistic
        fields["x2"][..., cells] = out.anomalies.scrambled
        fields["y"][..., cells] = out.anomalies.observed
        if land is not None and out.anomalies.land is not None:
            land[..., cells] = out.anomalies.land
    return Cube(realistic=fields["x1"], scrambled=fields["x2"], observed=fields["y"], land=land)


def _check_has_data(prep: Prepared, cube: Cube) -> None:
    for src, values in ((prep.realistic, cube.realistic), (prep.scrambled, cube.scrambled), (prep.observations, cube.observed)):
        if not np.isfinite(values).any():
            raise InputError(
                "gives no finite anomaly on the scored start dates and windows (all NaN, or too few years per start slot)",
                file=src.name,
                variable=src.variable,
            )


@dataclass
class RegionAssessment:
    """Both aggregations (and the strata, with a land state) of one region."""

    region: Region
    series: Estimate
    mean_of_acc: Estimate
    fraction_significant: NDArray[np.float64]
    strata: dict[str, StratumEstimate] | None


def assess_region(
    cube: Cube,
    region: Region,
    *,
    lat: NDArray[np.float64],
    lon: NDArray[np.float64],
    scoring: Scoring,
    significant: NDArray[np.bool_] | None = None,
) -> RegionAssessment:
    """One region of an already reduced cube, with the run's own resampled years (same seed)."""
    weights = region_weights([region], lat, lon)
    boot = scoring.make_bootstrap(cube.n_years)
    cells = assess_cells(cube, boot, weights)
    x1r, x2r, yr, zr = region_series(cube, weights)
    strata = estimate_strata(x1r[0], x2r[0], yr[0], zr[0], boot) if zr is not None else None
    return RegionAssessment(
        region=region,
        series=estimate_series(x1r[0], x2r[0], yr[0], boot),
        mean_of_acc=cells.region_mean[0],
        fraction_significant=fraction_significant(significant, cells.n_samples, weights[0])
        if significant is not None
        else np.full(cube.n_windows, np.nan),
        strata=strata,
    )


def fraction_significant(
    significant: NDArray[np.bool_], n_samples: NDArray[np.float64], weights: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Per window: the fraction of the region's cells with data whose gain is FDR-significant."""
    inside = (weights > 0)[None, :] & (n_samples > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (significant & inside).sum(axis=1) / inside.sum(axis=1)


def region_assessments(out: RunOutput) -> list[RegionAssessment]:
    """The per-region view of a finished run (no recomputation)."""
    items = []
    for k, reg in enumerate(out.regions):
        items.append(
            RegionAssessment(
                region=reg,
                series=out.series[k],
                mean_of_acc=out.cells.region_mean[k],
                fraction_significant=fraction_significant(out.significant, out.cells.n_samples, out.region_masks[k]),
                strata=out.strata[k] if out.strata is not None else None,
            )
        )
    return items
