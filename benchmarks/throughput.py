"""Throughput benchmark: end-to-end scoring time of a large pair against a plain read of its bytes.

The pair is the memory benchmark's (``synthetic_pair.py``, ``--size`` 4 GiB by default, float32,
uncompressed, chunked along space). Two timings of the same files:

``floor_s``
    Every byte of every input file read once with large sequential reads (16 MiB ``readinto``
    into one reused buffer): the floor of any program that looks at all the data. Best of
    ``--repeats``.
``score_s``
    ``landlift score ... --memory-budget BUDGET`` in a child process, end to end: start-up and
    imports, input checks, the tile-by-tile reduction, the bootstrap, the input checksums of the
    provenance, and writing skill.json, maps.nc, anomalies.nc and the figures.
``engine_s``
    Only :func:`app.cube.pipeline.run` (reduction, bootstrap, assessment) in a child process: no
    start-up, checksums or output files.

``throughput_ratio = floor_s / score_s`` is the scoring throughput as a fraction of the floor's
(target >= 0.4); ``engine_ratio`` the same for the engine alone.

Page cache. By default nothing is dropped: the files were just written (or read), the machine
has room for them in its page cache, so both the floor and the scoring read from a warm cache
(``cache: "warm"``) and the floor is a memory-bandwidth figure. ``--cold`` evicts the input
files' pages before every timed pass (``fsync`` + ``posix_fadvise(POSIX_FADV_DONTNEED)`` on these
files only; no root needed) so that both read from disk.

Run::

    .venv/bin/python benchmarks/throughput.py            # writes 4 GiB, warm cache
    .venv/bin/python benchmarks/throughput.py --cold
    .venv/bin/python benchmarks/throughput.py --data DIR # a pair kept by memory_bound.py --keep
    .venv/bin/python benchmarks/throughput.py --size 1GiB --budget 256MiB   # quick check

Prints ONE JSON line.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))
import memory_bound as mb  # noqa: E402

TARGET = 0.4
READ_BLOCK = 16 << 20


def files_of(paths: dict[str, Path]) -> list[Path]:
    out: list[Path] = []
    for path in paths.values():
        out.extend(sorted(f for f in path.rglob("*") if f.is_file()) if path.is_dir() else [path])
    return out


def evict(files: list[Path]) -> None:
    """Drop these files' pages from the page cache (written pages are flushed first)."""
    for f in files:
        fd = os.open(f, os.O_RDONLY)
        try:
            os.fsync(fd)
            os.posix_fadvise(fd, 0, 0, os.POSIX_FADV_DONTNEED)
        finally:
            os.close(fd)


def read_all(files: list[Path]) -> tuple[float, int]:
    """Seconds and bytes to read every byte of ``files`` once, sequentially."""
    buf = bytearray(READ_BLOCK)
    view = memoryview(buf)
    total = 0
    t0 = time.perf_counter()
    for f in files:
        with open(f, "rb", buffering=0) as fh:
            while n := fh.readinto(view):
                total += n
    return time.perf_counter() - t0, total


def engine_child(argv: list[str]) -> int:
    """``--engine-child BUDGET R S O [L]``: time app.cube.pipeline.run alone, print seconds."""
    from app.runs.options import RunOptions
    from app.runs.scoring import run_engine
    from app.sizes import parse_size

    budget, *paths = argv
    t0 = time.perf_counter()
    run_engine(*paths, options=RunOptions(), memory_budget=parse_size(budget))
    print(json.dumps({"engine_s": time.perf_counter() - t0}))
    return 0


def timed_engine(paths: dict[str, Path], budget: str) -> float:
    proc = subprocess.run(
        [sys.executable, __file__, "--engine-child", budget, *map(str, paths.values())],
        capture_output=True, text=True, cwd=mb.ROOT,
    )
    if proc.returncode != 0:
        sys.stderr.write(proc.stderr[-4000:])
        raise SystemExit("engine run failed")
    return float(json.loads(proc.stdout.strip().splitlines()[-1])["engine_s"])


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if argv[:1] == ["--engine-child"]:
        return engine_child(argv[1:])
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--budget", default="1GiB", help="--memory-budget of the scoring run")
    p.add_argument("--size", default="4GiB", help="total size of the inputs to write")
    p.add_argument("--dir", help="where to write the pair (default: the system temp dir)")
    p.add_argument("--data", help="use an existing pair written by synthetic_pair.py")
    p.add_argument("--zarr", action="store_true", help="write Zarr stores instead of NetCDF")
    p.add_argument("--cold", action="store_true", help="evict the inputs from the page cache before each timed pass")
    p.add_argument("--repeats", type=int, default=3, help="floor reads (best is kept)")
    p.add_argument("--score-repeats", type=int, default=1, help="scoring runs (best is kept)")
    p.add_argument("--keep", action="store_true", help="keep the written pair")
    args = p.parse_args(argv)

    base = Path(args.dir) if args.dir else Path(tempfile.gettempdir())
    base.mkdir(parents=True, exist_ok=True)
    folder = Path(tempfile.mkdtemp(prefix="landlift-throughput-", dir=base))
    result: dict[str, Any] = {}
    try:
        paths, written = mb.prepare_pair(args, folder)
        files = files_of(paths)
        if not args.cold:
            read_all(files)  # make sure the cache is warm for everyone, whatever came before
        floors = []
        for _ in range(max(1, args.repeats)):
            if args.cold:
                evict(files)
            floors.append(read_all(files))
        floor_s, nbytes = min(floors)
        scores = []
        for _ in range(max(1, args.score_repeats)):
            if args.cold:
                evict(files)
            command = mb.landlift_command() + mb.score_args(paths, folder / "result", budget=args.budget)
            scores.append(mb.run_measured(command))
            shutil.rmtree(folder / "result", ignore_errors=True)
        best = min(scores, key=lambda m: m["wall_s"])
        if args.cold:
            evict(files)
        engine_s = timed_engine(paths, args.budget)
        score_s = float(best["wall_s"])
        gib = nbytes / 2**30
        result = {
            "benchmark": "throughput",
            "input_bytes": nbytes,
            "format": "zarr" if any(p.suffix == ".zarr" for p in paths.values()) else "netcdf",
            "cache": "cold (inputs evicted before each timed pass)" if args.cold else "warm (nothing dropped)",
            "budget": args.budget,
            "floor_s": round(floor_s, 3),
            "floor_gib_s": round(gib / floor_s, 2),
            "score_s": round(score_s, 2),
            "score_gib_s": round(gib / score_s, 3),
            "throughput_ratio": round(floor_s / score_s, 4),
            "engine_s": round(engine_s, 2),
            "engine_ratio": round(floor_s / engine_s, 4),
            "score_peak_rss_bytes": best["peak_rss_bytes"],
            "target": f">= {TARGET}",
            "met": floor_s / score_s >= TARGET,
            **written,
            "machine": {"cpus": os.cpu_count(), "python": platform.python_version(),
                        "loadavg_1m_after": round(os.getloadavg()[0], 2)},
        }
    finally:
        if args.keep and not args.data:
            print(f"kept the pair in {folder}", file=sys.stderr)
        else:
            shutil.rmtree(folder, ignore_errors=True)
    print(json.dumps(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
