"""The ``landlift`` command: demo, score, and (from app.service_cli) serve, worker, token, db.

Only this module, the API and the workers read the environment; everything below takes its
configuration as arguments.
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import sys
import tempfile
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from app.errors import LandliftError

CAUTION = (
    "These are statistical results about hindcasts, not a guarantee of forecast quality, and not "
    "for life-safety warnings; decisions rest with the forecasters and their centre's practice."
)


def _progress_bar(enabled: bool) -> Any:
    """A tqdm bar on a terminal; a no-op callback elsewhere."""
    if not enabled:
        return None
    from tqdm import tqdm

    bar = tqdm(total=100, desc="scoring", unit="%", file=sys.stderr, leave=False)

    def update(fraction: float, message: str) -> None:
        bar.n = round(100 * fraction)
        bar.set_postfix_str(message[:40])
        bar.refresh()
        if fraction >= 1.0:
            bar.close()

    return update


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "_", text).strip("_").lower() or "x"


def write_outputs(result: Any, out_dir: Path) -> dict[str, Path]:
    """skill.json, maps.nc, anomalies.nc, result.json and figures into ``out_dir``.

    Everything is written into a temporary folder beside ``out_dir`` first and moved into place
    only when complete, so a failure leaves no half-written result.
    """
    from app.results.figures import map_png, skill_png

    out_dir.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=".landlift-", dir=out_dir))
    try:
        written = result.save(staging)
        figs = staging / "figures"
        figs.mkdir()
        for curve in result.curves:
            name = f"skill_{_slug(curve['region'])}_{_slug(curve['aggregation'])}.png"
            (figs / name).write_bytes(skill_png(curve))
        for label in result.window_labels:
            (figs / f"gain_{_slug(label)}.png").write_bytes(map_png(result.maps, window=label, field="gain"))
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


def _options(args: argparse.Namespace) -> Any:
    from app.cube.engine import ScoreOptions, parse_memory_budget
    from app.cube.regions import read_geojson_region
    from app.cube.windows import parse_window

    windows = [parse_window(w).to_dict() for w in args.window] if args.window else None
    regions = [
        read_geojson_region(r) if r.endswith((".geojson", ".json")) else r for r in (args.region or [])
    ]
    budget = args.memory_budget or os.environ.get("LANDLIFT_MEMORY_BUDGET")
    return ScoreOptions(
        variable=args.variable,
        lead_windows=windows,
        regions=regions,
        resamples=args.resamples,
        seed=args.seed,
        confidence=args.confidence,
        interval=args.interval,
        fdr_alpha=args.fdr_alpha,
        equalize_members=args.equalize_members,
        memory_budget=parse_memory_budget(budget),
    ).validate()


def cmd_score(args: argparse.Namespace) -> int:
    from app.results.engine import score
    from app.results.tables import curve_table

    options = _options(args)
    scheduler = args.scheduler or os.environ.get("LANDLIFT_DASK_SCHEDULER") or None
    result = score(
        args.realistic,
        args.scrambled,
        args.observations,
        args.land_state,
        options=options,
        experiment=args.name,
        progress=_progress_bar(sys.stderr.isatty()),
        scheduler=scheduler,
    )
    paths = write_outputs(result, Path(args.out))
    print(curve_table(result.curve()))
    for w in result.meta["summary"].get("warnings", []):
        print(f"warning: {w}", file=sys.stderr)
    print(f"\nwrote {', '.join(str(p) for p in paths.values())}")
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from app.demo import run_demo

    return run_demo(data_dir=Path(args.data_dir or os.environ.get("LANDLIFT_DATA_DIR", "landlift-data")), resamples=args.resamples)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="landlift", description="Skill gain from land initialisation in sub-seasonal hindcasts.")
    sub = parser.add_subparsers(dest="command", required=True)

    demo = sub.add_parser("demo", help="score the built-in sample scenario and write its figures")
    demo.add_argument("--data-dir", help="where results go (default $LANDLIFT_DATA_DIR or ./landlift-data)")
    demo.add_argument("--resamples", type=int, default=1000)
    demo.set_defaults(func=cmd_demo)

    sc = sub.add_parser("score", help="score a hindcast pair against observations, no server")
    sc.add_argument("--realistic", required=True, help="hindcast from realistic land initial states (NetCDF or Zarr)")
    sc.add_argument("--scrambled", required=True, help="hindcast from land states scrambled across years")
    sc.add_argument("--observations", required=True, help="verifying daily observations on the same grid")
    sc.add_argument("--land-state", help="initial land state per start date (for the conditional gain)")
    sc.add_argument("--variable", help="variable to score (default: the only one in the files)")
    sc.add_argument("--region", action="append", help="region to report besides 'all' (repeatable): box:LAT0,LAT1,LON0,LON1, srex:ID, giorgi:ID, FILE.geojson")
    sc.add_argument("--window", action="append", help="lead window LABEL=FIRST-LAST (repeatable; default weeks 1-4 and 3-4)")
    sc.add_argument("--resamples", type=int, default=1000, help="year-block bootstrap resamples (1..10000)")
    sc.add_argument("--seed", type=int, default=1234)
    sc.add_argument("--confidence", type=float, default=0.95)
    sc.add_argument("--interval", choices=("expanded", "percentile"), default="expanded", help="bootstrap interval method (default: calibrated expanded percentile)")
    sc.add_argument("--fdr-alpha", type=float, default=0.10, help="Benjamini-Hochberg false discovery rate for map significance")
    sc.add_argument("--equalize-members", action="store_true", help="subsample both experiments to the smaller ensemble")
    sc.add_argument("--scheduler", help="dask.distributed scheduler address (default $LANDLIFT_DASK_SCHEDULER)")
    sc.add_argument("--memory-budget", help="working-set budget such as 512MiB or 2GiB (default $LANDLIFT_MEMORY_BUDGET or 1GiB)")
    sc.add_argument("--name", default="experiment", help="experiment name written into the results")
    sc.add_argument("--out", required=True, help="output folder")
    sc.set_defaults(func=cmd_score)

    from app.service_cli import add_service_commands

    add_service_commands(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    return dispatch(build_parser().parse_args(argv))


def dispatch(args: argparse.Namespace) -> int:
    """Run a parsed command; domain and settings errors become a message and exit code 2."""
    try:
        return int(args.func(args) or 0)
    except LandliftError as exc:
        print(f"landlift: error: {exc.message}", file=sys.stderr)
        return 2
    except ValueError as exc:  # e.g. a bad LANDLIFT_* setting (pydantic names the variable)
        print(f"landlift: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("landlift: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    raise SystemExit(main())
