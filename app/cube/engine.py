"""The scoring run: options, input checks, the tile-by-tile reduction and the assessment.

:func:`run` opens the inputs (:mod:`app.cube.inputs`), reduces them to an anomaly cube one
spatial tile at a time (tile size from the memory budget), then assesses the cube
(:mod:`app.cube.assess`): per-cell maps with field significance, both regional aggregations for
every requested region, and the gain conditioned on the initial land anomaly. The result layer
turns the returned :class:`RunOutput` into files and JSON.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from app.cube.assess import (
    BlockStats,
    Bootstrap,
    CellResults,
    Cube,
    Estimate,
    assess_cells,
    block_stats,
    combine_blocks,
    estimate_series,
    estimate_strata,
    region_series,
    significant_cells,
)
from app.cube.inputs import Prepared, TileAnomalies, prepare, reduce_tile
from app.cube.parallel import TaskRunner
from app.cube.regions import ALL, Region, region_weights, resolve_region
from app.cube.windows import LeadWindow, windows_from_dicts
from app.errors import InputError, ParameterError
from app.sizes import parse_size
from app.stats.intervals import INTERVAL_METHODS
from app.stats.resample import year_block_counts

MAX_RESAMPLES = 10_000
DEFAULT_MEMORY_BUDGET = 1 << 30
Progress = Callable[[float, str], None]


@dataclass
class ScoreOptions:
    """Everything that decides the numbers of a run besides the input files."""

    variable: str | None = None
    lead_windows: list[dict[str, Any]] | None = None
    regions: list[Any] | None = None
    resamples: int = 1000
    seed: int = 1234
    confidence: float = 0.95
    interval: str = "expanded"
    fdr_alpha: float = 0.10
    equalize_members: bool = False
    memory_budget: int | None = None
    leave_one_out: bool = True

    def validate(self) -> ScoreOptions:
        if not isinstance(self.resamples, int) or not 1 <= self.resamples <= MAX_RESAMPLES:
            raise ParameterError(f"resamples must be an integer in 1..{MAX_RESAMPLES}, got {self.resamples!r}")
        if not 0.5 <= float(self.confidence) < 1.0:
            raise ParameterError(f"confidence must lie in [0.5, 1), got {self.confidence!r}")
        if self.interval not in INTERVAL_METHODS:
            raise ParameterError(f"unknown interval method {self.interval!r}; choose one of {', '.join(INTERVAL_METHODS)}")
        if not 0.0 < float(self.fdr_alpha) < 1.0:
            raise ParameterError(f"fdr_alpha must lie strictly between 0 and 1, got {self.fdr_alpha!r}")
        if self.memory_budget is not None and self.memory_budget < 16 * 2**20:
            raise ParameterError(f"memory budget must be at least 16MiB, got {self.memory_budget} bytes")
        windows_from_dicts(self.lead_windows)
        for spec in self.regions or []:
            resolve_region(spec)
        return self

    def windows(self) -> list[LeadWindow] | None:
        return windows_from_dicts(self.lead_windows)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> ScoreOptions:
        known = set(cls.__dataclass_fields__)
        unknown = sorted(set(data) - known)
        if unknown:
            raise ParameterError(f"unknown option(s) {unknown}; valid options: {sorted(known)}")
        return cls(**data)


def parse_memory_budget(text: str | int | None) -> int | None:
    """``"512MiB"``, ``"2GiB"``, ``"1.5GB"`` or a byte count -> bytes (see :mod:`app.sizes`)."""
    if text is None:
        return None
    try:
        return parse_size(text)
    except ValueError as exc:
        raise ParameterError(f"memory budget: {exc}") from exc


def check_inputs(
    realistic: str | Path,
    scrambled: str | Path,
    observations: str | Path,
    land_state: str | Path | None = None,
    *,
    variable: str | None = None,
    lead_windows: list[dict[str, Any]] | None = None,
) -> dict[str, Any]:
    """Open and cross-check the inputs without scoring; the layout summary, or InputError."""
    prep = prepare(
        realistic, scrambled, observations, land_state, variable=variable, windows=windows_from_dicts(lead_windows)
    )
    try:
        return prep.summary()
    finally:
        prep.close()


@dataclass
class RunOutput:
    """Everything a run computed, as arrays and metadata (the result layer formats it)."""

    options: ScoreOptions
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
    strata: list[dict[str, tuple[Estimate, float]]] | None  # per region
    counts: NDArray[np.float64] = field(repr=False)
    region_masks: NDArray[np.float64] = field(repr=False)


def tile_bytes_per_cell(prep: Prepared) -> int:
    """Working-set bytes that one grid cell of a tile needs while it is reduced.

    Per hindcast (read one after the other): the raw tile in its own dtype (float32 -> 4 bytes),
    the NaN-free copy of the ensemble-mean sum and the NaN mask (9 bytes per value, float32);
    the observations with their float64 cumulative sums (40 bytes per day); the float64
    anomalies of both experiments and the observations with their temporaries.
    """
    n_init = prep.init_dates.size
    n_lead = int(prep.realistic.lead_days.size if prep.realistic.lead_days is not None else 1)
    n_mem = max(int(prep.realistic.members or 1), int(prep.scrambled.members or 1))
    n_time = int(prep.observations.dates.size if prep.observations.dates is not None else 1)
    itemsize = max(prep.realistic.dataset[prep.realistic.variable].dtype.itemsize, 4)
    hindcast = (2 * itemsize + 1) * n_init * n_mem * n_lead
    return int(hindcast + 40 * n_time + 64 * n_init * len(prep.windows))


def plan_tiles(prep: Prepared, *, budget: int) -> list[tuple[slice, slice]]:
    """Spatial tiles (latitude band x longitude run) whose working set fits ``budget`` bytes.

    Init, member and lead stay whole inside a tile; a tile is whole latitude rows when a row
    fits, else a run of cells along one row.
    """
    n_lat, n_lon = prep.lat.size, prep.lon.size
    cells = max(1, budget // max(1, tile_bytes_per_cell(prep)))
    if cells >= n_lon:
        rows = min(n_lat, cells // n_lon)
        return [(slice(i, min(n_lat, i + rows)), slice(0, n_lon)) for i in range(0, n_lat, rows)]
    return [
        (slice(i, i + 1), slice(j, min(n_lon, j + cells))) for i in range(n_lat) for j in range(0, n_lon, cells)
    ]


@dataclass(frozen=True)
class InputSpec:
    """What a worker process needs to open the inputs itself (picklable)."""

    realistic: str
    scrambled: str
    observations: str
    land_state: str | None
    variable: str | None
    lead_windows: tuple[tuple[str, int, int], ...] | None
    equalize_members: bool
    seed: int

    def open(self) -> Prepared:
        windows = [LeadWindow(*w) for w in self.lead_windows] if self.lead_windows else None
        return prepare(
            self.realistic, self.scrambled, self.observations, self.land_state,
            variable=self.variable, windows=windows, equalize_members=self.equalize_members, seed=self.seed,
        )


_OPENED: dict[InputSpec, Prepared] = {}
_OPENED_LOCK = threading.Lock()


def _opened(spec: InputSpec) -> Prepared:
    """The inputs opened once per worker process and kept for its later tasks."""
    with _OPENED_LOCK:
        if spec not in _OPENED:
            while len(_OPENED) >= 4:
                _OPENED.pop(next(iter(_OPENED))).close()
            _OPENED[spec] = spec.open()
        return _OPENED[spec]


@dataclass
class TileOutput:
    """One tile task's result: its anomalies and its cells' bootstrap contributions."""

    cells: NDArray[np.int64]  # flat (lat-major) indices of the tile's cells
    anomalies: TileAnomalies
    blocks: list[BlockStats]


def tile_task(
    source: Prepared | InputSpec,
    rows: slice,
    cols: slice,
    weights: NDArray[np.float64],
    boot: Bootstrap,
    leave_one_out: bool,
    block_cells: int,
) -> TileOutput:
    """Reduce one tile of the grid and bootstrap its cells (runs in any worker)."""
    prep = source if isinstance(source, Prepared) else _opened(source)
    tile = reduce_tile(prep, lat=rows, lon=cols, leave_one_out=leave_one_out)
    n_lon = prep.lon.size
    lat_idx = np.arange(prep.lat.size)[rows]
    lon_idx = np.arange(n_lon)[cols]
    flat = (lat_idx[:, None] * n_lon + lon_idx[None, :]).ravel()
    n_cells = flat.size
    blocks = []
    for i in range(0, n_cells, block_cells):
        local = np.arange(i, min(n_cells, i + block_cells))
        blocks.append(
            block_stats(
                tile.realistic[..., local], tile.scrambled[..., local], tile.observed[..., local],
                flat[local], boot, weights[:, flat[local]],
            )
        )
    return TileOutput(cells=flat, anomalies=tile, blocks=blocks)


def run(
    realistic: str | Path,
    scrambled: str | Path,
    observations: str | Path,
    land_state: str | Path | None = None,
    *,
    options: ScoreOptions,
    progress: Progress | None = None,
    scheduler: str | None = None,
    threads: int | None = None,
) -> RunOutput:
    """Score a hindcast pair (see module docstring). Deterministic for a given seed.

    With ``scheduler`` (a dask.distributed address) the tile tasks run on that cluster, each
    worker opening the files itself; otherwise on a local thread pool.
    """
    options.validate()
    report = progress or (lambda fraction, message: None)
    windows = options.windows()
    prep = prepare(
        realistic, scrambled, observations, land_state,
        variable=options.variable, windows=windows,
        equalize_members=options.equalize_members, seed=options.seed,
    )
    try:
        regions = _regions(options)
        weights = region_weights(regions, prep.lat, prep.lon)
        counts = year_block_counts(prep.years.size, resamples=options.resamples, seed=options.seed)
        boot = Bootstrap(counts=counts, confidence=options.confidence, method=options.interval)  # type: ignore[arg-type]
        with TaskRunner(scheduler, threads=threads or min(2, os.cpu_count() or 1)) as runner:
            budget = task_budget(options.memory_budget, workers=1 if runner.distributed else runner.threads)
            block = max(1, min(BLOCK_CELLS, budget // max(1, 160 * options.resamples * len(prep.windows))))
            source: Prepared | InputSpec = prep
            if runner.distributed:
                source = InputSpec(
                    str(Path(realistic).resolve()), str(Path(scrambled).resolve()),
                    str(Path(observations).resolve()),
                    str(Path(land_state).resolve()) if land_state is not None else None,
                    options.variable,
                    tuple((w.label, w.first_day, w.last_day) for w in windows) if windows else None,
                    options.equalize_members, options.seed,
                )
            tasks = [
                (source, rows, cols, weights, boot, options.leave_one_out, block)
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
        out = _finish(cube, cells, prep.summary(), prep.windows, prep.lat, prep.lon, prep.years, prep.slots,
                      regions=regions, weights=weights, boot=boot, options=options)
    finally:
        prep.close()
    report(1.0, "assessed")
    return out


BLOCK_CELLS = 256
#: share of the memory budget left to tile tasks; the rest holds the interpreter, the libraries,
#: the assembled anomaly cube and the maps (a fresh process with numpy, xarray, netCDF4 and dask
#: imported is some 250 MB)
TASK_SHARE = 0.5


def task_budget(memory_budget: int | None, *, workers: int) -> int:
    """Bytes one tile task may use: the budget's task share, split over concurrent tasks."""
    return int(TASK_SHARE * (memory_budget or DEFAULT_MEMORY_BUDGET)) // max(1, workers)


def _regions(options: ScoreOptions) -> list[Region]:
    return [ALL] + [r for r in (resolve_region(s) for s in options.regions or []) if r.id != "all"]


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


def _finish(
    cube: Cube,
    cells: CellResults,
    summary: dict[str, Any],
    windows: list[LeadWindow],
    lat: NDArray[np.float64],
    lon: NDArray[np.float64],
    years: NDArray[np.int64],
    slots: list[str],
    *,
    regions: list[Region],
    weights: NDArray[np.float64],
    boot: Bootstrap,
    options: ScoreOptions,
) -> RunOutput:
    """Field significance, regional series and strata: the cheap last step of a run."""
    significant = significant_cells(cells.p_value, alpha=options.fdr_alpha)
    x1r, x2r, yr, zr = region_series(cube, weights)
    series = [estimate_series(x1r[k], x2r[k], yr[k], boot) for k in range(len(regions))]
    strata = None
    if zr is not None:
        strata = [estimate_strata(x1r[k], x2r[k], yr[k], zr[k], boot) for k in range(len(regions))]
    return RunOutput(
        options=options, summary=summary, windows=windows, lat=lat, lon=lon, years=years, slots=slots,
        cube=cube, cells=cells, significant=significant, regions=regions, series=series, strata=strata,
        counts=boot.counts, region_masks=weights,
    )


@dataclass
class RegionAssessment:
    """Both aggregations (and the strata, with a land state) of one region."""

    region: Region
    series: Estimate
    mean_of_acc: Estimate
    fraction_significant: NDArray[np.float64]
    strata: dict[str, tuple[Estimate, float]] | None


def assess_region(
    cube: Cube,
    region: str | dict[str, Any] | Region,
    *,
    lat: NDArray[np.float64],
    lon: NDArray[np.float64],
    options: ScoreOptions,
    significant: NDArray[np.bool_] | None = None,
) -> RegionAssessment:
    """One region of an already reduced cube, with the run's own resampled years (same seed)."""
    reg = region if isinstance(region, Region) else resolve_region(region)
    weights = region_weights([reg], lat, lon)
    counts = year_block_counts(cube.n_years, resamples=options.resamples, seed=options.seed)
    boot = Bootstrap(counts=counts, confidence=options.confidence, method=options.interval)  # type: ignore[arg-type]
    cells = assess_cells(cube, boot, weights)
    x1r, x2r, yr, zr = region_series(cube, weights)
    strata = estimate_strata(x1r[0], x2r[0], yr[0], zr[0], boot) if zr is not None else None
    return RegionAssessment(
        region=reg,
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
