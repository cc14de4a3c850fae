"""Skill assessment of an anomaly cube: per-cell maps, regional curves, conditional gain.

The cube holds ensemble-mean and observed anomalies shaped ``(n_years, n_slots, n_windows,
n_cells)`` (see :mod:`app.cube.inputs`). Everything here calls the numpy kernels of
:mod:`app.stats` on blocks of cells, with one resample-count matrix shared by every cell, region
and stratum of a run, so that all intervals come from the same resampled years.
"""

from __future__ import annotations

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


def assess_cells(
    cube: Cube,
    boot: Bootstrap,
    weights: FloatArray,
    *,
    block_cells: int = 512,
    progress: Callable[[float], None] | None = None,
) -> CellResults:
    """Bootstrap every cell once; return maps and the region means of the cell ACCs.

    ``weights`` is ``(n_regions, n_cells)``: cos(lat) inside each region. The region mean of ACC
    is the weighted mean of the cell ACCs in Fisher z space, transformed back, for the point value
    and for each resample alike (its interval comes from the same resampled years).
    """
    W, C, B = cube.n_windows, cube.n_cells, boot.resamples
    R = weights.shape[0]
    maps = {k: np.full((W, C), np.nan) for k in ("r1", "r2", "low", "high", "p", "n", "ny")}
    z_point = np.zeros((2, R, W))
    w_point = np.zeros((2, R, W))
    z_draws = np.zeros((2, R, B, W))
    w_draws = np.zeros((2, R, B, W))
    wanted = np.flatnonzero(weights.sum(axis=0) > 0) if R else np.arange(C)
    for start in range(0, wanted.size, block_cells):
        cells = wanted[start : start + block_cells]
        m = cells.size
        yearly = yearly_sums(
            cube.realistic[..., cells], cube.scrambled[..., cells], cube.observed[..., cells]
        )  # (Y, 9, W, m)
        flat = yearly.reshape(yearly.shape[0], yearly.shape[1], W * m)
        r1, r2 = correlations_from_sums(total_sums(flat))
        d1, d2 = resampled_correlations(flat, boot.counts)
        gain_iv = boot.interval(d1 - d2)
        maps["r1"][:, cells] = r1.reshape(W, m)
        maps["r2"][:, cells] = r2.reshape(W, m)
        maps["low"][:, cells] = gain_iv.low.reshape(W, m)
        maps["high"][:, cells] = gain_iv.high.reshape(W, m)
        maps["p"][:, cells] = gain_iv.p_value.reshape(W, m)
        maps["n"][:, cells] = total_sums(flat)[0].reshape(W, m)
        maps["ny"][:, cells] = (flat[:, 0] > 0).sum(axis=0).reshape(W, m)
        w = weights[:, cells]
        for e, (pt, dr) in enumerate(((r1, d1), (r2, d2))):
            num, den = weighted_sums(_fisher_z(pt).reshape(W, m), w)
            z_point[e] += num
            w_point[e] += den
            num, den = weighted_sums(_fisher_z(dr).reshape(B, W, m), w)
            z_draws[e] += num
            w_draws[e] += den
        if progress is not None:
            progress(min(1.0, (start + m) / max(1, wanted.size)))
    with np.errstate(invalid="ignore", divide="ignore"):
        acc_pt = np.tanh(z_point / w_point)  # (2, R, W)
        acc_dr = np.tanh(z_draws / w_draws)  # (2, R, B, W)
    inside = weights[:, None, :] > 0
    with np.errstate(invalid="ignore"):
        n_max = np.nanmax(np.where(inside, maps["n"][None], np.nan), axis=2) if R else None
        ny_max = np.nanmax(np.where(inside, maps["ny"][None], np.nan), axis=2) if R else None
    regions = []
    for r in range(R):
        regions.append(
            Estimate(
                acc_realistic=acc_pt[0, r],
                acc_scrambled=acc_pt[1, r],
                realistic=boot.interval(acc_dr[0, r]),
                scrambled=boot.interval(acc_dr[1, r]),
                gain=boot.interval(acc_dr[0, r] - acc_dr[1, r]),
                n_samples=n_max[r] if n_max is not None else np.zeros(W),
                n_years=ny_max[r] if ny_max is not None else np.zeros(W),
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
