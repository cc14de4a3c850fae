"""Skill assessment of an anomaly cube: per-cell maps, regional curves, conditional gain.

The cube holds ensemble-mean and observed anomalies shaped ``(n_years, n_slots, n_windows,
n_cells)`` (see :mod:`app.cube.inputs`). Everything here calls the numpy kernels of
:mod:`app.stats` on blocks of cells, with one resample-count matrix shared by every cell, region
and stratum of a run, so that all intervals come from the same resampled years.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from app.stats.anomalies import weighted_sums
from app.stats.bootstrap import resampled_correlations
from app.stats.fdr import benjamini_hochberg
from app.stats.intervals import Interval, IntervalMethod, bootstrap_interval
from app.stats.sums import correlations_from_sums, total_sums, yearly_sums

FloatArray = NDArray[np.float64]
Z_CLIP = 1.0 - 1e-12


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
    """The resampling of a run: counts ``(B, n_years)`` and how intervals are read."""

    counts: FloatArray
    confidence: float
    method: IntervalMethod

    @property
    def resamples(self) -> int:
        return int(self.counts.shape[0])

    def interval(self, draws: FloatArray) -> Interval:
        return bootstrap_interval(
            draws, confidence=self.confidence, n_blocks=self.counts.shape[1], method=self.method
        )


@dataclass
class Estimate:
    """Point values and intervals of both ACCs and the gain, per column (window, cell, ...)."""

    acc_realistic: FloatArray
    acc_scrambled: FloatArray
    realistic: Interval
    scrambled: Interval
    gain: Interval
    n_samples: FloatArray
    n_years: FloatArray

    @property
    def gain_value(self) -> FloatArray:
        return self.acc_realistic - self.acc_scrambled


def estimate_series(x1: FloatArray, x2: FloatArray, y: FloatArray, boot: Bootstrap) -> Estimate:
    """ACCs and gain of series shaped ``(Y, S, *columns)``."""
    yearly = yearly_sums(x1, x2, y)  # (Y, 9, *columns)
    cols = yearly.shape[2:]
    flat = yearly.reshape(yearly.shape[0], yearly.shape[1], -1)
    r1, r2 = correlations_from_sums(total_sums(flat))
    d1, d2 = resampled_correlations(flat, boot.counts)
    est = Estimate(
        acc_realistic=r1.reshape(cols),
        acc_scrambled=r2.reshape(cols),
        realistic=_reshape(boot.interval(d1), cols),
        scrambled=_reshape(boot.interval(d2), cols),
        gain=_reshape(boot.interval(d1 - d2), cols),
        n_samples=total_sums(flat)[0].reshape(cols),
        n_years=(flat[:, 0] > 0).sum(axis=0).reshape(cols).astype(np.float64),
    )
    return est


def _reshape(iv: Interval, shape: tuple[int, ...]) -> Interval:
    return Interval(low=iv.low.reshape(shape), high=iv.high.reshape(shape), p_value=iv.p_value.reshape(shape))


@dataclass
class CellResults:
    """Per-cell maps ``(n_windows, n_cells)`` and, per region, Fisher-z mean ACCs."""

    acc_realistic: FloatArray
    acc_scrambled: FloatArray
    gain_low: FloatArray
    gain_high: FloatArray
    p_value: FloatArray
    n_samples: FloatArray
    region_mean: list[Estimate]  # one per region, columns = windows

    @property
    def gain(self) -> FloatArray:
        return self.acc_realistic - self.acc_scrambled


@dataclass
class BlockStats:
    """What one block of cells contributes: its map values and its Fisher-z region sums."""

    cells: NDArray[np.int64]
    maps: dict[str, FloatArray]  # each (n_windows, n_block_cells)
    z_point: FloatArray  # (2, R, W)
    w_point: FloatArray
    z_draws: FloatArray  # (2, R, B, W)
    w_draws: FloatArray


MAP_KEYS = ("r1", "r2", "low", "high", "p", "n", "ny")


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
    r1, r2 = correlations_from_sums(totals)
    d1, d2 = resampled_correlations(flat, boot.counts)
    gain_iv = boot.interval(d1 - d2)
    maps = {
        "r1": r1.reshape(W, m),
        "r2": r2.reshape(W, m),
        "low": gain_iv.low.reshape(W, m),
        "high": gain_iv.high.reshape(W, m),
        "p": gain_iv.p_value.reshape(W, m),
        "n": totals[0].reshape(W, m),
        "ny": (flat[:, 0] > 0).sum(axis=0).reshape(W, m).astype(np.float64),
    }
    R = weights.shape[0]
    z_point, w_point = np.zeros((2, R, W)), np.zeros((2, R, W))
    z_draws, w_draws = np.zeros((2, R, B, W)), np.zeros((2, R, B, W))
    for e, (pt, dr) in enumerate(((r1, d1), (r2, d2))):
        z_point[e], w_point[e] = weighted_sums(_fisher_z(pt).reshape(W, m), weights)
        z_draws[e], w_draws[e] = weighted_sums(_fisher_z(dr).reshape(B, W, m), weights)
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
    z_point, w_point = np.zeros((2, R, W)), np.zeros((2, R, W))
    z_draws, w_draws = np.zeros((2, R, B, W)), np.zeros((2, R, B, W))
    for blk in sorted(blocks, key=lambda b: int(b.cells[0]) if b.cells.size else -1):
        for k in MAP_KEYS:
            maps[k][:, blk.cells] = blk.maps[k]
        z_point += blk.z_point
        w_point += blk.w_point
        z_draws += blk.z_draws
        w_draws += blk.w_draws
    with np.errstate(invalid="ignore", divide="ignore"):
        acc_pt = np.tanh(z_point / w_point)  # (2, R, W)
        acc_dr = np.tanh(z_draws / w_draws)  # (2, R, B, W)
    inside = weights[:, None, :] > 0
    regions = []
    for r in range(R):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN slices of empty windows
            n_max = np.nanmax(np.where(inside[r], maps["n"], np.nan), axis=1)
            ny_max = np.nanmax(np.where(inside[r], maps["ny"], np.nan), axis=1)
        regions.append(
            Estimate(
                acc_realistic=acc_pt[0, r],
                acc_scrambled=acc_pt[1, r],
                realistic=boot.interval(acc_dr[0, r]),
                scrambled=boot.interval(acc_dr[1, r]),
                gain=boot.interval(acc_dr[0, r] - acc_dr[1, r]),
                n_samples=n_max,
                n_years=ny_max,
            )
        )
    return CellResults(
        acc_realistic=maps["r1"],
        acc_scrambled=maps["r2"],
        gain_low=maps["low"],
        gain_high=maps["high"],
        p_value=maps["p"],
        n_samples=maps["n"],
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
    is the weighted mean of the cell ACCs in Fisher z space, transformed back, for the point value
    and for each resample alike (its interval comes from the same resampled years).
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


def _fisher_z(r: FloatArray) -> FloatArray:
    return np.arctanh(np.clip(r, -Z_CLIP, Z_CLIP))


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


#: strata of the standardised initial land anomaly z: name -> rule on (z, lower, upper tercile)
STRATA: tuple[str, ...] = ("dry", "middle", "wet", "large_anomaly")


def strata_masks(z: FloatArray) -> dict[str, NDArray[np.bool_]]:
    """Samples in each stratum of the regional-mean standardised land anomaly ``z`` (Y, S).

    Terciles over all samples with data: ``dry`` (lowest third), ``middle``, ``wet`` (highest
    third); ``large_anomaly``: |z| in its highest third.
    """
    finite = np.isfinite(z)
    if finite.sum() < 3:
        return {name: np.zeros(z.shape, dtype=bool) for name in STRATA}
    lo, hi = np.quantile(z[finite], [1.0 / 3.0, 2.0 / 3.0])
    big = np.quantile(np.abs(z[finite]), 2.0 / 3.0)
    zz = np.where(finite, z, np.nan)
    with np.errstate(invalid="ignore"):
        return {
            "dry": finite & (zz <= lo),
            "middle": finite & (zz > lo) & (zz < hi),
            "wet": finite & (zz >= hi),
            "large_anomaly": finite & (np.abs(zz) > big),
        }


def estimate_strata(
    x1: FloatArray, x2: FloatArray, y: FloatArray, z: FloatArray, boot: Bootstrap
) -> dict[str, tuple[Estimate, float]]:
    """ACCs and gain of series ``(Y, S, W)`` within each land-anomaly stratum, with the
    stratum's mean z."""
    out = {}
    for name, mask in strata_masks(z).items():
        keep = mask[:, :, None]
        est = estimate_series(
            np.where(keep, x1, np.nan), np.where(keep, x2, np.nan), np.where(keep, y, np.nan), boot
        )
        mean_z = float(np.mean(z[mask])) if mask.any() else float("nan")
        out[name] = (est, mean_z)
    return out
