"""API reads benchmark: a bounded load of result GETs on one real server process, over loopback.

What it does, in order (every step bounded by the hard ``--timeout``):

1. a data folder with a finished experiment: ``landlift demo --data-dir DIR`` in a child process
   (or ``--data-dir`` naming a folder that already holds one, which is reused and never deleted);
2. a read token: ``LANDLIFT_DATA_DIR=DIR landlift token create --scope read --name bench``;
3. ONE server process: ``landlift serve --port P --no-worker`` on a free 127.0.0.1 port, its
   logs to a file; the benchmark waits for ``/healthz``;
4. three phases, each a bounded number of GETs at ``--concurrency`` keep-alive connections from a
   SECOND process (the load generator; its CPU is never counted as the server's), each after a
   short warm-up on the same connections:

   ``json``      ``GET /v1/experiments/{id}/skill`` (the finished skill curve JSON) -> 200
   ``json_304``  the same request with ``If-None-Match: <its ETag>``                  -> 304
   ``png``       ``GET /v1/experiments/{id}/skill?format=png`` after its first render -> 200

   Every request carries ``Authorization: Bearer <token>``. A response with another status, or a
   200 whose body length differs from the warm-up's, or a transport error, counts as an error.
5. the server is stopped (SIGTERM, then SIGKILL), always, also on error or timeout.

Figures per phase: requests/s (requests / wall time of the phase, measured by the generator),
latency p50/p90/p99/max (ms, per request, from sending to the last body byte, so it includes
the generator's own queueing), error count, the server's CPU seconds during the phase (psutil on
its pid: user + system) and CPU ms per request, and the generator's own CPU share (near 1.0 means
the generator, not the server, may be the limit). Besides: the server's peak RSS (``VmHWM`` from
/proc, which is the peak over the process's life) and the 1-minute load average before, during
(max) and after (the machine is shared: a load above the core count means other work competed).

Targets (issue 4, "API reads"), judged on the ``json`` phase: >= 1000 requests/s, p99 < 50 ms,
0 errors. ``json_304`` and ``png`` carry the same checks as information (``meets_targets``).

Load generators (all in a process of their own; the JSON line names the one used):

``python-raw`` (the default)
    asyncio streams from the standard library: ``--concurrency`` connections opened up front and
    kept alive, one request in flight on each, the request bytes built once, each response read
    as status line + headers + exactly ``Content-Length`` body bytes. It needs nothing beyond the
    standard library and costs about 35 us of CPU per request (28,000 requests/s against a
    trivial asyncio server on this machine), so it is not the limit at the target rate.
``python-httpx``
    one ``httpx.AsyncClient`` (HTTP/1.1, ``limits`` = ``--concurrency`` connections) and
    ``--concurrency`` tasks. Kept for comparison: at 64 connections it costs about 2 ms of CPU per
    request (about 420 requests/s against the same trivial server), so it cannot show whether a
    server reaches 1,000 requests/s.
``wrk`` (``--generator wrk``; Debian package ``wrk``, not a project dependency)
    a cross-check in C: 2 threads, the same connections and headers, a Lua script that checks
    every status and body length. wrk runs for a duration, not a request count: each measured
    run lasts ``--wrk-seconds`` (after a 1 s warm-up run) and the line gives the requests made.

``server_cpu_ms_per_request`` is the steadiest figure on a shared machine: the load average
changes the requests/s and the tail latency from run to run much more than the CPU per request.
``server_cpu_ceiling_rps`` = 1000 / it is the rate one free core could sustain.

Run (the demo takes 10-20 s; the 45,000 GETs about 4 minutes at the ~200 requests/s of the
current server on 2 shared cores, under a minute at 2,000 requests/s)::

    .venv/bin/python benchmarks/api_reads.py
    .venv/bin/python benchmarks/api_reads.py --data-dir /tmp/ll-demo   # reuse / keep a demo
    .venv/bin/python benchmarks/api_reads.py --requests 2000 --png-requests 500   # quick check

Prints ONE JSON line on stdout (progress goes to stderr).
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import json
import os
import platform
import resource
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
HOST = "127.0.0.1"
TARGET_RPS = 1000.0
TARGET_P99_MS = 50.0
TARGET_ERRORS = 0
DEMO_NAME = "sample-continent"
CHILD_FLAG = "--load-generator-child"
GENERATOR_DETAIL = {
    "python-raw": "asyncio streams, HTTP/1.1 keep-alive, {n} connections, one request in flight "
    "each, separate process",
    "python-httpx": "httpx.AsyncClient, HTTP/1.1 keep-alive, limits={n} connections, separate "
    "process",
    "wrk": "wrk, 2 threads, {n} connections, a timed run, statuses checked by a Lua script",
}
TOKEN_ENV = "LANDLIFT_BENCH_TOKEN"


class BenchTimeout(Exception):
    """The hard ``--timeout`` of the whole benchmark ran out (or SIGTERM came)."""


def log(message: str) -> None:
    print(f"[api_reads] {message}", file=sys.stderr, flush=True)


def landlift_command() -> list[str]:
    exe = Path(sys.executable).with_name("landlift")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "app.cli"]


def child_env(data_dir: Path) -> dict[str, str]:
    """The environment of the landlift children: no stray ``LANDLIFT_*`` but the data folder."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("LANDLIFT_")}
    env["LANDLIFT_DATA_DIR"] = str(data_dir)
    env.setdefault("PYTHONUNBUFFERED", "1")
    return env


class Deadline:
    def __init__(self, seconds: float) -> None:
        self.end = time.monotonic() + seconds

    def left(self, *, floor: float = 1.0) -> float:
        remaining = self.end - time.monotonic()
        if remaining <= 0:
            raise BenchTimeout("the benchmark's hard timeout ran out")
        return max(floor, remaining)


def percentile(sorted_values: list[float], q: float) -> float:
    """Linear-interpolation percentile (numpy's default method) of an ascending list."""
    if not sorted_values:
        return float("nan")
    pos = (len(sorted_values) - 1) * q / 100.0
    lo = int(pos)
    hi = min(lo + 1, len(sorted_values) - 1)
    return sorted_values[lo] + (sorted_values[hi] - sorted_values[lo]) * (pos - lo)


# ------------------------------------------------------------------------- load generators


async def _python_load(cfg: dict[str, Any]) -> dict[str, Any]:
    import httpx

    concurrency = int(cfg["concurrency"])
    headers = {"Authorization": f"Bearer {os.environ[TOKEN_ENV]}", **cfg.get("headers", {})}
    expect_status = int(cfg["expect_status"])
    expect_length = cfg.get("expect_length")
    limits = httpx.Limits(max_connections=concurrency, max_keepalive_connections=concurrency)
    timeout = httpx.Timeout(float(cfg["request_timeout"]))
    statuses: dict[str, int] = {}
    latencies: list[float] = []
    errors = 0
    error_examples: list[str] = []

    async with httpx.AsyncClient(
        base_url=cfg["base_url"], limits=limits, timeout=timeout, headers=headers, http2=False
    ) as client:

        async def run(count: int, record: bool) -> None:
            nonlocal errors
            remaining = count

            async def one_task() -> None:
                nonlocal remaining, errors
                while remaining > 0:
                    remaining -= 1
                    t0 = time.perf_counter()
                    try:
                        response = await client.get(cfg["path"])
                        body = response.content
                        status = response.status_code
                    except httpx.HTTPError as exc:
                        status, body = -1, b""
                        if record and len(error_examples) < 3:
                            error_examples.append(f"{type(exc).__name__}: {exc}")
                    elapsed = time.perf_counter() - t0
                    if not record:
                        continue
                    latencies.append(elapsed)
                    statuses[str(status)] = statuses.get(str(status), 0) + 1
                    bad_length = (
                        status == expect_status
                        and expect_length is not None
                        and len(body) != expect_length
                    )
                    if status != expect_status or bad_length:
                        errors += 1
                        if len(error_examples) < 3 and status != -1:
                            error_examples.append(f"status {status}, {len(body)} bytes")

            await asyncio.gather(*(one_task() for _ in range(concurrency)))

        await run(int(cfg["warmup"]), record=False)  # opens every connection
        cpu0 = resource.getrusage(resource.RUSAGE_SELF)
        t0 = time.perf_counter()
        await run(int(cfg["requests"]), record=True)
        wall = time.perf_counter() - t0
        cpu1 = resource.getrusage(resource.RUSAGE_SELF)
    gen_cpu = (cpu1.ru_utime - cpu0.ru_utime) + (cpu1.ru_stime - cpu0.ru_stime)
    return _summary(latencies, wall, statuses, errors, error_examples, gen_cpu)


class _ProtocolError(Exception):
    pass


async def _raw_load(cfg: dict[str, Any]) -> dict[str, Any]:
    """HTTP/1.1 keep-alive GETs over plain asyncio streams: one request in flight per connection.

    The request bytes are built once; a response is read as its status line and headers (up to
    the blank line), then exactly ``Content-Length`` body bytes (the server sends no chunked
    bodies for these reads). A connection that fails is reopened and the request counted as an
    error.
    """
    concurrency = int(cfg["concurrency"])
    host, port = cfg["host"], int(cfg["port"])
    lines = [f"GET {cfg['path']} HTTP/1.1", f"Host: {host}:{port}",
             f"Authorization: Bearer {os.environ[TOKEN_ENV]}", "Accept: */*",
             "User-Agent: landlift-api-reads"]
    lines += [f"{k}: {v}" for k, v in cfg.get("headers", {}).items()]
    request = ("\r\n".join(lines) + "\r\n\r\n").encode("latin-1")
    expect_status = int(cfg["expect_status"])
    expect_length = cfg.get("expect_length")
    timeout = float(cfg["request_timeout"])
    statuses: dict[str, int] = {}
    latencies: list[float] = []
    errors = 0
    error_examples: list[str] = []
    pool: list[tuple[asyncio.StreamReader, asyncio.StreamWriter]] = []

    async def connect() -> tuple[asyncio.StreamReader, asyncio.StreamWriter]:
        return await asyncio.wait_for(asyncio.open_connection(host, port), timeout)

    async def one(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> tuple[int, int]:
        writer.write(request)
        head = await reader.readuntil(b"\r\n\r\n")
        status_line, _, rest = head.partition(b"\r\n")
        parts = status_line.split(b" ", 2)
        if len(parts) < 2 or not parts[0].startswith(b"HTTP/1."):
            raise _ProtocolError(f"bad status line {status_line[:80]!r}")
        status = int(parts[1])
        length = 0
        close = False
        for line in rest.split(b"\r\n"):
            name, _, value = line.partition(b":")
            name = name.strip().lower()
            if name == b"content-length":
                length = int(value.strip())
            elif name == b"transfer-encoding":
                raise _ProtocolError("chunked bodies are not supported by this generator")
            elif name == b"connection" and value.strip().lower() == b"close":
                close = True
        if length:
            await reader.readexactly(length)
        if close:
            raise _ProtocolError("the server closed the keep-alive connection")
        return status, length

    async def run(count: int, record: bool) -> None:
        nonlocal errors
        remaining = count

        async def one_task(slot: int) -> None:
            nonlocal remaining, errors
            while remaining > 0:
                remaining -= 1
                t0 = time.perf_counter()
                try:
                    reader, writer = pool[slot]
                    status, length = await asyncio.wait_for(one(reader, writer), timeout)
                except (OSError, TimeoutError, asyncio.IncompleteReadError,
                        asyncio.LimitOverrunError, _ProtocolError, ValueError) as exc:
                    status, length = -1, 0
                    if record and len(error_examples) < 3:
                        error_examples.append(f"{type(exc).__name__}: {exc}")
                    with contextlib.suppress(Exception):
                        pool[slot][1].close()
                    with contextlib.suppress(Exception):
                        pool[slot] = await connect()
                elapsed = time.perf_counter() - t0
                if not record:
                    continue
                latencies.append(elapsed)
                statuses[str(status)] = statuses.get(str(status), 0) + 1
                bad_length = (status == expect_status and expect_length is not None
                              and length != expect_length)
                if status != expect_status or bad_length:
                    errors += 1
                    if len(error_examples) < 3 and status != -1:
                        error_examples.append(f"status {status}, {length} bytes")

        await asyncio.gather(*(one_task(i) for i in range(concurrency)))

    pool.extend(await asyncio.gather(*(connect() for _ in range(concurrency))))
    try:
        await run(int(cfg["warmup"]), record=False)
        cpu0 = resource.getrusage(resource.RUSAGE_SELF)
        t0 = time.perf_counter()
        await run(int(cfg["requests"]), record=True)
        wall = time.perf_counter() - t0
        cpu1 = resource.getrusage(resource.RUSAGE_SELF)
    finally:
        for _, writer in pool:
            writer.close()
    return _summary(latencies, wall, statuses, errors, error_examples,
                    (cpu1.ru_utime - cpu0.ru_utime) + (cpu1.ru_stime - cpu0.ru_stime))


def _summary(latencies: list[float], wall: float, statuses: dict[str, int], errors: int,
             error_examples: list[str], gen_cpu: float) -> dict[str, Any]:
    latencies.sort()
    return {
        "requests": len(latencies),
        "wall_s": wall,
        "statuses": statuses,
        "errors": errors,
        "error_examples": error_examples,
        "latency_ms": {
            "p50": percentile(latencies, 50) * 1e3,
            "p90": percentile(latencies, 90) * 1e3,
            "p99": percentile(latencies, 99) * 1e3,
            "max": latencies[-1] * 1e3 if latencies else float("nan"),
            "mean": sum(latencies) / len(latencies) * 1e3 if latencies else float("nan"),
        },
        "generator_cpu_s": gen_cpu,
    }


def load_generator_child(argv: list[str]) -> int:
    """Entry point of the generator process: config JSON in ``argv[0]``, result JSON on stdout."""
    cfg = json.loads(argv[0])
    load = _raw_load if cfg.get("client") == "raw" else _python_load
    result = asyncio.run(load(cfg))
    print(json.dumps(result))
    return 0


WRK_SCRIPT = r"""
local expect = tonumber(os.getenv("WRK_EXPECT_STATUS"))
local expect_len = tonumber(os.getenv("WRK_EXPECT_LENGTH") or "-1")
wrk.headers["Authorization"] = "Bearer " .. os.getenv("LANDLIFT_BENCH_TOKEN")
local inm = os.getenv("WRK_IF_NONE_MATCH")
if inm and #inm > 0 then wrk.headers["If-None-Match"] = inm end
local threads = {}
function setup(thread) table.insert(threads, thread) end
function init(args) bad = 0 end
function response(status, headers, body)
  if status ~= expect or (expect_len >= 0 and #body ~= expect_len) then bad = bad + 1 end
end
function done(summary, latency, requests)
  local bad_total = 0
  for _, t in ipairs(threads) do bad_total = bad_total + t:get("bad") end
  io.write(string.format(
    '{"requests": %d, "wall_s": %f, "errors": %d, "socket_errors": %d, '
    .. '"p50": %f, "p90": %f, "p99": %f, "max": %f, "mean": %f}\n',
    summary.requests, summary.duration / 1e6, bad_total,
    summary.errors.connect + summary.errors.read + summary.errors.write
      + summary.errors.timeout,
    latency:percentile(50) / 1e3, latency:percentile(90) / 1e3, latency:percentile(99) / 1e3,
    latency.max / 1e3, latency.mean / 1e3))
end
"""


def wrk_load(cfg: dict[str, Any], *, token: str, workdir: Path, timeout: float,
             seconds: int) -> dict[str, Any]:
    """One ``wrk`` run (2 threads) of ``seconds`` on the phase's request.

    ``wrk`` runs for a duration, not a request count (its main thread sleeps ``-d`` whatever
    the threads do), so the JSON line gives the requests it made. Latency percentiles come from
    wrk's own histogram (per request).
    """
    script = workdir / "phase.lua"
    script.write_text(WRK_SCRIPT)
    env = dict(os.environ)
    env[TOKEN_ENV] = token
    env["WRK_EXPECT_STATUS"] = str(cfg["expect_status"])
    env["WRK_EXPECT_LENGTH"] = str(cfg.get("expect_length", -1))
    env["WRK_IF_NONE_MATCH"] = cfg.get("headers", {}).get("If-None-Match", "")
    url = cfg["base_url"] + cfg["path"]
    if seconds + 30 > timeout:
        raise BenchTimeout("no time left for the wrk run")
    cmd = ["wrk", "-t2", f"-c{cfg['concurrency']}", f"-d{seconds}s",
           "--timeout", f"{int(cfg['request_timeout'])}s", "-s", str(script), url]
    proc = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=seconds + 30)
    if proc.returncode != 0:
        raise RuntimeError(f"wrk failed ({proc.returncode}): {proc.stderr.strip()[-400:]}")
    raw = json.loads([ln for ln in proc.stdout.splitlines() if ln.startswith("{")][-1])
    return {
        "requests": raw["requests"],
        "wall_s": raw["wall_s"],
        "statuses": {},
        "errors": raw["errors"] + raw["socket_errors"],
        "error_examples": [],
        "latency_ms": {k: raw[k] for k in ("p50", "p90", "p99", "max", "mean")},
        "generator_cpu_s": None,
    }


# ------------------------------------------------------------------------- server handling


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((HOST, 0))
        return int(s.getsockname()[1])


def wait_healthy(base_url: str, proc: subprocess.Popen[bytes], deadline: Deadline,
                 *, limit_s: float = 60.0) -> float:
    import httpx

    started = time.monotonic()
    last = ""
    while time.monotonic() - started < min(limit_s, deadline.left()):
        if proc.poll() is not None:
            raise RuntimeError(f"the server exited with {proc.returncode} before /healthz answered")
        try:
            r = httpx.get(base_url + "/healthz", timeout=2.0)
            if r.status_code == 200 and r.json().get("status") == "ok":
                return time.monotonic() - started
            last = f"status {r.status_code}: {r.text[:200]}"
        except httpx.HTTPError as exc:
            last = f"{type(exc).__name__}"
        time.sleep(0.1)
    raise RuntimeError(f"/healthz did not answer ok within {limit_s:.0f} s ({last})")


def stop_server(proc: subprocess.Popen[bytes] | None) -> str:
    """SIGTERM the server's process group, SIGKILL after 15 s. Returns how it ended."""
    if proc is None or proc.poll() is not None:
        return "not running"
    try:
        os.killpg(proc.pid, signal.SIGTERM)
    except ProcessLookupError:
        return "gone"
    try:
        proc.wait(timeout=15)
        return f"stopped (exit {proc.returncode})"
    except subprocess.TimeoutExpired:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
        return "killed"


def peak_rss_mb(pid: int) -> float | None:
    """``VmHWM`` of ``pid`` (peak resident set over its life), in MiB."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    except OSError:
        return None
    return None


class Sampler:
    """Samples the server's RSS and the 1-minute load average every ``every`` seconds."""

    def __init__(self, pid: int, every: float = 0.25) -> None:
        import psutil

        self.proc = psutil.Process(pid)
        self.every = every
        self.max_rss = 0
        self.max_load = os.getloadavg()[0]
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        while not self._stop.is_set():
            with contextlib.suppress(Exception):
                self.max_rss = max(self.max_rss, self.proc.memory_info().rss)
            self.max_load = max(self.max_load, os.getloadavg()[0])
            self._stop.wait(self.every)

    def __enter__(self) -> Sampler:
        self._thread.start()
        return self

    def __exit__(self, *_exc: object) -> None:
        self._stop.set()
        self._thread.join(timeout=5)


def server_cpu_s(pid: int) -> float:
    import psutil

    t = psutil.Process(pid).cpu_times()
    return float(t.user + t.system)


# ------------------------------------------------------------------------- data set-up


def has_finished_demo(data_dir: Path) -> bool:
    return (data_dir / "landlift.db").is_file() and (data_dir / "artifacts").is_dir()


def make_demo(data_dir: Path, deadline: Deadline, *, resamples: int) -> float:
    t0 = time.perf_counter()
    cmd = [*landlift_command(), "demo", "--data-dir", str(data_dir), "--resamples", str(resamples)]
    proc = subprocess.run(cmd, cwd=ROOT, env=child_env(data_dir), capture_output=True, text=True,
                          timeout=deadline.left())
    if proc.returncode != 0:
        raise RuntimeError(f"landlift demo failed ({proc.returncode}): {proc.stderr[-800:]}")
    return time.perf_counter() - t0


def make_token(data_dir: Path, deadline: Deadline) -> str:
    cmd = [*landlift_command(), "token", "create", "--scope", "read", "--name", "bench"]
    proc = subprocess.run(cmd, cwd=ROOT, env=child_env(data_dir), capture_output=True, text=True,
                          timeout=deadline.left())
    if proc.returncode != 0:
        raise RuntimeError(f"landlift token create failed: {proc.stderr[-400:]}")
    token = proc.stdout.strip().splitlines()[-1].strip()
    if not token:
        raise RuntimeError("landlift token create printed no token")
    return token


def find_experiment(base_url: str, token: str) -> str:
    import httpx

    r = httpx.get(
        base_url + "/v1/experiments",
        params={"name": DEMO_NAME, "status": "done", "limit": 1},
        headers={"Authorization": f"Bearer {token}"},
        timeout=10.0,
    )
    r.raise_for_status()
    items = r.json().get("items", [])
    if not items:
        raise RuntimeError(f"no finished experiment named {DEMO_NAME!r} in the data folder")
    return str(items[0]["id"])


# ------------------------------------------------------------------------- phases


def run_phase(
    name: str,
    cfg: dict[str, Any],
    *,
    generator: str,
    token: str,
    pid: int,
    workdir: Path,
    deadline: Deadline,
) -> dict[str, Any]:
    log(f"phase {name}: {cfg['requests']} GETs of {cfg['path']} at {cfg['concurrency']} "
        f"connections ({generator})")
    load_before = os.getloadavg()[0]
    if generator == "wrk":  # a 1 s warm-up run, outside the server CPU reading
        wrk_load(cfg, token=token, workdir=workdir, timeout=deadline.left(), seconds=1)
    with Sampler(pid) as sampler:
        cpu0 = server_cpu_s(pid)
        if generator == "wrk":
            raw = wrk_load(cfg, token=token, workdir=workdir, timeout=deadline.left(),
                           seconds=int(cfg["wrk_seconds"]))
        else:
            env = dict(os.environ)
            env[TOKEN_ENV] = token
            proc = subprocess.run(
                [sys.executable, str(Path(__file__).resolve()), CHILD_FLAG, json.dumps(cfg)],
                env=env, capture_output=True, text=True, timeout=deadline.left(),
            )
            if proc.returncode != 0:
                raise RuntimeError(f"load generator failed: {proc.stderr[-800:]}")
            raw = json.loads(proc.stdout.strip().splitlines()[-1])
        cpu1 = server_cpu_s(pid)
    wall = float(raw["wall_s"])
    # the server's CPU is read around the whole generator process (with python-*: warm-up +
    # measured run), so it is divided by all the requests it served in that time
    served = int(raw["requests"]) + (int(cfg["warmup"]) if generator != "wrk" else 0)
    server_cpu = cpu1 - cpu0
    gen_cpu = raw.get("generator_cpu_s")
    result = {
        "requests": int(raw["requests"]),
        "requests_per_s": round(raw["requests"] / wall, 1) if wall > 0 else None,
        "latency_ms": {k: round(float(v), 2) for k, v in raw["latency_ms"].items()},
        "errors": int(raw["errors"]),
        "statuses": raw.get("statuses", {}),
        "wall_s": round(wall, 3),
        "body_bytes": cfg.get("expect_length"),
        "server_cpu_ms_per_request": round(server_cpu / served * 1e3, 3) if served else None,
        "server_cpu_s": round(server_cpu, 2),
        "server_cpu_ceiling_rps": round(served / server_cpu, 0) if server_cpu > 0 else None,
        "generator_cpu_share": round(gen_cpu / wall, 2) if gen_cpu is not None and wall else None,
        "server_rss_max_sampled_mb": round(sampler.max_rss / 2**20, 1),
        "load_avg_1m": {
            "before": round(load_before, 2),
            "max_during": round(sampler.max_load, 2),
            "after": round(os.getloadavg()[0], 2),
        },
    }
    if raw.get("error_examples"):
        result["error_examples"] = raw["error_examples"]
    result["meets_targets"] = meets(result)
    log(f"phase {name}: {result['requests_per_s']} req/s, p99 {result['latency_ms']['p99']} ms, "
        f"{result['errors']} errors, server {result['server_cpu_ms_per_request']} CPU-ms/request")
    return result


def checks(phase: dict[str, Any]) -> dict[str, bool]:
    return {
        "requests_per_s": (phase["requests_per_s"] or 0.0) >= TARGET_RPS,
        "p99_ms": phase["latency_ms"]["p99"] < TARGET_P99_MS,
        "errors": phase["errors"] <= TARGET_ERRORS,
    }


def meets(phase: dict[str, Any]) -> bool:
    return all(checks(phase).values())


def warm_request(base_url: str, path: str, token: str, **headers: str) -> tuple[Any, float]:
    import httpx

    t0 = time.perf_counter()
    r = httpx.get(base_url + path, headers={"Authorization": f"Bearer {token}", **headers},
                  timeout=120.0)
    return r, time.perf_counter() - t0


def choose_generator(asked: str) -> str:
    if asked == "wrk" and not shutil.which("wrk"):
        raise SystemExit("api_reads: --generator wrk, but wrk is not on PATH (Debian package wrk)")
    return asked


@contextlib.contextmanager
def hard_timeout(seconds: float) -> Iterator[None]:
    def _alarm(_signum: int, _frame: object) -> None:
        raise BenchTimeout(f"the benchmark's hard timeout of {seconds:.0f} s ran out")

    def _term(signum: int, _frame: object) -> None:
        raise BenchTimeout(f"stopped by signal {signum}")

    previous = signal.signal(signal.SIGALRM, _alarm)
    previous_term = signal.signal(signal.SIGTERM, _term)  # so that the server is stopped too
    signal.alarm(max(1, int(seconds)))
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
        signal.signal(signal.SIGTERM, previous_term)


def run(args: argparse.Namespace) -> dict[str, Any]:
    deadline = Deadline(args.timeout)
    generator = choose_generator(args.generator)
    workdir = Path(tempfile.mkdtemp(prefix="landlift-api-reads-"))
    kept = args.data_dir is not None
    data_dir = Path(args.data_dir).resolve() if kept else workdir / "data"
    server: subprocess.Popen[bytes] | None = None
    server_log = workdir / "server.log"
    out: dict[str, Any] = {"benchmark": "api_reads"}
    try:
        with hard_timeout(args.timeout):
            demo_s = None
            if has_finished_demo(data_dir):
                log(f"reusing the data folder {data_dir}")
            else:
                log(f"landlift demo --data-dir {data_dir} (resamples {args.resamples}) ...")
                demo_s = make_demo(data_dir, deadline, resamples=args.resamples)
            load_at_start = os.getloadavg()[0]
            token = make_token(data_dir, deadline)
            port = args.port or free_port()
            base_url = f"http://{HOST}:{port}"
            cmd = [*landlift_command(), "serve", "--host", HOST, "--port", str(port),
                   "--no-worker", "--data-dir", str(data_dir)]
            log(f"starting {' '.join(cmd[-7:])}")
            with server_log.open("wb") as log_file:
                server = subprocess.Popen(
                    cmd, cwd=ROOT, env=child_env(data_dir), stdout=log_file,
                    stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL, start_new_session=True,
                )
            startup_s = wait_healthy(base_url, server, deadline)
            experiment = find_experiment(base_url, token)
            skill = f"/v1/experiments/{experiment}/skill"

            first_json, first_json_s = warm_request(base_url, skill, token)
            if first_json.status_code != 200 or "windows" not in first_json.json():
                raise RuntimeError(f"skill JSON: status {first_json.status_code}, "
                                   f"{first_json.text[:300]}")
            etag = first_json.headers.get("etag")
            if not etag:
                raise RuntimeError("the skill JSON response carries no ETag")
            check_304, _ = warm_request(base_url, skill, token, **{"If-None-Match": etag})
            if check_304.status_code != 304:
                raise RuntimeError(f"If-None-Match got {check_304.status_code}, not 304")
            first_png, first_png_s = warm_request(base_url, skill + "?format=png", token)
            if first_png.status_code != 200 or not first_png.content.startswith(b"\x89PNG"):
                raise RuntimeError(f"skill PNG: status {first_png.status_code}")

            common = {
                "client": "httpx" if generator == "python-httpx" else "raw",
                "host": HOST,
                "port": port,
                "base_url": base_url,
                "concurrency": args.concurrency,
                "warmup": args.warmup,
                "request_timeout": args.request_timeout,
                "wrk_seconds": args.wrk_seconds,
            }
            phases_cfg = {
                "json": {**common, "path": skill, "requests": args.requests,
                         "expect_status": 200, "expect_length": len(first_json.content)},
                "json_304": {**common, "path": skill, "requests": args.requests,
                             "expect_status": 304, "expect_length": 0,
                             "headers": {"If-None-Match": etag}},
                "png": {**common, "path": skill + "?format=png", "requests": args.png_requests,
                        "expect_status": 200, "expect_length": len(first_png.content)},
            }
            phases: dict[str, Any] = {}
            for name, cfg in phases_cfg.items():
                if int(cfg["requests"]) <= 0:
                    continue
                phases[name] = run_phase(name, cfg, generator=generator, token=token,
                                         pid=server.pid, workdir=workdir, deadline=deadline)
            peak = peak_rss_mb(server.pid)
            main = phases["json"]
            out.update({
                "generator": generator,
                "generator_detail": GENERATOR_DETAIL[generator].format(n=args.concurrency),
                "requests": main["requests"],
                "concurrency": args.concurrency,
                "requests_per_s": main["requests_per_s"],
                "p50_ms": main["latency_ms"]["p50"],
                "p90_ms": main["latency_ms"]["p90"],
                "p99_ms": main["latency_ms"]["p99"],
                "errors": main["errors"],
                "not_modified_requests_per_s": phases.get("json_304", {}).get("requests_per_s"),
                "not_modified_p99_ms": phases.get("json_304", {}).get("latency_ms", {}).get("p99"),
                "png_requests_per_s": phases.get("png", {}).get("requests_per_s"),
                "png_p99_ms": phases.get("png", {}).get("latency_ms", {}).get("p99"),
                "server_cpu_ms_per_request": main["server_cpu_ms_per_request"],
                "server_peak_rss_mb": round(peak, 1) if peak is not None else None,
                "targets": {"requests_per_s": f">= {TARGET_RPS:g}",
                            "p99_ms": f"< {TARGET_P99_MS:g}", "errors": f"== {TARGET_ERRORS}"},
                "targets_met": checks(main),
                "all_targets_met": meets(main),
                "phases": phases,
                "first_render_ms": {"json": round(first_json_s * 1e3, 1),
                                    "png": round(first_png_s * 1e3, 1)},
                "server": {
                    "command": "landlift serve --no-worker (one uvicorn process)",
                    "startup_s": round(startup_s, 2),
                    "database": "sqlite",
                    "log_lines": None,
                },
                "demo_s": round(demo_s, 1) if demo_s is not None else None,
                "cpu_count": os.cpu_count(),
                "load_avg_1m": {
                    "before_server": round(load_at_start, 2),
                    "max_during": max(p["load_avg_1m"]["max_during"] for p in phases.values()),
                },
                "load_avg_1m_5m_15m_at_end": [round(x, 2) for x in os.getloadavg()],
                "python": platform.python_version(),
            })
    finally:
        how = stop_server(server)
        if server is not None:
            out.setdefault("server", {})["stopped"] = how
            with contextlib.suppress(OSError):
                out["server"]["log_lines"] = sum(1 for _ in server_log.open("rb"))
            if args.keep_log:
                kept_log = Path(args.keep_log)
                with contextlib.suppress(OSError):
                    shutil.copyfile(server_log, kept_log)
        shutil.rmtree(workdir, ignore_errors=True)
    return out


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--data-dir", help="reuse (or create and keep) a demo data folder here")
    p.add_argument("--requests", type=int, default=20_000,
                   help="GETs in the json and json_304 phases (default 20000)")
    p.add_argument("--png-requests", type=int, default=5_000,
                   help="GETs in the png phase (default 5000; 0 skips it)")
    p.add_argument("--concurrency", type=int, default=64, help="connections (default 64)")
    p.add_argument("--warmup", type=int, default=500,
                   help="unrecorded GETs before each phase (default 500)")
    p.add_argument("--generator", choices=("python-raw", "python-httpx", "wrk"),
                   default="python-raw", help="load generator (default python-raw)")
    p.add_argument("--wrk-seconds", type=int, default=10,
                   help="with --generator wrk: seconds of each measured run (default 10)")
    p.add_argument("--port", type=int, default=0, help="server port (default: a free one)")
    p.add_argument("--resamples", type=int, default=1000, help="bootstrap resamples of the demo")
    p.add_argument("--request-timeout", type=float, default=30.0, help="per request, seconds")
    p.add_argument("--timeout", type=float, default=900.0,
                   help="hard limit on the whole benchmark, seconds (default 900)")
    p.add_argument("--keep-log", help="copy the server's log to this file at the end")
    args = p.parse_args(argv)
    if args.requests < 1 or args.concurrency < 1 or args.png_requests < 0 or args.warmup < 0:
        p.error("--requests and --concurrency must be >= 1, --png-requests and --warmup >= 0")
    return args


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if argv and argv[0] == CHILD_FLAG:
        return load_generator_child(argv[1:])
    args = parse_args(argv)
    try:
        out = run(args)
    except (BenchTimeout, RuntimeError, subprocess.TimeoutExpired) as exc:
        print(json.dumps({"benchmark": "api_reads", "error": f"{type(exc).__name__}: {exc}"}))
        return 1
    print(json.dumps(out))
    return 0 if out.get("all_targets_met") else 2


if __name__ == "__main__":
    raise SystemExit(main())
