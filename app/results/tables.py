"""Text tables of skill curves: CSV for clients, an aligned table for the terminal."""

from __future__ import annotations

import csv
import io
from typing import Any

from app.stats.intervals import significance_level

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


def curve_table(curve: dict[str, Any]) -> str:
    """A readable skill-by-lead table for the terminal."""
    conf = round(100 * curve["confidence"])
    head = (
        f"{curve['variable']} ({curve['units']}), region {curve['region']}, {curve['aggregation']}, "
        f"{conf}% intervals from {curve['resamples']} year-block resamples (seed {curve['seed']})"
    )
    cols = f"{'window':<10} {'days':>6} {'years':>5} {'ACC real':>9} {'ACC scr':>8} {'gain':>6} {'interval':>16} {'p':>6}"
    lines = [head, cols, "-" * len(cols)]
    for w in curve["windows"]:
        g = w["gain"]
        p = g["p_value"]
        star = "*" if p is not None and p < significance_level(curve["confidence"]) else " "
        interval = f"[{_f(g['low'], 0)}, {_f(g['high'], 0)}]"
        lines.append(
            f"{w['label']:<10} {w['first_day']:>2}-{w['last_day']:<3} {w['n_years']:>5} "
            f"{_f(w['acc_realistic']['value'], 9)} {_f(w['acc_scrambled']['value'], 8)} {_f(g['value'])} "
            f"{interval:>16} {('n/a' if p is None else f'{p:.3f}'):>6}{star}"
        )
    lines.append(f"* gain interval excludes 0 (p < {1 - curve['confidence']:.2f})")
    return "\n".join(lines)
