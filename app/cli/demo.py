"""``landlift demo``: the sample scenario through the same path as the service.

The four sample files are admitted as datasets exactly as uploads are (streamed into the
artifact store, validated in a sandboxed child process, recorded in the database), the
experiment is checked and queued as ``POST /v1/experiments`` does, and an in-process worker runs
the job from the durable queue. The result is then read back from the store, printed, and its
files and figures are written beside the database.
"""

from __future__ import annotations

import argparse
import shutil
import sys
from pathlib import Path
from typing import Any

from app.errors import InputError, LandliftError

SAMPLE_ROLES = {
    "realistic": "hindcast",
    "scrambled": "hindcast",
    "observations": "observations",
    "land_state": "land_state",
}
#: zones of the fictional continent (sample_data/README.md)
BELT = "box:34,58,17,31"
EAST = "box:34,58,32,43"


def sample_files() -> dict[str, Path]:
    """The committed sample scenario (sample_data/ beside the package)."""
    root = Path(__file__).resolve().parents[2] / "sample_data"
    files = {slot: root / f"{slot}.nc" for slot in SAMPLE_ROLES}
    missing = [str(p) for p in files.values() if not p.exists()]
    if missing:
        raise InputError(f"sample scenario files are missing: {', '.join(missing)}; run sample_data/generate.py")
    return files


def run_demo(*, data_dir: Path, resamples: int = 1000) -> int:
    from app.jobs.worker import Worker
    from app.results.contract import CAUTION
    from app.results.export import write_result_folder
    from app.results.tables import curve_table
    from app.runs.admission import ingest_file
    from app.runs.options import RunOptions, validated
    from app.runs.submission import submit_experiment
    from app.settings import Settings
    from app.store import Store, experiment_rows, job_rows

    files = sample_files()
    settings = Settings(data_dir=data_dir.resolve())
    store = Store.open(settings, upgrade_schema=True)
    try:
        print(f"Sample scenario (a fictional continent) from {files['realistic'].parent}")
        print(f"Store: {settings.url}")
        ids: dict[str, str | None] = {}
        for slot, role in SAMPLE_ROLES.items():
            dataset, created = ingest_file(store, settings, files[slot], role=role)
            ids[slot] = dataset["id"]
            print(f"  dataset {dataset['id']}  {slot:<13} {'added' if created else 'already stored'}")
        options: RunOptions = validated(
            RunOptions, {"regions": [BELT, EAST], "bootstrap": {"resamples": resamples, "seed": 1234}}
        )
        exp = submit_experiment(
            store, name="sample-continent", datasets=ids, options=options,
            parameters={"name": "sample-continent", **ids, **options.dump()},
        )
        print(f"  experiment {exp['id']} queued as job {exp['job']['id']}; running it here ...")
        Worker(store, name="demo").run(drain=True)
        job = job_rows.get_job(store, exp["job"]["id"])
        if job["status"] != "done":
            raise LandliftError(f"the demo job ended {job['status']}: {job.get('error')}")
        result = experiment_rows.load_result(store, exp["id"])
        for region, name in (("all", "whole domain"), (BELT, "semi-arid belt"), (EAST, "humid east")):
            print(f"\n== {name} ==")
            print(curve_table(result.curve(region)))
        paths = write_result_folder(result, data_dir / "demo")
    finally:
        store.close()
    print(f"\n{CAUTION}\n")
    print("Files:")
    for key, p in paths.items():
        print(f"  {key:<13} {p}")
    base = "http://127.0.0.1:8000"
    cmd = "landlift" if shutil.which("landlift") else (sys.argv[0] if sys.argv[0].endswith("landlift") else ".venv/bin/landlift")
    print(
        "\nServe these results over HTTP:\n"
        f"  LANDLIFT_DATA_DIR={data_dir} {cmd} token create --scope read --name me   # prints a token\n"
        f"  LANDLIFT_DATA_DIR={data_dir} {cmd} serve --port 8000\n"
        f"  dashboard  {base}/   (paste the token)\n"
        f"  curve      curl -H 'Authorization: Bearer TOKEN' '{base}/v1/experiments/{exp['id']}/skill'\n"
        f"  figure     {base}/v1/experiments/{exp['id']}/skill?format=png\n"
        f"  gain map   {base}/v1/experiments/{exp['id']}/maps/weeks%203-4?field=gain_corrected&format=png\n"
        f"  API docs   {base}/docs"
    )
    sys.stdout.flush()
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from app.settings import Settings

    data_dir = Path(args.data_dir) if args.data_dir else Settings().data_dir
    return run_demo(data_dir=data_dir, resamples=args.resamples)


def add_command(sub: Any) -> None:
    demo = sub.add_parser("demo", help="score the built-in sample scenario and write its figures")
    demo.add_argument("--data-dir", help="where results go (default $LANDLIFT_DATA_DIR or ./landlift-data)")
    demo.add_argument("--resamples", type=int, default=1000)
    demo.set_defaults(func=cmd_demo)
