"""Tiles of the grid: how big they may be, and the task that reduces and bootstraps one.

A run cuts the grid into spatial tiles whose working set fits the memory budget
(:func:`plan_tiles`); each :func:`tile_task` reads its tile of every input (init, member and lead
whole), reduces it to anomalies and bootstraps its cells in blocks. Tasks need nothing from each
other, so they run on a thread pool or on dask.distributed workers alike (:mod:`app.cube.parallel`).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from app.cube.assess import BlockStats, Bootstrap, block_stats
from app.cube.inputs import Prepared, TileAnomalies, prepare, reduce_tile
from app.cube.windows import LeadWindow

DEFAULT_MEMORY_BUDGET = 1 << 30
BLOCK_CELLS = 256
#: share of the memory budget left to tile tasks; the rest holds the interpreter, the libraries,
#: the assembled anomaly cube and the maps (a fresh process with numpy, xarray, netCDF4 and dask
#: imported is some 250 MB)
TASK_SHARE = 0.5


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


def task_budget(memory_budget: int | None, *, workers: int) -> int:
    """Bytes one tile task may use: the budget's task share, split over concurrent tasks."""
    return int(TASK_SHARE * (memory_budget or DEFAULT_MEMORY_BUDGET)) // max(1, workers)


def block_size(budget: int, *, resamples: int, n_windows: int) -> int:
    """Cells bootstrapped together: BLOCK_CELLS, fewer when their draws would not fit ``budget``."""
    # about 28 float64 (resample x window) arrays per cell are alive in block_stats: both ACCs,
    # the gain, the corrected scrambled ACC, their Fisher z and the partition copies
    return max(1, min(BLOCK_CELLS, budget // max(1, 224 * resamples * n_windows)))


@dataclass(frozen=True)
class InputSpec:
    """What a worker process needs to open the inputs itself (picklable)."""

    realistic: str
    scrambled: str
    observations: str
    land_state: str | None
    variable: str | None
    lead_windows: tuple[LeadWindow, ...] | None
    equalize_members: bool
    seed: int
    min_coverage: float

    def open(self) -> Prepared:
        return prepare(
            self.realistic, self.scrambled, self.observations, self.land_state,
            variable=self.variable, windows=list(self.lead_windows) if self.lead_windows else None,
            equalize_members=self.equalize_members, seed=self.seed, min_coverage=self.min_coverage,
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
