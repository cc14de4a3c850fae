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
    "gain_corrected": ("RdBu_r", 0.6),
    "gain_corrected_low": ("RdBu_r", 0.6),
    "gain_corrected_high": ("RdBu_r", 0.6),
    "acc_scrambled_corrected": ("RdBu_r", 1.0),
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


def _finite(a: np.ndarray) -> np.ndarray:
    return np.where(np.isfinite(a), a, np.nan)


def _intervals(ax: Any, x: np.ndarray, low: np.ndarray, high: np.ndarray, colour: str) -> None:
    """Each interval drawn from its own bounds (never clipped to its point: a bound read beside
    the point shows as such); open ends (too few resamples) are not drawn."""
    lo, hi = _finite(low), _finite(high)
    ax.vlines(x, lo, hi, colors=colour, lw=1.2)
    ax.hlines(np.concatenate([lo, hi]), np.concatenate([x, x]) - 0.06, np.concatenate([x, x]) + 0.06,
              colors=colour, lw=1.2)


def skill_png(curve: dict[str, Any]) -> bytes:
    """ACC of both experiments (top) and the gain with its interval (bottom), by lead window.

    The gain panel shows the gain corrected for other-year scrambled states when the run has
    it (labelled so); the raw gain stays in the JSON and NetCDF forms.
    """
    wins = curve["windows"]
    labels = [w["label"] for w in wins]
    x = np.arange(len(wins), dtype=float)
    gain_key = "gain_corrected" if wins and wins[0].get("gain_corrected") is not None else "gain"

    def series(key: str, part: str) -> np.ndarray:
        return np.array([np.nan if w[key][part] is None else w[key][part] for w in wins], dtype=float)

    fig = _new_figure(7.0, 5.5)
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=[3, 2])
    scrambled_key = "acc_scrambled_corrected" if gain_key == "gain_corrected" else "acc_scrambled"
    for key, colour, name, dx in (
        ("acc_realistic", "tab:green", "realistic land starts", -0.08),
        (scrambled_key, "tab:grey",
         "scrambled land starts" + (" (corrected)" if key_is_corrected(scrambled_key) else ""), 0.08),
    ):
        v, lo, hi = series(key, "value"), series(key, "low"), series(key, "high")
        top.plot(x + dx, v, "o-", color=colour, label=name)
        _intervals(top, x + dx, lo, hi, colour)
    top.axhline(0.0, color="black", lw=0.6)
    top.set_ylabel("anomaly correlation")
    top.legend(loc="best", fontsize=8)
    conf = round(100 * curve["confidence"])
    top.set_title(
        f"{curve['experiment']}: {curve['variable']}, region {curve['region']}\n"
        f"{curve['aggregation']}, {conf}% year-block bootstrap intervals "
        f"({curve.get('interval_method', '')}, B={curve['resamples']})",
        fontsize=9,
    )
    g, lo, hi = series(gain_key, "value"), series(gain_key, "low"), series(gain_key, "high")
    p = series(gain_key, "p_value")
    sig = p < significance_level(curve["confidence"])
    bottom.bar(x, np.nan_to_num(g), color=np.where(sig, "tab:blue", "lightsteelblue"), width=0.5)
    _intervals(bottom, x, lo, hi, "black")
    bottom.axhline(0.0, color="black", lw=0.6)
    bottom.set_ylabel("gain, corrected" if gain_key == "gain_corrected" else "gain (realistic - scrambled)")
    bottom.set_xticks(x, labels)
    note = "; corrected for scrambled states from other years" if gain_key == "gain_corrected" else ""
    bottom.set_xlabel(f"lead window (dark bars: interval excludes 0{note})", fontsize=8)
    return _png(fig)


def key_is_corrected(key: str) -> bool:
    return key.endswith("_corrected")


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
