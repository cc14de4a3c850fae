"""``landlift score``: the scoring of the service, with no server, into a folder.

The flags fill :class:`app.runs.options.RunOptions` (the model the HTTP body embeds), so the
bounds and the error texts are the service's.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from app.errors import ParameterError
from app.runs.options import RunOptions, validated, window_from_text
from app.settings import Settings
from app.sizes import MIN_MEMORY_BUDGET, parse_size
from app.stats.intervals import INTERVAL_METHODS
from app.stats.scramble import SCRAMBLE_DESIGNS


def progress_bar(enabled: bool) -> Any:
    """A tqdm bar on a terminal; None (no callback) elsewhere."""
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


def read_geojson_region(path: str | Path) -> dict[str, Any]:
    """The mapping form of a GeoJSON file, named after the file."""
    p = Path(path)
    try:
        return {"name": p.stem, "geojson": json.loads(p.read_text())}
    except (OSError, ValueError) as exc:
        raise ParameterError(f"region file {p.name}: cannot read GeoJSON ({exc})") from exc


def options_from_flags(args: argparse.Namespace) -> RunOptions:
    """The run options the flags ask for (checked by the model, as an HTTP body would be)."""
    data: dict[str, Any] = {
        "bootstrap": {
            "resamples": args.resamples,
            "seed": args.seed,
            "confidence": args.confidence,
            "interval": args.interval,
        },
        "fdr_alpha": args.fdr_alpha,
        "equalize_members": args.equalize_members,
        "leave_one_out": not args.no_leave_one_out,
        "scramble": args.scramble,
        "min_cell_samples": args.min_cell_samples,
        "min_coverage": args.min_coverage,
    }
    if args.variable is not None:
        data["variable"] = args.variable
    if args.window:
        data["lead_windows"] = [window_from_text(w) for w in args.window]
    if args.region:
        data["regions"] = [
            read_geojson_region(r) if r.endswith((".geojson", ".json")) else r for r in args.region
        ]
    return validated(RunOptions, data)  # type: ignore[no-any-return]


def memory_budget(text: str | None, settings: Settings) -> int | None:
    if text is None:
        return settings.memory_budget
    try:
        size = parse_size(text)
    except ValueError as exc:
        raise ParameterError(f"--memory-budget: {exc}") from exc
    if size < MIN_MEMORY_BUDGET:
        raise ParameterError(f"--memory-budget {text}: need at least 16MiB ({MIN_MEMORY_BUDGET} bytes)")
    return size


def cmd_score(args: argparse.Namespace) -> int:
    from app.results.export import write_result_folder
    from app.results.tables import curve_table
    from app.runs.scoring import score_files

    options = options_from_flags(args)
    settings = Settings()
    result = score_files(
        args.realistic,
        args.scrambled,
        args.observations,
        args.land_state,
        options=options,
        experiment=args.name,
        progress=progress_bar(sys.stderr.isatty()),
        scheduler=args.scheduler or settings.dask_scheduler,
        memory_budget=memory_budget(args.memory_budget, settings),
    )
    paths = write_result_folder(result, Path(args.out))
    print(curve_table(result.curve()))
    for w in result.meta["summary"].get("warnings", []):
        print(f"warning: {w}", file=sys.stderr)
    print(f"\nwrote {', '.join(str(p) for p in paths.values())}")
    return 0


def add_command(sub: Any) -> None:
    defaults = RunOptions().bootstrap
    sc = sub.add_parser("score", help="score a hindcast pair against observations, no server")
    sc.add_argument("--realistic", required=True, help="hindcast from realistic land initial states (NetCDF or Zarr)")
    sc.add_argument("--scrambled", required=True, help="hindcast from land states scrambled across years")
    sc.add_argument("--observations", required=True, help="verifying daily observations on the same grid")
    sc.add_argument("--land-state", help="initial land state per start date (for the conditional gain)")
    sc.add_argument("--variable", help="variable to score (default: the only one in the files)")
    sc.add_argument("--region", action="append", help="region to report besides 'all' (repeatable): box:LAT0,LAT1,LON0,LON1, srex:ID, giorgi:ID, FILE.geojson")
    sc.add_argument("--window", action="append", help="lead window LABEL=FIRST-LAST (repeatable; default weeks 1-4 and 3-4)")
    sc.add_argument("--resamples", type=int, default=defaults.resamples, help="year-block bootstrap resamples")
    sc.add_argument("--seed", type=int, default=defaults.seed)
    sc.add_argument("--confidence", type=float, default=defaults.confidence)
    sc.add_argument("--interval", choices=INTERVAL_METHODS, default=defaults.interval, help="bootstrap interval method")
    sc.add_argument("--fdr-alpha", type=float, default=RunOptions().fdr_alpha, help="Benjamini-Hochberg false discovery rate for map significance")
    sc.add_argument("--equalize-members", action="store_true", help="subsample both experiments to the smaller ensemble")
    sc.add_argument("--scramble", choices=SCRAMBLE_DESIGNS, default=RunOptions().scramble,
                    help="how the scrambled land states were drawn: other_years (the gain is also "
                    "reported corrected for the bias this causes) or independent")
    sc.add_argument("--min-cell-samples", type=int, default=RunOptions().min_cell_samples,
                    help="fewest (year, start) samples a cell needs to be scored")
    sc.add_argument("--min-coverage", type=float, default=RunOptions().min_coverage,
                    help="share of a window's days that must be observed for it to count")
    sc.add_argument("--no-leave-one-out", action="store_true", help="climatologies over all years, the verified one included")
    sc.add_argument("--scheduler", help="dask.distributed scheduler address (default $LANDLIFT_DASK_SCHEDULER)")
    sc.add_argument("--memory-budget", help="working-set budget such as 512MiB or 2GiB (default $LANDLIFT_MEMORY_BUDGET or 1GiB)")
    sc.add_argument("--name", default="experiment", help="experiment name written into the results")
    sc.add_argument("--out", required=True, help="output folder")
    sc.set_defaults(func=cmd_score)
