"""A result folder for people: the four result files plus the figures, written atomically."""

from __future__ import annotations

import os
import re
import shutil
import tempfile
from pathlib import Path

from app.results.figures import map_png, skill_png
from app.results.result import ScoreResult


def slug(text: str) -> str:
    """A file-name-safe form of a region id, aggregation or window label."""
    return re.sub(r"[^A-Za-z0-9]+", "_", text).strip("_").lower() or "x"


def write_result_folder(result: ScoreResult, out_dir: Path) -> dict[str, Path]:
    """skill.json, maps.nc, anomalies.nc, result.json and ``figures/`` into ``out_dir``.

    Everything is written into a temporary folder beside ``out_dir`` first and moved into place
    only when complete, so a failure leaves no half-written result.
    """
    out_dir.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=".landlift-", dir=out_dir))
    try:
        written = result.save(staging)
        figs = staging / "figures"
        figs.mkdir()
        for curve in result.curves:
            name = f"skill_{slug(curve['region'])}_{slug(curve['aggregation'])}.png"
            (figs / name).write_bytes(skill_png(curve))
        field = "gain_corrected" if "gain_corrected" in result.maps else "gain"
        for label in result.window_labels:
            (figs / f"gain_{slug(label)}.png").write_bytes(map_png(result.maps, window=label, field=field))
        final: dict[str, Path] = {}
        for name in written:
            os.replace(staging / name, out_dir / name)
            final[name] = out_dir / name
        if (out_dir / "figures").exists():
            shutil.rmtree(out_dir / "figures")
        os.replace(figs, out_dir / "figures")
        final["figures"] = out_dir / "figures"
        return final
    finally:
        shutil.rmtree(staging, ignore_errors=True)
