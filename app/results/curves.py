"""Skill curves and conditional-gain tables in the JSON shape of DESIGN section 5."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from app.cube.assess import STRATA, Estimate
from app.cube.pipeline import RegionAssessment
from app.cube.windows import LeadWindow


def _num(x: Any) -> float | None:
    v = float(x)
    return None if math.isnan(v) or math.isinf(v) else round(v, 6)


def window_entries(
    est: Estimate, windows: list[LeadWindow], *, fraction_significant: np.ndarray | None = None
) -> list[dict[str, Any]]:
    out = []
    for w, win in enumerate(windows):
        entry: dict[str, Any] = {
            "label": win.label,
            "first_day": win.first_day,
            "last_day": win.last_day,
            "n_years": int(np.nan_to_num(est.n_years[w])),
            "n_samples": int(np.nan_to_num(est.n_samples[w])),
            "acc_realistic": {
                "value": _num(est.acc_realistic[w]),
                "low": _num(est.realistic.low[w]),
                "high": _num(est.realistic.high[w]),
            },
            "acc_scrambled": {
                "value": _num(est.acc_scrambled[w]),
                "low": _num(est.scrambled.low[w]),
                "high": _num(est.scrambled.high[w]),
            },
            "gain": {
                "value": _num(est.gain_value[w]),
                "low": _num(est.gain.low[w]),
                "high": _num(est.gain.high[w]),
                "p_value": _num(est.gain.p_value[w]),
            },
        }
        if fraction_significant is not None:
            entry["fraction_significant_cells"] = _num(fraction_significant[w])
        out.append(entry)
    return out


def curve_header(meta: dict[str, Any], *, region: str, aggregation: str) -> dict[str, Any]:
    return {
        "experiment": meta["experiment"],
        "variable": meta["variable"],
        "units": meta["units"],
        "region": region,
        "aggregation": aggregation,
        "confidence": meta["confidence"],
        "resamples": meta["resamples"],
        "seed": meta["seed"],
        "interval_method": meta["interval_method"],
    }


def region_curves(ra: RegionAssessment, windows: list[LeadWindow], meta: dict[str, Any]) -> list[dict[str, Any]]:
    """Both aggregations of one region, acc_of_region_mean first."""
    curves = []
    for aggregation, est in (("acc_of_region_mean", ra.series), ("region_mean_of_acc", ra.mean_of_acc)):
        curve = curve_header(meta, region=ra.region.id, aggregation=aggregation)
        curve["windows"] = window_entries(est, windows, fraction_significant=ra.fraction_significant)
        curves.append(curve)
    return curves


def conditional_table(ra: RegionAssessment, windows: list[LeadWindow], meta: dict[str, Any]) -> dict[str, Any]:
    """Gain by stratum of the regional-mean standardised initial land anomaly."""
    head = curve_header(meta, region=ra.region.id, aggregation="acc_of_region_mean")
    head["stratified_by"] = "terciles of the regional-mean standardised initial land anomaly"
    if ra.strata is None:
        head["strata"] = []
        head["available"] = False
        return head
    head["available"] = True
    head["strata"] = [
        {"stratum": name, "mean_z": _num(ra.strata[name][1]), "windows": window_entries(ra.strata[name][0], windows)}
        for name in STRATA
    ]
    return head
