"""Run independent tasks here (a thread pool) or on a dask.distributed cluster.

The engine splits a run into tile tasks that need nothing from each other; this module only
schedules them and reports how many have finished, so job progress follows real task counts.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor, as_completed
from typing import Any

from app.errors import ParameterError

TaskProgress = Callable[[int, int], None]


class TaskRunner:
    """``map`` a function over argument tuples; results come back in input order."""

    def __init__(self, scheduler: str | None = None, *, threads: int = 2) -> None:
        self.scheduler = scheduler
        self.threads = max(1, threads)
        self._client: Any = None
        if scheduler:
            try:
                from distributed import Client

                self._client = Client(scheduler, timeout="20s", set_as_default=False)
            except OSError as exc:
                raise ParameterError(f"cannot reach the dask scheduler at {scheduler!r} ({exc})") from exc

    @property
    def distributed(self) -> bool:
        return self._client is not None

    @property
    def workers(self) -> int:
        if self._client is None:
            return self.threads
        return max(1, len(self._client.scheduler_info().get("workers", {})))

    def map(self, fn: Callable[..., Any], items: Sequence[tuple[Any, ...]], *, progress: TaskProgress | None = None) -> list[Any]:
        total = len(items)
        results: list[Any] = [None] * total
        done = 0
        if self._client is not None:
            from distributed import as_completed as dask_completed

            futures = [self._client.submit(fn, *args, pure=False) for args in items]
            index = {f.key: i for i, f in enumerate(futures)}
            try:
                for fut in dask_completed(futures, loop=self._client.loop):
                    results[index[fut.key]] = fut.result()
                    done += 1
                    if progress is not None:
                        progress(done, total)
            finally:
                for f in futures:
                    f.release()
            return results
        if self.threads == 1 or total <= 1:
            for i, args in enumerate(items):
                results[i] = fn(*args)
                if progress is not None:
                    progress(i + 1, total)
            return results
        from threadpoolctl import threadpool_limits

        # one BLAS thread per task thread: OpenBLAS's own threads would spin against the pool's
        with threadpool_limits(limits=1, user_api="blas"), ThreadPoolExecutor(max_workers=self.threads) as pool:
            pending = {pool.submit(fn, *args): i for i, args in enumerate(items)}
            for fut in as_completed(pending):
                results[pending[fut]] = fut.result()
                done += 1
                if progress is not None:
                    progress(done, total)
        return results

    def close(self) -> None:
        if self._client is not None:
            self._client.close()
            self._client = None

    def __enter__(self) -> TaskRunner:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
