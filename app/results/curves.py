"""Skill curves and conditional-gain tables in the JSON shape of DESIGN section 5.

Fields are only ever added. With ``scramble: "other_years"`` every window also carries
``gain_corrected`` and ``acc_scrambled_corrected`` (the raw ``gain`` and ``acc_scrambled`` stay
as they were); ``dropped_for_coverage`` counts the start dates of the window whose observations
covered too few of its days.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from app.cube.assess import Estimate
from app.cube.pipeline import RegionAssessment
from app.cube.windows import LeadWindow
from app.stats.conditional import STRATA, StratumEstimate
from app.stats.intervals import Interval


def _num(x: Any) -> float | None:
    v = float(x)
    return None if math.isnan(v) or math.isinf(v) else round(v, 6)


def _bounded(value: Any, iv: Interval, w: int, *, p: bool = False) -> dict[str, Any]:
    out = {"value": _num(value), "low": _num(iv.low[w]), "high": _num(iv.high[w])}
    if p:
        out["p_value"] = _num(iv.p_value[w])
    return out


def corrected(meta: dict[str, Any]) -> bool:
    """Whether this run carries gains corrected for other-year scrambled states."""
    return meta.get("scramble", "other_years") == "other_years"


def window_entries(
    est: Estimate,
    windows: list[LeadWindow],
    meta: dict[str, Any],
    *,
    fraction_significant: np.ndarray | None = None,
) -> list[dict[str, Any]]:
    dropped = meta.get("summary", {}).get("coverage", {}).get("dropped_start_dates", {})
    out = []
    for w, win in enumerate(windows):
        entry: dict[str, Any] = {
            "label": win.label,
            "first_day": win.first_day,
            "last_day": win.last_day,
            "n_years": int(np.nan_to_num(est.n_years[w])),
            "n_samples": int(np.nan_to_num(est.n_samples[w])),
            "acc_realistic": _bounded(est.acc_realistic[w], est.realistic, w),
            "acc_scrambled": _bounded(est.acc_scrambled[w], est.scrambled, w),
            "gain": _bounded(est.gain_value[w], est.gain, w, p=True),
        }
        if corrected(meta):
            entry["acc_scrambled_corrected"] = _bounded(
                est.acc_scrambled_corrected[w], est.scrambled_corrected, w
            )
            entry["gain_corrected"] = _bounded(est.gain_corrected_value[w], est.gain_corrected, w, p=True)
        if fraction_significant is not None:
            entry["fraction_significant_cells"] = _num(fraction_significant[w])
        entry["dropped_for_coverage"] = int(dropped.get(win.label, 0))
        out.append(entry)
    return out


def curve_header(meta: dict[str, Any], *, region: str, aggregation: str, interval_method: str) -> dict[str, Any]:
    return {
        "experiment": meta["experiment"],
        "variable": meta["variable"],
        "units": meta["units"],
        "region": region,
        "aggregation": aggregation,
        "confidence": meta["confidence"],
        "resamples": meta["resamples"],
        "seed": meta["seed"],
        "interval_method": interval_method,
        "scramble": meta.get("scramble", "other_years"),
    }


def region_curves(ra: RegionAssessment, windows: list[LeadWindow], meta: dict[str, Any]) -> list[dict[str, Any]]:
    """Both aggregations of one region, acc_of_region_mean first."""
    curves = []
    for aggregation, est in (("acc_of_region_mean", ra.series), ("region_mean_of_acc", ra.mean_of_acc)):
        curve = curve_header(meta, region=ra.region.id, aggregation=aggregation, interval_method=est.interval_method)
        if aggregation == "region_mean_of_acc":
            curve["min_cell_samples"] = meta.get("min_cell_samples")
        curve["windows"] = window_entries(est, windows, meta, fraction_significant=ra.fraction_significant)
        curves.append(curve)
    return curves


def _msess(m: Any, w: int) -> dict[str, float | None]:
    return {
        "value": _num(m.value[w]),
        "correlation": _num(m.correlation[w]),
        "conditional_bias": _num(m.conditional_bias[w]),
        "unconditional_bias": _num(m.unconditional_bias[w]),
        "climatology_shift": _num(m.climatology_shift[w]),
    }


def stratum_windows(st: StratumEstimate, windows: list[LeadWindow], meta: dict[str, Any]) -> list[dict[str, Any]]:
    """One stratum's scores per window, about the full-period climatology."""
    v, iv = st.values, st.intervals
    out = []
    for w, win in enumerate(windows):
        entry: dict[str, Any] = {
            "label": win.label,
            "first_day": win.first_day,
            "last_day": win.last_day,
            "n_years": int(np.nan_to_num(st.n_years[w])),
            "n_samples": int(np.nan_to_num(st.n_samples[w])),
            "acc_realistic": _bounded(v["acc_realistic"][w], iv["acc_realistic"], w),
            "acc_scrambled": _bounded(v["acc_scrambled"][w], iv["acc_scrambled"], w),
            "gain": _bounded(v["gain"][w], iv["gain"], w, p=True),
        }
        if corrected(meta):
            entry["acc_scrambled_corrected"] = _bounded(
                v["acc_scrambled_corrected"][w], iv["acc_scrambled_corrected"], w
            )
            entry["gain_corrected"] = _bounded(v["gain_corrected"][w], iv["gain_corrected"], w, p=True)
        entry["expected_gain"] = _bounded(v["expected_gain"][w], iv["expected_gain"], w)
        entry["state_dependence"] = _bounded(v["state_dependence"][w], iv["state_dependence"], w, p=True)
        entry["state_dependence_realistic"] = _bounded(
            v["state_dependence_realistic"][w], iv["state_dependence_realistic"], w, p=True
        )
        entry["msess_realistic"] = _msess(st.msess_realistic, w)
        entry["msess_scrambled"] = _msess(st.msess_scrambled, w)
        out.append(entry)
    return out


def conditional_table(ra: RegionAssessment, windows: list[LeadWindow], meta: dict[str, Any]) -> dict[str, Any]:
    """Gain by stratum of the regional-mean standardised initial land anomaly."""
    head = curve_header(
        meta, region=ra.region.id, aggregation="acc_of_region_mean", interval_method=meta["interval_method"]
    )
    head["stratified_by"] = (
        "terciles (dry, middle, wet) of the regional-mean initial land anomaly, standardised "
        "again after averaging; large_anomaly: |z| in its top third"
    )
    head["scored_about"] = (
        "the full-period climatology: uncentred correlation of the period anomalies within the "
        "stratum, and the MSE skill score against climatology with Murphy's (1988) decomposition"
    )
    head["expected_gain"] = (
        "the gain a state-independent linear system fitted to the whole sample gives for the "
        "stratum's own signal power; state_dependence = gain - expected_gain, tested on the same "
        "year-block resamples (state_dependence_realistic: the realistic run alone)"
    )
    if ra.strata is None:
        head["strata"] = []
        head["available"] = False
        return head
    head["available"] = True
    head["strata"] = [
        {
            "stratum": name,
            "mean_z": _num(np.nanmean(ra.strata[name].mean_z)) if np.isfinite(ra.strata[name].mean_z).any() else None,
            "windows": stratum_windows(ra.strata[name], windows, meta),
        }
        for name in STRATA
    ]
    return head
