"""Figures: the skill-by-lead curve and per-window maps (matplotlib object API, Agg, PNG bytes).

matplotlib is imported inside the functions, so importing this module costs nothing.
"""

from __future__ import annotations

import io
from typing import Any

import numpy as np
import xarray as xr

from app.stats.intervals import significance_level

FIELD_STYLE: dict[str, tuple[str, float | None]] = {
    "gain": ("RdBu_r", 0.6),
    "gain_low": ("RdBu_r", 0.6),
    "gain_high": ("RdBu_r", 0.6),
    "acc_realistic": ("RdBu_r", 1.0),
    "acc_scrambled": ("RdBu_r", 1.0),
    "p_value": ("viridis_r", None),
    "significant": ("Greys", None),
}


def _new_figure(width: float, height: float) -> Any:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=100, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _png(fig: Any) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def skill_png(curve: dict[str, Any]) -> bytes:
    """ACC of both experiments (top) and the gain with its interval (bottom), by lead window."""
    wins = curve["windows"]
    labels = [w["label"] for w in wins]
    x = np.arange(len(wins))

    def series(key: str, part: str) -> np.ndarray:
        return np.array([np.nan if w[key][part] is None else w[key][part] for w in wins], dtype=float)

    fig = _new_figure(7.0, 5.5)
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=[3, 2])
    for key, colour, name, dx in (
        ("acc_realistic", "tab:green", "realistic land starts", -0.08),
        ("acc_scrambled", "tab:grey", "scrambled land starts", 0.08),
    ):
        v, lo, hi = series(key, "value"), series(key, "low"), series(key, "high")
        # a biased bootstrap can put the point outside its interval: never draw negative bars
        yerr = np.clip(np.nan_to_num([v - lo, hi - v]), 0.0, None)
        top.errorbar(x + dx, v, yerr=yerr, fmt="o-", color=colour, capsize=3, label=name)
    top.axhline(0.0, color="black", lw=0.6)
    top.set_ylabel("anomaly correlation")
    top.legend(loc="best", fontsize=8)
    conf = round(100 * curve["confidence"])
    top.set_title(
        f"{curve['experiment']}: {curve['variable']}, region {curve['region']}\n"
        f"{curve['aggregation']}, {conf}% year-block bootstrap intervals (B={curve['resamples']})",
        fontsize=9,
    )
    g, lo, hi = series("gain", "value"), series("gain", "low"), series("gain", "high")
    p = series("gain", "p_value")
    sig = p < significance_level(curve["confidence"])
    bottom.bar(x, g, color=np.where(sig, "tab:blue", "lightsteelblue"), width=0.5)
    bottom.errorbar(x, g, yerr=np.clip(np.nan_to_num([g - lo, hi - g]), 0.0, None), fmt="none", ecolor="black", capsize=3)
    bottom.axhline(0.0, color="black", lw=0.6)
    bottom.set_ylabel("gain (realistic - scrambled)")
    bottom.set_xticks(x, labels)
    bottom.set_xlabel("lead window (dark bars: interval excludes 0)")
    return _png(fig)


def map_png(maps: xr.Dataset, *, window: str, field: str) -> bytes:
    """One field of one window; gain maps dot the cells that are FDR-significant."""
    da = maps[field].sel(window=window)
    cmap, vmax = FIELD_STYLE.get(field, ("viridis", None))
    lat, lon = maps["lat"].values, maps["lon"].values
    values = np.asarray(da.values, dtype=float)
    fig = _new_figure(6.5, 4.5)
    ax = fig.add_subplot(1, 1, 1)
    if vmax is not None:
        lim = max(vmax, float(np.nanmax(np.abs(values)))) if np.isfinite(values).any() else vmax
        mesh = ax.pcolormesh(lon, lat, values, cmap=cmap, vmin=-lim, vmax=lim, shading="nearest")
    elif field == "p_value":
        mesh = ax.pcolormesh(lon, lat, values, cmap=cmap, vmin=0.0, vmax=1.0, shading="nearest")
    else:
        mesh = ax.pcolormesh(lon, lat, values, cmap=cmap, vmin=0, vmax=1, shading="nearest")
    fig.colorbar(mesh, ax=ax, shrink=0.85, label=field)
    if field.startswith("gain") and "significant" in maps:
        sig = maps["significant"].sel(window=window).values.astype(bool)
        yy, xx = np.meshgrid(lat, lon, indexing="ij")
        ax.plot(xx[sig], yy[sig], "k.", ms=3, label="FDR-significant")
        if sig.any():
            ax.legend(loc="lower right", fontsize=7)
    ax.set_xlabel("longitude (degrees east)")
    ax.set_ylabel("latitude (degrees north)")
    ax.set_title(f"{field}, {window}: {maps.attrs.get('title', '')}", fontsize=9)
    ax.set_aspect("equal", adjustable="box")
    return _png(fig)
