"""Text tables of skill curves: CSV for clients, an aligned table for the terminal."""

from __future__ import annotations

import csv
import io
from typing import Any

from app.stats.intervals import format_p_value, significance_level

CSV_COLUMNS = (
    "experiment",
    "variable",
    "units",
    "region",
    "aggregation",
    "window",
    "first_day",
    "last_day",
    "n_years",
    "n_samples",
    "acc_realistic",
    "acc_realistic_low",
    "acc_realistic_high",
    "acc_scrambled",
    "acc_scrambled_low",
    "acc_scrambled_high",
    "gain",
    "gain_low",
    "gain_high",
    "gain_p_value",
    "confidence",
    "resamples",
    "seed",
    # added columns (clients rely on the ones above keeping their places)
    "scramble",
    "gain_corrected",
    "gain_corrected_low",
    "gain_corrected_high",
    "gain_corrected_p_value",
    "interval_method",
)


def curve_rows(curve: dict[str, Any]) -> list[dict[str, Any]]:
    rows = []
    for w in curve["windows"]:
        rows.append(
            {
                **{k: curve[k] for k in ("experiment", "variable", "units", "region", "aggregation")},
                "window": w["label"],
                "first_day": w["first_day"],
                "last_day": w["last_day"],
                "n_years": w["n_years"],
                "n_samples": w["n_samples"],
                "acc_realistic": w["acc_realistic"]["value"],
                "acc_realistic_low": w["acc_realistic"]["low"],
                "acc_realistic_high": w["acc_realistic"]["high"],
                "acc_scrambled": w["acc_scrambled"]["value"],
                "acc_scrambled_low": w["acc_scrambled"]["low"],
                "acc_scrambled_high": w["acc_scrambled"]["high"],
                "gain": w["gain"]["value"],
                "gain_low": w["gain"]["low"],
                "gain_high": w["gain"]["high"],
                "gain_p_value": w["gain"]["p_value"],
                "confidence": curve["confidence"],
                "resamples": curve["resamples"],
                "seed": curve["seed"],
                "scramble": curve.get("scramble", ""),
                "gain_corrected": (w.get("gain_corrected") or {}).get("value"),
                "gain_corrected_low": (w.get("gain_corrected") or {}).get("low"),
                "gain_corrected_high": (w.get("gain_corrected") or {}).get("high"),
                "gain_corrected_p_value": (w.get("gain_corrected") or {}).get("p_value"),
                "interval_method": curve.get("interval_method", ""),
            }
        )
    return rows


def curve_csv(curve: dict[str, Any]) -> str:
    """One row per lead window; empty cells where a value is undefined."""
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(CSV_COLUMNS), lineterminator="\n")
    writer.writeheader()
    for row in curve_rows(curve):
        writer.writerow({k: "" if v is None else v for k, v in row.items()})
    return buf.getvalue()


def _f(x: float | None, width: int = 6) -> str:
    return f"{x:+.2f}".rjust(width) if x is not None else "n/a".rjust(width)


def headline_gain(window: dict[str, Any]) -> tuple[dict[str, Any], str]:
    """The gain to show people: the corrected one when the run has it, with its label."""
    if window.get("gain_corrected") is not None:
        return window["gain_corrected"], "gain (corrected)"
    return window["gain"], "gain"


def curve_table(curve: dict[str, Any]) -> str:
    """A readable skill-by-lead table for the terminal (the corrected gain when it applies)."""
    conf = round(100 * curve["confidence"])
    head = (
        f"{curve['variable']} ({curve['units']}), region {curve['region']}, {curve['aggregation']}, "
        f"{conf}% {curve.get('interval_method', '')} intervals from {curve['resamples']} year-block "
        f"resamples (seed {curve['seed']})"
    )
    label = headline_gain(curve["windows"][0])[1] if curve["windows"] else "gain"
    fixed = label != "gain"
    scr_label = "ACC scr (corr.)" if fixed else "ACC scr"
    cols = (
        f"{'window':<10} {'days':>6} {'years':>5} {'ACC real':>9} {scr_label:>{max(8, len(scr_label))}} "
        f"{label:>{max(6, len(label))}} {'interval':>16} {'p':>7}"
    )
    lines = [head, cols, "-" * len(cols)]
    for w in curve["windows"]:
        g, _ = headline_gain(w)
        p = g["p_value"]
        star = "*" if p is not None and p < significance_level(curve["confidence"]) else " "
        interval = f"[{_f(g['low'], 0)}, {_f(g['high'], 0)}]"
        shown_p = "n/a" if p is None else format_p_value(p, resamples=int(curve["resamples"]))
        scr = w["acc_scrambled_corrected"] if fixed else w["acc_scrambled"]
        lines.append(
            f"{w['label']:<10} {w['first_day']:>2}-{w['last_day']:<3} {w['n_years']:>5} "
            f"{_f(w['acc_realistic']['value'], 9)} {_f(scr['value'], max(8, len(scr_label)))} "
            f"{_f(g['value'], max(6, len(label)))} {interval:>16} {shown_p:>7}{star}"
        )
    alpha = round(1 - curve["confidence"], 12)
    lines.append(f"* gain interval excludes 0 (p < {alpha:g})")
    if curve["windows"] and curve["windows"][0].get("gain_corrected") is not None:
        lines.append(
            "gain (corrected): the scrambled states came from other years of the period, which "
            "biases the raw gain high by gain/(n-1); the raw gain is in skill.json and maps.nc"
        )
    return "\n".join(lines)
