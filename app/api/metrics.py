"""Prometheus metrics: requests by route and status, jobs by state, job durations.

Each app gets its own registry (several apps can live in one test process). Request metrics are
counted by a middleware using the route *template* (``/v1/jobs/{job_id}``), never the raw path,
so the label set stays small. Job figures are read from the database at scrape time, so they are
true for every worker sharing the database, not only the in-process one.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable, Sequence
from typing import Any

from fastapi import Request
from prometheus_client import CollectorRegistry, Counter, Histogram
from prometheus_client.core import GaugeMetricFamily, HistogramMetricFamily
from prometheus_client.registry import Collector

JOB_STATES = ("queued", "running", "done", "failed")
DURATION_BUCKETS = (0.5, 1, 2, 5, 10, 30, 60, 120, 300, 600, 1800, 3600, float("inf"))


class JobCollector(Collector):
    """Reads job counts and durations through ``stats()`` at each scrape."""

    def __init__(self, stats: Callable[[], tuple[dict[str, int], Sequence[float]]]) -> None:
        self._stats = stats

    def collect(self) -> Iterable[Any]:
        try:
            counts, durations = self._stats()
        except Exception:  # the database is down: /healthz says so, metrics stay scrapable
            return
        gauge = GaugeMetricFamily("landlift_jobs", "Jobs by state", labels=["state"])
        for state in sorted(set(JOB_STATES) | set(counts)):
            gauge.add_metric([state], float(counts.get(state, 0)))
        yield gauge
        buckets = []
        for bound in DURATION_BUCKETS:
            buckets.append(
                ("+Inf" if bound == float("inf") else repr(float(bound)),
                 float(sum(1 for d in durations if d <= bound)))
            )
        hist = HistogramMetricFamily(
            "landlift_job_duration_seconds",
            "Run time of finished jobs (started to finished), by the database",
        )
        hist.add_metric([], buckets, sum_value=float(sum(durations)))
        yield hist


class Metrics:
    def __init__(self) -> None:
        self.registry = CollectorRegistry()
        self.requests = Counter(
            "landlift_http_requests",
            "HTTP requests by route template, method and status",
            ["route", "method", "status"],
            registry=self.registry,
        )
        self.latency = Histogram(
            "landlift_http_request_seconds",
            "HTTP request latency by route template",
            ["route", "method"],
            registry=self.registry,
        )

    def add_job_collector(
        self, stats: Callable[[], tuple[dict[str, int], Sequence[float]]]
    ) -> None:
        self.registry.register(JobCollector(stats))


def route_template(request: Request) -> str:
    route = request.scope.get("route")
    path = getattr(route, "path", None)
    return path if isinstance(path, str) else "unmatched"


class MeasureMiddleware:
    """Counts requests by route and status, times them, and writes the request log line (plain
    ASGI: cheaper per request than Starlette's BaseHTTPMiddleware)."""

    def __init__(self, app: Any, metrics: Metrics, log_request: Callable[..., None]) -> None:
        self.app = app
        self.metrics = metrics
        self.log_request = log_request

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = time.perf_counter()
        status = 500

        async def _send(message: Any) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = message["status"]
            await send(message)

        try:
            await self.app(scope, receive, _send)
        finally:
            elapsed = time.perf_counter() - started
            route = getattr(scope.get("route"), "path", None)
            route = route if isinstance(route, str) else "unmatched"
            method = scope["method"]
            self.metrics.requests.labels(route, method, str(status)).inc()
            self.metrics.latency.labels(route, method).observe(elapsed)
            self.log_request(Request(scope), status, elapsed, route)
