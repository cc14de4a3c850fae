"""Conditional gain: skill by stratum of the initial land anomaly, scored without range restriction.

Why not the centred correlation inside a stratum
    A stratum chosen on the predictor z (the standardised initial land anomaly) has a restricted
    range of z. A centred correlation inside it removes the stratum's own mean, and with it most
    of the land signal: in a linear system with no state dependence, the dry and wet terciles of
    a standard normal keep a within-stratum variance of only 0.28 (against 1 overall), so their
    centred correlation is far below the whole sample's, and the middle tercile's (variance 0.06)
    is lower still. The skill a forecast has in a stratum is measured about the full-period
    climatology instead, the reference every anomaly here already refers to:

    * the **uncentred correlation** of the period anomalies within the stratum,
      ``r = sum(x y) / sqrt(sum(x x) sum(y y))`` over the stratum's samples;
    * the **mean-square-error skill score** against the zero-anomaly (climatology) forecast,
      ``MSESS = 1 - sum((x - y)^2) / sum(y^2) = (2 sum(x y) - sum(x x)) / sum(y y)``, with
      Murphy's (1988, Mon. Wea. Rev. 116, 2417-2424) decomposition (see :class:`Msess`).

    Both come from the per-year sufficient statistics of :mod:`app.stats.sums` (extended here by
    the sums that involve z), so every resample is one ``counts @ sums`` product.

Strata (:func:`strata_masks`)
    On the re-standardised z (:func:`standardize_series`: a regional mean of standardised cell
    anomalies has a standard deviation below 1, so it is standardised again after averaging):
    terciles ``dry`` / ``middle`` / ``wet`` over all samples with a land value, and
    ``large_anomaly`` = |z| in its highest third. The strata masks are fixed on the original
    sample; a resampled year carries its samples' strata with it.

What a linear system gives anyway (:func:`linear_expectation`)
    Larger skill after large anomalies is what any linear system shows: signal power grows with
    |z|. To tell state dependence from that, each stratum's gain is set beside the gain that a
    state-independent linear system fitted to the whole sample predicts for the stratum's own
    signal power. Model, for each of x1 (realistic), x2 (scrambled) and y (observed)::

        v = mu_v + a_v z + u_v,     u = (u_x1, u_x2, u_y) independent of z, mean 0,
                                     covariances c_vw = Cov(u_v, u_w) the same in every stratum.

    Fitted on all samples by least squares of each variable on z (with intercept)::

        a_v  = Cov(v, z) / Var(z),   mu_v = mean(v) - a_v mean(z),
        c_vw = Cov(v, w) - a_v a_w Var(z)

    (moments with divisor n over all samples). A stratum S selected on z alone has
    ``E[z u_v | S] = E[z | S] E[u_v] = 0`` and ``E[u_v u_w | S] = c_vw``, so its second moments
    about the climatology are, with ``m1 = mean(z | S)`` and ``m2 = mean(z^2 | S)``::

        E[v w | S] = mu_v mu_w + (mu_v a_w + mu_w a_v) m1 + a_v a_w m2 + c_vw
                   = M_vw + a_v a_w (m2 - M_zz) + (mu_v a_w + mu_w a_v)(m1 - M_z)

    (``M_.`` the whole-sample raw means), and the expected uncentred correlation of forecast x
    with y in S is ``E[x y | S] / sqrt(E[x x | S] E[y y | S])``. For the issue's case (mu = 0,
    a_x = a_y = 1, c_xy = 0, Var(u_x) = Var(u_y) = 1/3, so a gain of 0.75 over the whole sample)
    this is ``m2 / (m2 + 1/3)``: 0.815 in the dry and wet terciles (m2 = 1.470), 0.153 in the
    middle one (m2 = 0.060), 0.880 for |z| in its top third (m2 = 2.451).

    The **test of state dependence** is on ``D = gain - expected_gain`` per stratum
    (``state_dependence``; ``state_dependence_realistic`` = r1 - expected r1 is the same test on
    the realistic run alone: the scrambled run's land state is unrelated to z, so its part of D
    is sampling noise only, and leaving it out gains power where that noise dominates). Under a
    state-independent linear system D is zero up to sampling error. Its interval and p-value come
    from the same year-block resamples as everything else, with the whole-sample fit, the
    stratum's m1 and m2 and its observed gain all recomputed inside each resample (one product of
    the same count matrix with the per-year sums), so the resampling distribution of D carries
    the uncertainty of the fit as well as the stratum's own.

Intervals
    Each stratum's intervals are read with ``n_blocks`` = the stratum's own number of years
    (years with at least one sample in the stratum), not the whole period's: the expanded
    percentile interval of :mod:`app.stats.intervals` then widens for the fewer blocks that
    actually inform the stratum.

Layout: samples ``(n_years, n_per_year, *columns)`` as in :mod:`app.stats.sums`; the land anomaly
z is ``(n_years, n_per_year)`` (one series shared by every column, e.g. the lead windows of a
region) or has the samples' full shape (one series per column).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from app.stats.intervals import Interval, IntervalMethod, bootstrap_interval
from app.stats.scramble import DEFAULT_SCRAMBLE, corrected_stratum_scrambled
from app.stats.sums import MIN_SAMPLES, N_STATS, STAT_NAMES, yearly_sums

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

#: strata of the standardised initial land anomaly z
STRATA: tuple[str, ...] = ("dry", "middle", "wet", "large_anomaly")

#: per-year statistics of one group of samples: those of app.stats.sums, then the sums with z
COND_STAT_NAMES: tuple[str, ...] = STAT_NAMES + ("z", "zz", "x1z", "x2z", "yz")
N_COND_STATS = len(COND_STAT_NAMES)
_K = {name: k for k, name in enumerate(COND_STAT_NAMES)}

#: the quantities of each stratum that get a resampling distribution and an interval
QUANTITIES: tuple[str, ...] = (
    "acc_realistic",
    "acc_scrambled",
    "gain",
    "expected_acc_realistic",
    "expected_acc_scrambled",
    "expected_gain",
    "state_dependence",
    "state_dependence_realistic",
    "msess_realistic",
    "msess_scrambled",
    "msess_gain",
    "acc_scrambled_corrected",
    "gain_corrected",
)

#: target bytes of one block's resampled sums
BLOCK_BYTES = 32 * 2**20


# ------------------------------------------------------------------------------------------------
# land anomaly: re-standardisation and strata


def standardize_series(z: FloatArray) -> FloatArray:
    """Standardise a land anomaly over all its samples (axes 0 and 1), per column, NaN-aware.

    ``z`` is ``(n_years, n_per_year, *columns)``. Returns ``(z - mean) / std`` with the mean and
    the standard deviation (divisor n, so that the mean of z^2 over all samples is exactly 1)
    over the finite samples of each column; NaN where a column has fewer than two finite
    samples or no spread.
    """
    v = np.asarray(z, dtype=np.float64)
    if v.ndim < 2:
        raise ValueError(f"a land anomaly needs (n_years, n_per_year, ...) axes, got shape {v.shape}")
    finite = np.isfinite(v)
    n = finite.sum(axis=(0, 1))
    vz = np.where(finite, v, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = vz.sum(axis=(0, 1)) / n
        dev = np.where(finite, v - mean, 0.0)
        std = np.sqrt((dev * dev).sum(axis=(0, 1)) / n)
        ok = (n >= 2) & (std > 0)
        return np.where(ok, (v - mean) / np.where(ok, std, 1.0), np.nan)


def strata_masks(z: FloatArray) -> dict[str, BoolArray]:
    """Samples in each stratum of the standardised land anomaly ``z`` ``(Y, S, *columns)``.

    Terciles over all samples with data, per column: ``dry`` (z <= lower tercile), ``middle``,
    ``wet`` (z >= upper tercile); ``large_anomaly``: |z| above the upper tercile of |z|.
    Quantiles by linear interpolation (numpy's default). A column with fewer than 3 finite
    samples has empty strata.
    """
    v = np.asarray(z, dtype=np.float64)
    if v.ndim < 2:
        raise ValueError(f"a land anomaly needs (n_years, n_per_year, ...) axes, got shape {v.shape}")
    finite = np.isfinite(v)
    enough = finite.sum(axis=(0, 1)) >= 3
    flat = v.reshape((-1,) + v.shape[2:])
    flat = np.where(enough, flat, 0.0)  # columns without data: any numbers, masked out below
    flat = np.where(np.isfinite(flat), flat, np.nan)
    if np.isfinite(flat).all():
        lo, hi = np.quantile(flat, [1.0 / 3.0, 2.0 / 3.0], axis=0)
        big = np.quantile(np.abs(flat), 2.0 / 3.0, axis=0)
    else:
        lo, hi = np.nanquantile(flat, [1.0 / 3.0, 2.0 / 3.0], axis=0)
        big = np.nanquantile(np.abs(flat), 2.0 / 3.0, axis=0)
    has = finite & enough
    zz = np.where(has, v, np.nan)
    with np.errstate(invalid="ignore"):
        return {
            "dry": has & (zz <= lo),
            "middle": has & (zz > lo) & (zz < hi),
            "wet": has & (zz >= hi),
            "large_anomaly": has & (np.abs(zz) > big),
        }


# ------------------------------------------------------------------------------------------------
# sufficient statistics


def conditional_sums(
    realistic: FloatArray,
    scrambled: FloatArray,
    observed: FloatArray,
    z: FloatArray,
    masks: dict[str, BoolArray],
) -> FloatArray:
    """Per-year sums of every group of samples: ``(n_years, 1 + len(masks), N_COND_STATS, *columns)``.

    Group 0 is all samples, then one group per mask in the order of ``masks``. A sample counts
    where x1, x2, y and z are all finite (and it lies in the group). The statistics are
    :data:`COND_STAT_NAMES`: those of :func:`app.stats.sums.yearly_sums`, then z, z^2, x1 z,
    x2 z, y z.
    """
    x1 = np.asarray(realistic, dtype=np.float64)
    x2 = np.asarray(scrambled, dtype=np.float64)
    y = np.asarray(observed, dtype=np.float64)
    if not (x1.shape == x2.shape == y.shape) or x1.ndim < 2:
        raise ValueError(
            f"realistic {x1.shape}, scrambled {x2.shape} and observed {y.shape} must share a "
            "(n_years, n_per_year, ...) shape"
        )
    zb = _broadcast_land(z, x1.shape)
    valid = np.isfinite(x1) & np.isfinite(x2) & np.isfinite(y) & np.isfinite(zb)
    groups = [valid] + [valid & _broadcast_land(m, x1.shape) for m in masks.values()]
    out = np.empty((x1.shape[0], len(groups), N_COND_STATS) + x1.shape[2:])
    for g, keep in enumerate(groups):
        a, b, c = (np.where(keep, v, np.nan) for v in (x1, x2, y))
        out[:, g, :N_STATS] = yearly_sums(a, b, c)
        zk = np.where(keep, zb, 0.0)
        a, b, c = (np.where(keep, v, 0.0) for v in (a, b, c))
        for k, term in zip(
            range(N_STATS, N_COND_STATS), (zk, zk * zk, a * zk, b * zk, c * zk), strict=True
        ):
            out[:, g, k] = term.sum(axis=1)
    return out


def _broadcast_land(z: FloatArray | BoolArray, shape: tuple[int, ...]) -> NDArray[np.generic]:
    v = np.asarray(z)
    if v.shape[:2] != shape[:2]:
        raise ValueError(f"land anomaly {v.shape} does not match samples {shape} on (n_years, n_per_year)")
    if v.ndim == 2:
        v = v.reshape(v.shape + (1,) * (len(shape) - 2))
    return np.broadcast_to(v, shape)


# ------------------------------------------------------------------------------------------------
# scores from sums (any leading axes: point values or resamples)


@dataclass(frozen=True)
class Msess:
    """MSE skill score against the zero-anomaly (full-period climatology) forecast, decomposed.

    With the stratum's forecast and observed means ``f``, ``o``, standard deviations ``s_f``,
    ``s_o`` (divisor n), centred correlation ``r`` and observed second moment about the
    climatology ``M_yy = o^2 + s_o^2``::

        MSE(forecast) = (f - o)^2 + s_f^2 + s_o^2 - 2 r s_f s_o
                      = s_o^2 [1 - r^2 + (r - s_f/s_o)^2 + ((f - o)/s_o)^2]
        MSE(climatology) = mean(y^2) = M_yy

    so, with ``w = s_o^2 / M_yy``, ``MSESS = 1 - MSE(forecast)/M_yy`` is exactly::

        MSESS = correlation - conditional_bias - unconditional_bias + climatology_shift
        correlation        = w r^2
        conditional_bias   = w (r - s_f / s_o)^2
        unconditional_bias = (f - o)^2 / M_yy
        climatology_shift  = o^2 / M_yy            (= 1 - w)

    When the stratum's observed mean is zero, w = 1 and this is Murphy's (1988) decomposition
    about the sample climatology, r^2 - (r - s_f/s_o)^2 - ((f - o)/s_o)^2. Otherwise the zero-
    anomaly reference is itself in error by the stratum's mean anomaly: ``climatology_shift`` is
    the part of the score credited for knowing that mean, and the first three terms are Murphy's
    terms scaled by w (Murphy 1988 gives the same form for a reference climatology other than
    the sample mean, his ``[r^2 - ... + ((o - mu)/s_o)^2] / [1 + ((o - mu)/s_o)^2]`` with mu = 0;
    from memory).
    """

    value: FloatArray
    correlation: FloatArray
    conditional_bias: FloatArray
    unconditional_bias: FloatArray
    climatology_shift: FloatArray


def uncentred_correlations(sums: FloatArray, *, stat_axis: int = 0) -> tuple[FloatArray, FloatArray]:
    """Uncentred correlations ``sum(x y) / sqrt(sum(x x) sum(y y))`` of both experiments.

    ``sums`` holds the statistics of :data:`app.stats.sums.STAT_NAMES` (or
    :data:`COND_STAT_NAMES`) along ``stat_axis``; any other axes (columns, resamples) pass
    through. Fewer than MIN_SAMPLES samples or a zero sum of squares give NaN.
    """
    s = _stat_view(sums, stat_axis)
    return _uncentred(s, "x1x1", "x1y"), _uncentred(s, "x2x2", "x2y")


def msess_from_sums(sums: FloatArray, *, stat_axis: int = 0) -> tuple[Msess, Msess]:
    """MSESS about the climatology and its decomposition (see :class:`Msess`), both experiments."""
    s = _stat_view(sums, stat_axis)
    return _msess(s, "x1", "x1x1", "x1y"), _msess(s, "x2", "x2x2", "x2y")


def linear_expectation(
    whole: FloatArray, stratum: FloatArray, *, stat_axis: int = 0
) -> tuple[FloatArray, FloatArray]:
    """Uncentred correlations of both experiments that a state-independent linear system fitted
    to ``whole`` predicts for a stratum with the z moments of ``stratum`` (see the module
    docstring for the derivation). Both hold :data:`COND_STAT_NAMES` along ``stat_axis``."""
    w = _stat_view(whole, stat_axis, n_stats=N_COND_STATS)
    s = _stat_view(stratum, stat_axis, n_stats=N_COND_STATS)
    return _expected(w, s)


def _stat_view(sums: FloatArray, stat_axis: int, *, n_stats: int | None = None) -> FloatArray:
    s = np.moveaxis(np.asarray(sums, dtype=np.float64), stat_axis, 0)
    allowed = (n_stats,) if n_stats else (N_STATS, N_COND_STATS)
    if s.shape[0] not in allowed:
        raise ValueError(f"expected {' or '.join(map(str, allowed))} statistics on axis {stat_axis}, got {s.shape[0]}")
    return s


def _means(s: FloatArray) -> dict[str, FloatArray]:
    """Raw means of every statistic; NaN where the group has fewer than MIN_SAMPLES samples."""
    n = s[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        inv_n = np.where(n >= MIN_SAMPLES, 1.0 / n, np.nan)
    return {name: s[k] * inv_n for k, name in enumerate(COND_STAT_NAMES[: s.shape[0]]) if k > 0}


def _uncentred(s: FloatArray, xx: str, xy: str) -> FloatArray:
    n, sxx, syy, sxy = s[0], s[_K[xx]], s[_K["yy"]], s[_K[xy]]
    with np.errstate(invalid="ignore", divide="ignore"):
        r = sxy / np.sqrt(sxx * syy)
    return _clip_unit(np.where((n >= MIN_SAMPLES) & (sxx > 0) & (syy > 0), r, np.nan))


def _msess(s: FloatArray, x: str, xx: str, xy: str) -> Msess:
    m = _means(s)
    f, o = m[x], m["y"]
    with np.errstate(invalid="ignore", divide="ignore"):
        m_yy = np.where(m["yy"] > 0, m["yy"], np.nan)
        var_f = m[xx] - f * f
        var_o = m["yy"] - o * o
        s_f = np.sqrt(np.where(var_f > 0, var_f, np.nan))
        s_o = np.sqrt(np.where(var_o > 0, var_o, np.nan))
        r = np.clip((m[xy] - f * o) / (s_f * s_o), -1.0, 1.0)
        w = var_o / m_yy
        value = (2.0 * m[xy] - m[xx]) / m_yy
        return Msess(
            value=value,
            correlation=w * r * r,
            conditional_bias=w * (r - s_f / s_o) ** 2,
            unconditional_bias=(f - o) ** 2 / m_yy,
            climatology_shift=o * o / m_yy,
        )


def _expected(whole: FloatArray, stratum: FloatArray) -> tuple[FloatArray, FloatArray]:
    mw, ms = _means(whole), _means(stratum)
    mz = mw["z"]
    with np.errstate(invalid="ignore", divide="ignore"):
        var_z = mw["zz"] - mz * mz
        var_z = np.where(var_z > 0, var_z, np.nan)
        slope = {v: (mw[v + "z"] - mw[v] * mz) / var_z for v in ("x1", "x2", "y")}
        icept = {v: mw[v] - slope[v] * mz for v in slope}
        d1 = ms["z"] - mz  # m1(S) - M_z
        d2 = ms["zz"] - mw["zz"]  # m2(S) - M_zz

        def moment(v: str, u: str, raw: FloatArray) -> FloatArray:
            return raw + slope[v] * slope[u] * d2 + (icept[v] * slope[u] + icept[u] * slope[v]) * d1

        e_yy = moment("y", "y", mw["yy"])
        out = []
        for v in ("x1", "x2"):
            e_xx = moment(v, v, mw[v + v])
            e_xy = moment(v, "y", mw[v + "y"])
            ok = (e_xx > 0) & (e_yy > 0)
            out.append(_clip_unit(np.where(ok, e_xy / np.sqrt(np.where(ok, e_xx * e_yy, 1.0)), np.nan)))
    return out[0], out[1]


def _clip_unit(r: FloatArray) -> FloatArray:
    r = np.where(np.isfinite(r), r, np.nan)
    return np.clip(r, -1.0, 1.0)


def _scores(
    group_sums: FloatArray, *, group_axis: int, scramble: str, period_years: FloatArray
) -> list[dict[str, FloatArray]]:
    """Every quantity of :data:`QUANTITIES` for each stratum (groups 1, 2, ...). ``group_sums``
    has the groups (group 0 = all samples) on ``group_axis`` and the statistics right after it;
    other axes pass through. ``scramble`` and ``period_years`` (the years of the whole period,
    broadcast over the columns) decide the other-year correction of the scrambled ACC
    (:func:`app.stats.scramble.corrected_stratum_scrambled`)."""
    whole = np.take(group_sums, 0, axis=group_axis)
    w = _stat_view(whole, group_axis)
    out = []
    for g in range(1, group_sums.shape[group_axis]):
        stratum = np.take(group_sums, g, axis=group_axis)
        r1, r2 = uncentred_correlations(stratum, stat_axis=group_axis)
        e1, e2 = linear_expectation(whole, stratum, stat_axis=group_axis)
        m1, m2 = msess_from_sums(stratum, stat_axis=group_axis)
        st = _stat_view(stratum, group_axis)
        with np.errstate(invalid="ignore", divide="ignore"):
            share = st[_K["n"]] / w[_K["n"]]
        r2c = corrected_stratum_scrambled(
            st[_K["x1y"]], st[_K["x2y"]], st[_K["x2x2"]], st[_K["yy"]],
            reference_x2x2=share * w[_K["x2x2"]], n_years=period_years, design=scramble,
        )
        out.append(
            {
                "acc_realistic": r1,
                "acc_scrambled": r2,
                "gain": r1 - r2,
                "expected_acc_realistic": e1,
                "expected_acc_scrambled": e2,
                "expected_gain": e1 - e2,
                "state_dependence": (r1 - r2) - (e1 - e2),
                "state_dependence_realistic": r1 - e1,
                "msess_realistic": m1.value,
                "msess_scrambled": m2.value,
                "msess_gain": m1.value - m2.value,
                "acc_scrambled_corrected": r2c,
                "gain_corrected": r1 - r2c,
            }
        )
    return out


def _msess_pair(group_sums: FloatArray, g: int) -> tuple[Msess, Msess]:
    return msess_from_sums(group_sums[g], stat_axis=0)


# ------------------------------------------------------------------------------------------------
# the estimate with intervals


@dataclass(frozen=True)
class StratumEstimate:
    """One stratum's scores per column; every array is shaped like the columns.

    ``values[q]`` and ``intervals[q]`` for each q of :data:`QUANTITIES` (``acc_*`` and ``gain``
    are the uncentred correlations about the full-period climatology and their difference;
    ``expected_*`` the linear-system expectation; ``state_dependence`` = gain - expected_gain,
    whose p-value tests "no state dependence"; ``msess_*`` the MSE skill scores about the
    climatology). Intervals are read with ``n_blocks = n_years`` of the stratum. ``draws[q]``
    (``(B, *columns)``) only when asked for.
    """

    name: str
    n_samples: FloatArray
    n_years: FloatArray
    mean_z: FloatArray
    mean_z2: FloatArray
    values: dict[str, FloatArray]
    msess_realistic: Msess
    msess_scrambled: Msess
    intervals: dict[str, Interval]
    draws: dict[str, FloatArray] | None = None

    @property
    def gain(self) -> FloatArray:
        return self.values["gain"]

    @property
    def expected_gain(self) -> FloatArray:
        return self.values["expected_gain"]

    @property
    def state_dependence(self) -> Interval:
        return self.intervals["state_dependence"]


def stratum_interval(
    draws: FloatArray,
    n_years: FloatArray,
    *,
    point: FloatArray | None = None,
    confidence: float = 0.95,
    method: IntervalMethod = "expanded",
) -> Interval:
    """:func:`app.stats.intervals.bootstrap_interval` of ``draws`` ``(B, n_columns)`` with each
    column's own number of blocks ``n_years`` ``(n_columns,)``; NaN where it is below 2.
    ``point`` ``(n_columns,)`` is the full-sample value (needed by point-centred methods)."""
    d = np.asarray(draws, dtype=np.float64)
    ny = np.asarray(n_years, dtype=np.float64).reshape(-1)
    if d.ndim != 2 or d.shape[1] != ny.size:
        raise ValueError(f"draws must be (n_resamples, {ny.size}), got {d.shape}")
    low, high, p = (np.full(ny.size, np.nan) for _ in range(3))
    for n in np.unique(ny[np.isfinite(ny) & (ny >= 2)]):
        cols = np.flatnonzero(ny == n)
        pt = None if point is None else np.asarray(point, dtype=np.float64).reshape(-1)[cols]
        iv = bootstrap_interval(d[:, cols], point=pt, confidence=confidence, n_blocks=int(n), method=method)
        low[cols], high[cols], p[cols] = iv.low, iv.high, iv.p_value
    return Interval(low=low, high=high, p_value=p)


def column_block(n_resamples: int, n_groups: int, *, block_bytes: int = BLOCK_BYTES) -> int:
    """Columns per block so that one block's resampled sums fit ``block_bytes``."""
    return max(1, block_bytes // (8 * n_groups * N_COND_STATS * max(1, n_resamples)))


def conditional_gain(
    realistic: FloatArray,
    scrambled: FloatArray,
    observed: FloatArray,
    land: FloatArray,
    counts: FloatArray,
    *,
    confidence: float = 0.95,
    method: IntervalMethod = "expanded",
    quantities: tuple[str, ...] = QUANTITIES,
    keep_draws: bool = False,
    block: int | None = None,
    scramble: str = DEFAULT_SCRAMBLE,
) -> dict[str, StratumEstimate]:
    """Scores of every stratum of :data:`STRATA` with intervals from the year-block resamples.

    ``realistic``, ``scrambled``, ``observed``: anomalies ``(Y, S, *columns)`` about the
    full-period climatology. ``land``: the (regional-mean) initial land anomaly, ``(Y, S)`` or
    ``(Y, S, *columns)``; it is re-standardised here (:func:`standardize_series`) and split by
    :func:`strata_masks`. ``counts``: the run's ``(B, Y)`` resample counts
    (:func:`app.stats.resample.year_block_counts`), shared with every other interval of the run.
    Each resample's scores come from ``counts @ per-year sums``, in blocks of columns.
    ``quantities``: which of :data:`QUANTITIES` get intervals (and draws with ``keep_draws``);
    the point values are always all there. ``scramble`` is the design of the scrambled land
    states (:mod:`app.stats.scramble`): ``acc_scrambled_corrected`` / ``gain_corrected`` carry
    the other-year correction (equal to the raw ones under ``"independent"``).
    """
    x1 = np.asarray(realistic, dtype=np.float64)
    counts = np.asarray(counts, dtype=np.float64)
    unknown = [q for q in quantities if q not in QUANTITIES]
    if unknown:
        raise ValueError(f"unknown quantities {unknown}; choose from {QUANTITIES}")
    if counts.ndim != 2 or counts.shape[1] != x1.shape[0]:
        raise ValueError(f"counts must be (n_resamples, {x1.shape[0]}), got {counts.shape}")
    z = standardize_series(land)
    masks = strata_masks(z)
    sums = conditional_sums(x1, scrambled, observed, z, masks)  # (Y, G, K, *cols)
    cols = x1.shape[2:]
    n_years, n_groups = sums.shape[0], sums.shape[1]
    flat = sums.reshape(n_years, n_groups, N_COND_STATS, -1)
    n_cols, n_res = flat.shape[3], counts.shape[0]
    totals = flat.sum(axis=0)  # (G, K, C)
    ny = (flat[:, :, 0] > 0).sum(axis=0).astype(np.float64)  # (G, C)
    point = _scores(totals, group_axis=0, scramble=scramble, period_years=ny[0])

    n_strata = n_groups - 1
    iv_parts: list[dict[str, list[Interval]]] = [{q: [] for q in quantities} for _ in range(n_strata)]
    kept: list[dict[str, FloatArray]] | None = None
    if keep_draws:
        kept = [{q: np.empty((n_res, n_cols)) for q in quantities} for _ in range(n_strata)]
    step = block or column_block(n_res, n_groups)
    for start in range(0, n_cols, step):
        stop = min(n_cols, start + step)
        width = stop - start
        part = np.ascontiguousarray(flat[..., start:stop]).reshape(n_years, -1)
        res = (counts @ part).reshape(n_res, n_groups, N_COND_STATS, width)
        scores = _scores(res, group_axis=1, scramble=scramble, period_years=ny[0, start:stop])
        for s in range(n_strata):
            for q in quantities:
                iv_parts[s][q].append(
                    stratum_interval(
                        scores[s][q], ny[s + 1, start:stop], point=point[s][q][start:stop],
                        confidence=confidence, method=method,
                    )
                )
                if kept is not None:
                    kept[s][q][:, start:stop] = scores[s][q]

    out = {}
    for s, name in enumerate(masks):
        g = s + 1
        m1, m2 = _msess_pair(totals, g)
        with np.errstate(invalid="ignore", divide="ignore"):
            n_g = totals[g, 0]
            mean_z = np.where(n_g > 0, totals[g, _K["z"]] / n_g, np.nan)
            mean_z2 = np.where(n_g > 0, totals[g, _K["zz"]] / n_g, np.nan)
        out[name] = StratumEstimate(
            name=name,
            n_samples=n_g.reshape(cols),
            n_years=ny[g].reshape(cols),
            mean_z=mean_z.reshape(cols),
            mean_z2=mean_z2.reshape(cols),
            values={q: point[s][q].reshape(cols) for q in QUANTITIES},
            msess_realistic=_reshape_msess(m1, cols),
            msess_scrambled=_reshape_msess(m2, cols),
            intervals={q: _join(iv_parts[s][q], cols) for q in quantities},
            draws=None if kept is None else {q: kept[s][q].reshape((n_res,) + cols) for q in quantities},
        )
    return out


def _join(parts: list[Interval], shape: tuple[int, ...]) -> Interval:
    if not parts:
        empty = np.full(shape, np.nan)
        return Interval(low=empty, high=empty.copy(), p_value=empty.copy())
    return Interval(
        low=np.concatenate([p.low for p in parts]).reshape(shape),
        high=np.concatenate([p.high for p in parts]).reshape(shape),
        p_value=np.concatenate([p.p_value for p in parts]).reshape(shape),
    )


def _reshape_msess(m: Msess, shape: tuple[int, ...]) -> Msess:
    return Msess(
        value=m.value.reshape(shape),
        correlation=m.correlation.reshape(shape),
        conditional_bias=m.conditional_bias.reshape(shape),
        unconditional_bias=m.unconditional_bias.reshape(shape),
        climatology_shift=m.climatology_shift.reshape(shape),
    )
