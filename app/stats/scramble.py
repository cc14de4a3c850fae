"""Correction of the scrambled control for land states drawn from other years of the period.

The design ``scramble: "other_years"`` (the default) starts each scrambled hindcast of year i
from the land state of another year j = pi(i) of the same n-year hindcast period (pi a
derangement: no year keeps its own state). ``"independent"`` means the scrambled states come
from outside the period (or are synthetic): nothing is corrected.

Derivation (assumptions: years exchangeable; the scrambled run differs from the realistic run
only in its land initial state, with the same land response; anomalies of every field centred
over the same n years, per start slot, plainly or leave-one-year-out):

1. Centring makes another year's land anomaly anti-correlated with the right one. With
   ``L'_i = L_i - mean(L)``, for j != i, ``cov(L'_i, L'_j) = -var(L)/n`` while
   ``var(L'_i) = var(L) (n-1)/n``; hence ``E[L'_j | L'_i] = -L'_i/(n-1)``: the mechanism behind
   the cross-validation degeneracy of Barnston and van den Dool (1993, J. Climate 6, 963-977).
   Any land-driven part f of the scrambled forecast therefore has, summed over the samples, a
   cross product with the observations of ``-1/(n-1)`` times the realistic run's land cross
   product ``Lambda`` (exactly, in expectation, for every derangement), where independent
   states would give 0.
2. The realistic and the scrambled run share everything else, so (in expectation)
   ``S1y - S2y = Lambda + Lambda/(n-1) = Lambda n/(n-1)``, with ``Sky`` the cross product of run
   k with the observations. The unbiased scrambled cross product is
   ``S2y + Lambda/(n-1) = S2y + (S1y - S2y)/n``.
3. For the centred ACC over all samples both runs have the same forecast variance (the scrambled
   land part is another year's, of the same variance), so in correlation terms::

       acc_scrambled_corrected = acc_scrambled + (acc_realistic - acc_scrambled)/n
                               = ((n-1) acc_scrambled + acc_realistic)/n
       gain_corrected          = (n-1)/n * gain_raw

   The raw gain is ``n/(n-1)`` times the true one: biased high by ``gain/(n-1)``.
4. Leave-one-year-out anomalies change nothing: ``x_i - mean_{j!=i} x_j = n/(n-1) (x_i - mean(x))``
   (all years present), a constant factor, and correlations are scale-free. The factor is the
   same as for plain centring (checked numerically in tests/test_stats_scramble.py).

Because the gain correction is one positive factor per column, applied to every bootstrap
resample it keeps each draw's sign: the p-value of the corrected gain equals that of the raw gain
and its interval is the raw interval times ``(n-1)/n`` (order statistics commute with a positive
factor, so the expanded percentile interval's coverage carries over).

Where each rule applies (``n`` = the years over which the anomalies were centred, which are the
years the scrambled states came from):

* cells and the regional-mean series (``acc_of_region_mean``): :func:`corrected_scrambled` /
  :func:`corrected_gain` with the column's (the series') number of years.
* ``region_mean_of_acc`` (Fisher-z mean of cell ACCs): correct every cell's scrambled ACC, point
  value and each draw, *before* the z-transform and averaging. The derivation holds per
  correlation (not per z-mean), cells may have different n, and the region mean then agrees with
  the corrected map. (Correcting the averaged gain by (n-1)/n gives the same within Monte-Carlo
  error in the simulations; it is not the rule.)
* strata scored with the uncentred correlation about the full-period climatology: use
  :func:`corrected_stratum_scrambled` on the stratum's sums, with n = years of the full period
  (not of the stratum). Steps 1-2 hold within a stratum that is selected on the true (year i)
  land anomaly, but the two runs' norms differ there, and the selection on the standardised
  anomaly also shrinks the other-year states' spread within a stratum (their years enter the
  standard deviation), so the correction works on sums: the cross product as in step 2, and the
  scrambled run's sum of squares replaced by its unselected share of the period's sum of squares.
* version comparison: correct each experiment's gain with its own design and n, then subtract;
  :func:`corrected_gain_difference`. The realistic-ACC difference needs no correction.
"""

from __future__ import annotations

from typing import Literal, cast

import numpy as np
from numpy.typing import ArrayLike, NDArray

from app.errors import ParameterError

FloatArray = NDArray[np.float64]
ScrambleDesign = Literal["other_years", "independent"]

#: how the scrambled land states were drawn: from other years of the same period (corrected) or
#: from outside it / synthetic (no correction)
SCRAMBLE_DESIGNS: tuple[str, ...] = ("other_years", "independent")
DEFAULT_SCRAMBLE: ScrambleDesign = "other_years"


def check_design(design: str) -> ScrambleDesign:
    """``design`` itself if it is one of :data:`SCRAMBLE_DESIGNS`, else a ParameterError."""
    if design not in SCRAMBLE_DESIGNS:
        raise ParameterError(
            f"unknown scramble design {design!r}; choose one of {SCRAMBLE_DESIGNS}",
            scramble=design, choices=list(SCRAMBLE_DESIGNS),
        )
    return cast(ScrambleDesign, design)


def gain_factor(n_years: ArrayLike, *, design: str = DEFAULT_SCRAMBLE) -> FloatArray:
    """The factor that turns a raw gain into the corrected one: ``(n-1)/n`` under
    ``other_years`` (NaN where n < 2 or n is not finite), 1 under ``independent``."""
    d = check_design(design)
    n = np.asarray(n_years, dtype=np.float64)
    if d == "independent":
        return np.ones_like(n)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(np.isfinite(n) & (n >= 2.0), (n - 1.0) / n, np.nan)


def corrected_scrambled(
    acc_realistic: ArrayLike,
    acc_scrambled: ArrayLike,
    *,
    n_years: ArrayLike,
    design: str = DEFAULT_SCRAMBLE,
) -> FloatArray:
    """Scrambled ACC corrected for other-year land states: ``((n-1) r2 + r1)/n``.

    Works on point values ``(*columns)`` and on bootstrap draws ``(B, *columns)`` alike;
    ``n_years`` broadcasts against the trailing column axes. NaN in, NaN out; NaN where n < 2.
    Under ``independent`` the scrambled ACC is returned unchanged (as float64).
    """
    d = check_design(design)
    r1 = np.asarray(acc_realistic, dtype=np.float64)
    r2 = np.asarray(acc_scrambled, dtype=np.float64)
    if d == "independent":
        return np.array(np.broadcast_to(r2, np.broadcast_shapes(r1.shape, r2.shape)), dtype=np.float64)
    f = gain_factor(n_years, design=d)
    # a convex combination of r1 and r2: stays within [-1, 1]
    return np.asarray(r1 - f * (r1 - r2), dtype=np.float64)


def corrected_gain(
    acc_realistic: ArrayLike,
    acc_scrambled: ArrayLike,
    *,
    n_years: ArrayLike,
    design: str = DEFAULT_SCRAMBLE,
) -> FloatArray:
    """Gain corrected for other-year land states: ``(n-1)/n * (r1 - r2)`` (identity under
    ``independent``); equals ``r1 - corrected_scrambled(...)``. Point values or draws."""
    r1 = np.asarray(acc_realistic, dtype=np.float64)
    r2 = np.asarray(acc_scrambled, dtype=np.float64)
    return np.asarray(gain_factor(n_years, design=design) * (r1 - r2), dtype=np.float64)


def corrected_gain_difference(
    baseline: tuple[ArrayLike, ArrayLike],
    candidate: tuple[ArrayLike, ArrayLike],
    *,
    n_years: ArrayLike,
    baseline_design: str = DEFAULT_SCRAMBLE,
    candidate_design: str = DEFAULT_SCRAMBLE,
) -> FloatArray:
    """Candidate's corrected gain minus the baseline's, each ``(acc_realistic, acc_scrambled)``
    on the common years ``n_years``, each corrected under its own design (point values or the
    draws of the same resamples)."""
    gb = corrected_gain(*baseline, n_years=n_years, design=baseline_design)
    gc = corrected_gain(*candidate, n_years=n_years, design=candidate_design)
    return np.asarray(gc - gb, dtype=np.float64)


def corrected_stratum_scrambled(
    sum_x1y: ArrayLike,
    sum_x2y: ArrayLike,
    sum_x2x2: ArrayLike,
    sum_yy: ArrayLike,
    *,
    reference_x2x2: ArrayLike,
    n_years: ArrayLike,
    design: str = DEFAULT_SCRAMBLE,
) -> FloatArray:
    """Uncentred scrambled correlation of a land-anomaly stratum, corrected for other-year states.

    Inputs are sums over the stratum's samples of the period anomalies (realistic x1, scrambled
    x2, observed y), point sums ``(*columns)`` or resampled sums ``(B, *columns)``.
    ``reference_x2x2`` is the scrambled run's sum of squares that an unselected set of as many
    samples would have: ``(stratum samples / period samples) * sum over the period of x2^2``
    (from the same resample's sums for a draw). ``n_years`` is the number of years of the whole
    period. Returns, under ``other_years``::

        (S2y + (S1y - S2y)/n) / sqrt(reference_x2x2 * Syy)

    and under ``independent`` the raw ``S2y / sqrt(S2x2 * Syy)``. NaN where a norm is not
    positive, an input is NaN or n < 2; clipped to [-1, 1].
    """
    d = check_design(design)
    s1y = np.asarray(sum_x1y, dtype=np.float64)
    s2y = np.asarray(sum_x2y, dtype=np.float64)
    syy = np.asarray(sum_yy, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        if d == "independent":
            num = s2y
            norm = np.asarray(sum_x2x2, dtype=np.float64)
        else:
            n = np.asarray(n_years, dtype=np.float64)
            inv_n = np.where(np.isfinite(n) & (n >= 2.0), 1.0 / n, np.nan)
            num = s2y + (s1y - s2y) * inv_n
            norm = np.asarray(reference_x2x2, dtype=np.float64)
        r = num / np.sqrt(np.where((norm > 0) & (syy > 0), norm * syy, np.nan))
    r = np.where(np.isfinite(r), r, np.nan)
    return np.asarray(np.clip(r, -1.0, 1.0), dtype=np.float64)
