"""``landlift demo``: score the sample scenario end to end and show where the results are."""

from __future__ import annotations

import sys
from pathlib import Path


def sample_files() -> dict[str, Path]:
    """The committed sample scenario (sample_data/ beside the package)."""
    root = Path(__file__).resolve().parent.parent / "sample_data"
    files = {role: root / f"{role}.nc" for role in ("realistic", "scrambled", "observations", "land_state")}
    missing = [str(p) for p in files.values() if not p.exists()]
    if missing:
        from app.errors import InputError

        raise InputError(f"sample scenario files are missing: {', '.join(missing)}; run sample_data/generate.py")
    return files


def run_demo(*, data_dir: Path, resamples: int = 1000) -> int:
    from app.cli import CAUTION, write_outputs
    from app.results.engine import ScoreOptions, score
    from app.results.tables import curve_table

    files = sample_files()
    belt = "box:34,58,17,31"
    east = "box:34,58,32,43"
    options = ScoreOptions(regions=[belt, east], resamples=resamples, seed=1234).validate()
    print(f"Scoring the sample scenario (fictional continent) from {files['realistic'].parent} ...")
    result = score(
        files["realistic"], files["scrambled"], files["observations"], files["land_state"],
        options=options, experiment="sample-continent",
    )
    out = data_dir / "demo"
    paths = write_outputs(result, out)
    for region, name in (("all", "whole domain"), (belt, "semi-arid belt"), (east, "humid east")):
        print(f"\n== {name} ==")
        print(curve_table(result.curve(region)))
    print(f"\n{CAUTION}\n")
    print("Results:")
    for key, p in paths.items():
        print(f"  {key:<13} {p}")
    sys.stdout.flush()
    return 0
