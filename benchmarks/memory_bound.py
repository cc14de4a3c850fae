"""Memory-bound benchmark: score a hindcast pair ~4x larger than the memory budget, end to end.

Writes a synthetic pair (``synthetic_pair.py``: float32, uncompressed, chunked along space) of
``--size`` bytes in total, then runs the real command in a child process::

    /usr/bin/time -v .venv/bin/landlift score --realistic ... --memory-budget BUDGET --out ...

and reads the child's peak resident set size from ``/usr/bin/time -v`` ("Maximum resident set
size"; without /usr/bin/time, from ``resource.getrusage(RUSAGE_CHILDREN)``). Prints ONE JSON
line; ``peak_rss_over_budget`` is the figure, the target is < 1.5. The files are deleted at the
end unless ``--keep`` (or ``--data`` named an existing pair, which is never deleted).

Run (target: 1 GiB budget, >= 4 GiB of inputs; about 5 GiB of disk, 1-2 minutes)::

    .venv/bin/python benchmarks/memory_bound.py
    .venv/bin/python benchmarks/memory_bound.py --budget 256MiB --size 1GiB   # quick check
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import re
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import asdict
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))
import synthetic_pair as sp  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
TARGET = 1.5


def landlift_command() -> list[str]:
    exe = Path(sys.executable).with_name("landlift")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "app.cli"]


def input_paths(folder: Path) -> dict[str, Path]:
    """The pair in ``folder`` (NetCDF files or Zarr stores written by synthetic_pair.py)."""
    for ext in (".nc", ".zarr"):
        paths = {role: folder / f"{role}{ext}" for role in sp.ROLES}
        if all(paths[r].exists() for r in sp.ROLES[:3]):
            return {r: p for r, p in paths.items() if p.exists()}
    raise SystemExit(f"no synthetic pair (realistic/scrambled/observations .nc or .zarr) in {folder}")


def score_args(paths: dict[str, Path], out: Path, *, budget: str, extra: list[str] | None = None) -> list[str]:
    args = ["score"]
    for role, path in paths.items():
        args += [f"--{role.replace('_', '-')}", str(path)]
    return args + ["--memory-budget", budget, "--out", str(out), *(extra or [])]


def run_measured(command: list[str]) -> dict[str, Any]:
    """Run ``command``; wall time, peak RSS and CPU times of the child."""
    time_bin = shutil.which("time") or ("/usr/bin/time" if Path("/usr/bin/time").exists() else None)
    wrapped = [time_bin, "-v", *command] if time_bin else command
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    proc = subprocess.run(wrapped, capture_output=True, text=True, cwd=ROOT)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        sys.stderr.write(proc.stdout[-2000:] + proc.stderr[-4000:])
        raise SystemExit(f"scoring failed with exit status {proc.returncode}")
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    found = re.search(r"Maximum resident set size \(kbytes\): (\d+)", proc.stderr)
    if found:
        peak, source = int(found[1]) * 1024, "/usr/bin/time -v"
    else:
        peak, source = int(after.ru_maxrss) * 1024, "getrusage(RUSAGE_CHILDREN)"
    return {
        "wall_s": round(wall, 2),
        "user_s": round(after.ru_utime - before.ru_utime, 2),
        "system_s": round(after.ru_stime - before.ru_stime, 2),
        "peak_rss_bytes": peak,
        "rss_source": source,
    }


def prepare_pair(args: argparse.Namespace, folder: Path) -> tuple[dict[str, Path], dict[str, Any]]:
    """Reuse ``--data`` or write a fresh pair of ``--size`` into ``folder``."""
    if args.data:
        paths = input_paths(Path(args.data))
        return paths, {"written": False}
    size = sp.parse_size(args.size)
    free = shutil.disk_usage(folder).free
    if free < 1.2 * size + (1 << 30):
        raise SystemExit(f"not enough free disk in {folder}: {free / 2**30:.1f} GiB free, need "
                         f"{(1.2 * size + (1 << 30)) / 2**30:.1f} GiB")
    layout = sp.layout_for_size(size)
    t0 = time.perf_counter()
    paths = sp.write_pair(folder, layout, zarr=args.zarr)
    return paths, {"written": True, "write_s": round(time.perf_counter() - t0, 2),
                   "layout": asdict(layout)}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--budget", default="1GiB", help="--memory-budget of the run (default 1GiB)")
    p.add_argument("--size", default="4GiB", help="total size of the inputs to write (default 4GiB)")
    p.add_argument("--dir", help="where to write the pair (default: a new folder under the system temp dir)")
    p.add_argument("--data", help="score an existing pair written by synthetic_pair.py instead")
    p.add_argument("--zarr", action="store_true", help="write Zarr stores instead of NetCDF")
    p.add_argument("--keep", action="store_true", help="keep the written pair")
    args = p.parse_args(argv)

    budget = sp.parse_size(args.budget)
    base = Path(args.dir) if args.dir else Path(tempfile.gettempdir())
    base.mkdir(parents=True, exist_ok=True)
    folder = Path(tempfile.mkdtemp(prefix="landlift-memory-", dir=base))
    try:
        paths, written = prepare_pair(args, folder)
        inputs = sum(sp.disk_bytes(path) for path in paths.values())
        command = landlift_command() + score_args(paths, folder / "result", budget=args.budget)
        measured = run_measured(command)
    finally:
        if args.keep and not args.data:
            print(f"kept the pair in {folder}", file=sys.stderr)
        else:
            shutil.rmtree(folder, ignore_errors=True)
    ratio = measured["peak_rss_bytes"] / budget
    print(json.dumps({
        "benchmark": "memory_bound",
        "budget_bytes": budget,
        "input_bytes": inputs,
        "inputs_over_budget": round(inputs / budget, 2),
        "format": "zarr" if any(p.suffix == ".zarr" for p in paths.values()) else "netcdf",
        **measured,
        "peak_rss_over_budget": round(ratio, 3),
        "target": f"< {TARGET}",
        "met": ratio < TARGET,
        **written,
        "machine": {"cpus": os.cpu_count(), "python": platform.python_version(),
                    "loadavg_1m_after": round(os.getloadavg()[0], 2)},
    }))
    return 0


if __name__ == "__main__":
    sys.exit(main())
