"""Skill assessment of an anomaly cube: per-cell maps, regional curves, conditional gain.

The cube holds ensemble-mean and observed anomalies shaped ``(n_years, n_slots, n_windows,
n_cells)`` (see :mod:`app.cube.inputs`). Everything here calls the numpy kernels of
:mod:`app.stats` on blocks of cells, with one resample-count matrix shared by every cell, region
and stratum of a run, so that all intervals come from the same resampled years.

Beside every raw scrambled ACC and gain sits the one corrected for the scrambled control's
design (:mod:`app.stats.scramble`): with land states from other years of the period the raw
gain is ``n/(n-1)`` times the true one; under ``"independent"`` the corrected values are the raw
ones. A cell is scored only with at least :data:`MIN_CELL_YEARS` years and ``min_cell_samples``
samples; region means of cell ACCs weight cells by their samples (Fisher-z inverse variance)
and read their intervals centred on the point in z space.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from app.stats.anomalies import weighted_sums
from app.stats.bootstrap import resampled_correlations
from app.stats.conditional import StratumEstimate, conditional_gain
from app.stats.fdr import benjamini_hochberg
from app.stats.fisher import MIN_CELL_SAMPLES, fisher_z, weighted_z_sums
from app.stats.intervals import Interval, IntervalMethod, bootstrap_interval
from app.stats.resample import MIN_YEAR_BLOCKS
from app.stats.scramble import DEFAULT_SCRAMBLE, corrected_scrambled, gain_factor
from app.stats.sums import correlations_from_sums, total_sums, yearly_sums

FloatArray = NDArray[np.float64]

#: a cell (and a regional series) needs this many years (see app.stats.resample.MIN_YEAR_BLOCKS)
MIN_CELL_YEARS = MIN_YEAR_BLOCKS
#: how region means of cell ACCs read their intervals (centred on the point in z space)
REGION_MEAN_METHOD: IntervalMethod = "centred"


@dataclass
class Cube:
    """Anomalies of a run, cells flattened (lat-major). ``land`` is ``(Y, S, n_cells)``."""

    realistic: FloatArray
    scrambled: FloatArray
    observed: FloatArray
    land: FloatArray | None

    @property
    def n_years(self) -> int:
        return int(self.realistic.shape[0])

    @property
    def n_windows(self) -> int:
        return int(self.realistic.shape[2])

    @property
    def n_cells(self) -> int:
        return int(self.realistic.shape[3])


@dataclass(frozen=True)
class Bootstrap:
    """The resampling of a run: counts ``(B, n_years)``, how intervals are read, the design of
    the scrambled control and the smallest cell a region mean admits."""

    counts: FloatArray
    confidence: float
    method: IntervalMethod
    scramble: str = DEFAULT_SCRAMBLE
    min_cell_samples: int = MIN_CELL_SAMPLES

    @property
    def resamples(self) -> int:
        return int(self.counts.shape[0])

    def interval(
        self, draws: FloatArray, point: FloatArray, *, method: IntervalMethod | None = None
    ) -> Interval:
        return bootstrap_interval(
            draws, point=point, confidence=self.confidence, n_blocks=self.counts.shape[1],
            method=method or self.method,
        )


@dataclass
class Estimate:
    """Point values and intervals of both ACCs and the gain, raw and corrected for the design of
    the scrambled control, per column (window, cell, ...)."""

    acc_realistic: FloatArray
    acc_scrambled: FloatArray
    realistic: Interval
    scrambled: Interval
    gain: Interval
    n_samples: FloatArray
    n_years: FloatArray
    acc_scrambled_corrected: FloatArray
    scrambled_corrected: Interval
    gain_corrected: Interval
    interval_method: str

    @property
    def gain_value(self) -> FloatArray:
        return self.acc_realistic - self.acc_scrambled

    @property
    def gain_corrected_value(self) -> FloatArray:
        return self.acc_realistic - self.acc_scrambled_corrected


def _enough(n_samples: FloatArray, n_years: FloatArray, boot: Bootstrap) -> NDArray[np.bool_]:
    return (n_samples >= boot.min_cell_samples) & (n_years >= MIN_CELL_YEARS)


def estimate_series(x1: FloatArray, x2: FloatArray, y: FloatArray, boot: Bootstrap) -> Estimate:
    """ACCs and gain of series shaped ``(Y, S, *columns)`` (e.g. regional means per window)."""
    yearly = yearly_sums(x1, x2, y)  # (Y, 9, *columns)
    cols = yearly.shape[2:]
    flat = yearly.reshape(yearly.shape[0], yearly.shape[1], -1)
    totals = total_sums(flat)
    n, ny = totals[0], (flat[:, 0] > 0).sum(axis=0).astype(np.float64)
    r1, r2 = correlations_from_sums(totals)
    ok = _enough(n, ny, boot)
    r1, r2 = np.where(ok, r1, np.nan), np.where(ok, r2, np.nan)
    d1, d2 = resampled_correlations(flat, boot.counts)
    r2c = corrected_scrambled(r1, r2, n_years=ny, design=boot.scramble)
    d2c = corrected_scrambled(d1, d2, n_years=ny, design=boot.scramble)

    def iv(draws: FloatArray, point: FloatArray) -> Interval:
        return _reshape(_masked(boot.interval(draws, point), ok), cols)

    return Estimate(
        acc_realistic=r1.reshape(cols),
        acc_scrambled=r2.reshape(cols),
        realistic=iv(d1, r1),
        scrambled=iv(d2, r2),
        gain=iv(d1 - d2, r1 - r2),
        n_samples=n.reshape(cols),
        n_years=ny.reshape(cols),
        acc_scrambled_corrected=r2c.reshape(cols),
        scrambled_corrected=iv(d2c, r2c),
        gain_corrected=iv(d1 - d2c, r1 - r2c),
        interval_method=boot.method,
    )


def _masked(iv: Interval, ok: NDArray[np.bool_]) -> Interval:
    """NaN bounds and p-value where a column is not scored (too few years or samples)."""
    return Interval(
        low=np.where(ok, iv.low, np.nan), high=np.where(ok, iv.high, np.nan),
        p_value=np.where(ok, iv.p_value, np.nan),
    )


def _reshape(iv: Interval, shape: tuple[int, ...]) -> Interval:
    return Interval(low=iv.low.reshape(shape), high=iv.high.reshape(shape), p_value=iv.p_value.reshape(shape))


def _scaled(iv: Interval, factor: FloatArray) -> Interval:
    """The interval of ``factor * draws`` (factor > 0): order statistics and the median shift
    commute with a positive factor, and no draw changes sign, so the p-value is the same."""
    return Interval(low=iv.low * factor, high=iv.high * factor, p_value=iv.p_value)


@dataclass
class CellResults:
    """Per-cell maps ``(n_windows, n_cells)`` and, per region, Fisher-z mean ACCs."""

    acc_realistic: FloatArray
    acc_scrambled: FloatArray
    gain_low: FloatArray
    gain_high: FloatArray
    p_value: FloatArray
    n_samples: FloatArray
    n_years: FloatArray
    acc_scrambled_corrected: FloatArray
    gain_corrected_low: FloatArray
    gain_corrected_high: FloatArray
    region_mean: list[Estimate]  # one per region, columns = windows

    @property
    def gain(self) -> FloatArray:
        return self.acc_realistic - self.acc_scrambled

    @property
    def gain_corrected(self) -> FloatArray:
        return self.acc_realistic - self.acc_scrambled_corrected


@dataclass
class BlockStats:
    """What one block of cells contributes: its map values and its Fisher-z region sums."""

    cells: NDArray[np.int64]
    maps: dict[str, FloatArray]  # each (n_windows, n_block_cells)
    z_point: FloatArray  # (3, R, W): realistic, scrambled, scrambled corrected
    w_point: FloatArray
    z_draws: FloatArray  # (3, R, B, W)
    w_draws: FloatArray


MAP_KEYS = ("r1", "r2", "low", "high", "p", "n", "ny", "r2c", "clow", "chigh")


def block_stats(
    realistic: FloatArray,
    scrambled: FloatArray,
    observed: FloatArray,
    cells: NDArray[np.int64],
    boot: Bootstrap,
    weights: FloatArray,
) -> BlockStats:
    """Bootstrap one block of cells: anomalies ``(Y, S, W, m)``, ``weights`` ``(R, m)``."""
    W, m, B = realistic.shape[2], realistic.shape[3], boot.resamples
    yearly = yearly_sums(realistic, scrambled, observed)  # (Y, 9, W, m)
    flat = yearly.reshape(yearly.shape[0], yearly.shape[1], W * m)
    totals = total_sums(flat)
    n, ny = totals[0], (flat[:, 0] > 0).sum(axis=0).astype(np.float64)
    r1, r2 = correlations_from_sums(totals)
    ok = _enough(n, ny, boot)
    r1, r2 = np.where(ok, r1, np.nan), np.where(ok, r2, np.nan)
    d1, d2 = resampled_correlations(flat, boot.counts)
    gain_iv = _masked(boot.interval(d1 - d2, r1 - r2), ok)
    factor = gain_factor(ny, design=boot.scramble)
    corrected_iv = _scaled(gain_iv, factor)
    r2c = corrected_scrambled(r1, r2, n_years=ny, design=boot.scramble)
    d2c = corrected_scrambled(d1, d2, n_years=ny, design=boot.scramble)
    maps = {
        "r1": r1, "r2": r2, "low": gain_iv.low, "high": gain_iv.high, "p": gain_iv.p_value,
        "n": n, "ny": ny, "r2c": r2c, "clow": corrected_iv.low, "chigh": corrected_iv.high,
    }
    maps = {k: v.reshape(W, m) for k, v in maps.items()}
    # cells keep their full-sample weights in every resample (the weights are part of the
    # estimator); a cell not scored has weight 0 throughout
    R = weights.shape[0]
    z_point, w_point = np.zeros((3, R, W)), np.zeros((3, R, W))
    z_draws, w_draws = np.zeros((3, R, B, W)), np.zeros((3, R, B, W))
    n_point = np.where(ok, n, 0.0).reshape(W, m)
    for e, (pt, dr) in enumerate(((r1, d1), (r2, d2), (r2c, d2c))):
        z_point[e], w_point[e] = weighted_z_sums(
            fisher_z(pt).reshape(W, m), n_point, weights, min_samples=boot.min_cell_samples
        )
        z_draws[e], w_draws[e] = weighted_z_sums(
            fisher_z(dr).reshape(B, W, m), n_point, weights, min_samples=boot.min_cell_samples
        )
    return BlockStats(np.asarray(cells), maps, z_point, w_point, z_draws, w_draws)


def cell_blocks(weights: FloatArray, n_cells: int, *, block_cells: int) -> list[NDArray[np.int64]]:
    """The cells to bootstrap (those inside some region), in blocks."""
    wanted = np.flatnonzero(weights.sum(axis=0) > 0) if weights.shape[0] else np.arange(n_cells)
    return [wanted[i : i + block_cells] for i in range(0, wanted.size, block_cells)]


def combine_blocks(
    blocks: list[BlockStats], boot: Bootstrap, weights: FloatArray, *, n_windows: int, n_cells: int
) -> CellResults:
    """Maps and region means of ACC from all blocks (the order of blocks does not matter)."""
    W, B, R = n_windows, boot.resamples, weights.shape[0]
    maps = {k: np.full((W, n_cells), np.nan) for k in MAP_KEYS}
    z_point, w_point = np.zeros((3, R, W)), np.zeros((3, R, W))
    z_draws, w_draws = np.zeros((3, R, B, W)), np.zeros((3, R, B, W))
    for blk in sorted(blocks, key=lambda b: int(b.cells[0]) if b.cells.size else -1):
        for k in MAP_KEYS:
            maps[k][:, blk.cells] = blk.maps[k]
        z_point += blk.z_point
        w_point += blk.w_point
        z_draws += blk.z_draws
        w_draws += blk.w_draws
    with np.errstate(invalid="ignore", divide="ignore"):
        zp = z_point / w_point  # (3, R, W) mean z
        zd = z_draws / w_draws  # (3, R, B, W)
    accp, accd = np.tanh(zp), np.tanh(zd)
    inside = weights[:, None, :] > 0
    regions = []
    for r in range(R):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN slices of empty windows
            entered = inside[r] & (maps["n"] >= boot.min_cell_samples)
            n_max = np.nanmax(np.where(entered, maps["n"], np.nan), axis=1)
            ny_max = np.nanmax(np.where(entered, maps["ny"], np.nan), axis=1)

        def z_interval(e: int, *, rr: int = r) -> Interval:
            iv = boot.interval(zd[e, rr], zp[e, rr], method=REGION_MEAN_METHOD)
            return Interval(low=np.tanh(iv.low), high=np.tanh(iv.high), p_value=iv.p_value)

        def gain_interval(e: int, *, rr: int = r) -> Interval:
            return boot.interval(
                accd[0, rr] - accd[e, rr], accp[0, rr] - accp[e, rr], method=REGION_MEAN_METHOD
            )

        regions.append(
            Estimate(
                acc_realistic=accp[0, r],
                acc_scrambled=accp[1, r],
                realistic=z_interval(0),
                scrambled=z_interval(1),
                gain=gain_interval(1),
                n_samples=n_max,
                n_years=ny_max,
                acc_scrambled_corrected=accp[2, r],
                scrambled_corrected=z_interval(2),
                gain_corrected=gain_interval(2),
                interval_method=REGION_MEAN_METHOD,
            )
        )
    return CellResults(
        acc_realistic=maps["r1"],
        acc_scrambled=maps["r2"],
        gain_low=maps["low"],
        gain_high=maps["high"],
        p_value=maps["p"],
        n_samples=maps["n"],
        n_years=maps["ny"],
        acc_scrambled_corrected=maps["r2c"],
        gain_corrected_low=maps["clow"],
        gain_corrected_high=maps["chigh"],
        region_mean=regions,
    )


def assess_cells(
    cube: Cube,
    boot: Bootstrap,
    weights: FloatArray,
    *,
    block_cells: int = 256,
    progress: Callable[[float], None] | None = None,
) -> CellResults:
    """Bootstrap every cell once (in blocks, here in this process); maps and region means.

    ``weights`` is ``(n_regions, n_cells)``: cos(lat) inside each region. The region mean of ACC
    is the sample-weighted mean of the cell ACCs in Fisher z space, transformed back, for the
    point value and for each resample alike (its interval comes from the same resampled years).
    """
    blocks = cell_blocks(weights, cube.n_cells, block_cells=block_cells)
    done = []
    for i, cells in enumerate(blocks):
        done.append(
            block_stats(
                cube.realistic[..., cells], cube.scrambled[..., cells], cube.observed[..., cells],
                cells, boot, weights[:, cells],
            )
        )
        if progress is not None:
            progress((i + 1) / len(blocks))
    return combine_blocks(done, boot, weights, n_windows=cube.n_windows, n_cells=cube.n_cells)


def significant_cells(p_value: FloatArray, *, alpha: float) -> NDArray[np.bool_]:
    """Benjamini-Hochberg over the cells of each window's map: ``(n_windows, n_cells)``."""
    return np.stack([benjamini_hochberg(p_value[w], alpha=alpha) for w in range(p_value.shape[0])])


def region_series(cube: Cube, weights: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray | None]:
    """cos(lat)-weighted regional-mean anomalies ``(n_regions, Y, S, W)`` (land: ``(R, Y, S)``)."""
    out = []
    for field_ in (cube.realistic, cube.scrambled, cube.observed):
        num, den = weighted_sums(field_, weights)
        with np.errstate(invalid="ignore", divide="ignore"):
            out.append(np.where(den > 0, num / den, np.nan))
    land = None
    if cube.land is not None:
        num, den = weighted_sums(cube.land, weights)
        with np.errstate(invalid="ignore", divide="ignore"):
            land = np.where(den > 0, num / den, np.nan)
    return out[0], out[1], out[2], land


def estimate_strata(
    x1: FloatArray, x2: FloatArray, y: FloatArray, z: FloatArray, boot: Bootstrap
) -> dict[str, StratumEstimate]:
    """Gain of series ``(Y, S, W)`` by stratum of the (re-standardised) land anomaly ``z``,
    scored about the full-period climatology (:func:`app.stats.conditional.conditional_gain`)."""
    return conditional_gain(
        x1, x2, y, z, boot.counts, confidence=boot.confidence, method=boot.method,
        scramble=boot.scramble,
    )
