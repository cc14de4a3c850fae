"""The worker loop: claim a job, keep its lease alive, run it, record the outcome.

``Worker.run`` loops until its ``stop_event`` is set (or ``once`` / ``max_jobs`` / ``drain`` say
so). While a job runs, a heartbeat thread renews the lease every ``heartbeat_seconds``; if a
renewal finds that another worker owns the job, or no renewal has succeeded for a whole lease
(the worker cannot know whether it still owns the job), the job's next progress call raises
:class:`~app.jobs.queue.LeaseLost` and the work is abandoned without writing anything.

Outcomes: the handler returns -> ``complete`` (results recorded in the same owner-checked
transaction); a :class:`~app.errors.LandliftError` (bad input, deterministic) -> ``failed`` at
once; any other exception -> retried after a delay while attempts remain, then ``failed``;
``stop_event`` set during a job -> the job is given back to the queue (not counted).
"""

from __future__ import annotations

import logging
import os
import socket
import threading
import time
import traceback
from collections.abc import Mapping, Sequence

from app.errors import LandliftError
from app.jobs import queue
from app.jobs.handlers import HANDLERS, Handler, JobContext
from app.jobs.queue import Claim, LeaseLost
from app.settings import Settings
from app.store import Store

log = logging.getLogger("landlift.jobs")

_counter = 0
_counter_lock = threading.Lock()


class JobCancelled(RuntimeError):
    """The worker is stopping; the running job is handed back."""


def default_worker_name() -> str:
    global _counter
    with _counter_lock:
        _counter += 1
        n = _counter
    return f"{socket.gethostname()}:{os.getpid()}:{n}"


class _Lease:
    """Heartbeat thread plus the local fence for one claim."""

    def __init__(self, store: Store, claim: Claim, *, interval: float) -> None:
        self.store = store
        self.claim = claim
        self.interval = interval
        self.lost = threading.Event()
        self._halt = threading.Event()
        self._renewed = time.monotonic()
        self._thread = threading.Thread(
            target=self._run, name=f"heartbeat-{claim.job_id}", daemon=True
        )

    def __enter__(self) -> _Lease:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._halt.set()
        self._thread.join(timeout=max(5.0, self.interval * 2))

    def _run(self) -> None:
        while not self._halt.wait(self.interval):
            try:
                queue.heartbeat(self.store, self.claim)
                self._renewed = time.monotonic()
            except LeaseLost:
                log.warning(
                    "lease lost", extra={"job": self.claim.job_id, "attempt": self.claim.attempt}
                )
                self.lost.set()
                return
            except Exception as exc:  # database briefly unreachable: try again next beat
                log.warning("heartbeat failed: %s", exc, extra={"job": self.claim.job_id})

    def check(self) -> None:
        if self.lost.is_set():
            raise LeaseLost(self.claim.job_id, self.claim.attempt)
        if time.monotonic() - self._renewed >= self.claim.lease_seconds:
            # no renewal for a whole lease: another worker may own the job by now
            self.lost.set()
            raise LeaseLost(self.claim.job_id, self.claim.attempt)


class Worker:
    """Runs jobs from the queue of ``store`` until stopped."""

    def __init__(
        self,
        store: Store,
        *,
        name: str | None = None,
        stop_event: threading.Event | None = None,
        handlers: Mapping[str, Handler] | None = None,
        lease_seconds: float | None = None,
        heartbeat_seconds: float | None = None,
        poll_seconds: float | None = None,
        progress_interval: float = 0.5,
    ) -> None:
        settings = store.settings
        self.store = store
        self.name = name or default_worker_name()
        self.stop_event = stop_event or threading.Event()
        self.handlers: dict[str, Handler] = dict(handlers if handlers is not None else HANDLERS)
        self.lease_seconds = float(lease_seconds or settings.lease_seconds)
        self.heartbeat_seconds = float(heartbeat_seconds or settings.heartbeat_seconds)
        self.poll_seconds = float(poll_seconds or settings.poll_seconds)
        self.progress_interval = progress_interval
        if self.heartbeat_seconds >= self.lease_seconds:
            raise ValueError(
                f"heartbeat_seconds {self.heartbeat_seconds} must be shorter than "
                f"lease_seconds {self.lease_seconds}"
            )

    @property
    def kinds(self) -> Sequence[str]:
        return sorted(self.handlers)

    # -------------------------------------------------------------------------------- loop

    def run(self, *, once: bool = False, max_jobs: int | None = None, drain: bool = False) -> int:
        """Process jobs; return how many were processed.

        ``once``: try one claim, run it if there is one, return. ``drain``: return as soon as
        nothing is claimable. ``max_jobs``: return after that many. Otherwise run until
        ``stop_event`` is set.
        """
        done = 0
        log.info("worker started", extra={"worker": self.name, "kinds": list(self.kinds)})
        while not self.stop_event.is_set():
            if max_jobs is not None and done >= max_jobs:
                break
            try:
                claim = queue.claim_next(
                    self.store, worker=self.name, lease_seconds=self.lease_seconds,
                    kinds=self.kinds,
                )
            except Exception as exc:  # database unreachable: wait and try again
                log.error("claim failed: %s", exc, extra={"worker": self.name})
                if once:
                    break
                self.stop_event.wait(self.poll_seconds)
                continue
            if claim is None:
                if once or drain:
                    break
                self.stop_event.wait(self.poll_seconds)
                continue
            self.process(claim)
            done += 1
            if once:
                break
        log.info("worker stopped", extra={"worker": self.name, "jobs": done})
        return done

    # -------------------------------------------------------------------------------- one job

    def process(self, claim: Claim) -> str:
        """Run one claimed job; return the outcome (done, failed, queued, released, lost)."""
        handler = self.handlers.get(claim.kind)
        extra = {"job": claim.job_id, "kind": claim.kind, "attempt": claim.attempt,
                 "worker": self.name}
        log.info("job started", extra=extra)
        started = time.monotonic()
        if handler is None:  # pragma: no cover - claim_next only returns handled kinds
            return self._fail(claim, f"no handler for job kind {claim.kind!r}", retry=False)
        with _Lease(self.store, claim, interval=self.heartbeat_seconds) as lease:
            last_write = [0.0]

            def check() -> None:
                if self.stop_event.is_set():
                    raise JobCancelled(f"worker {self.name} is stopping")
                lease.check()

            def progress(fraction: float, message: str = "") -> None:
                check()
                now = time.monotonic()
                if now - last_write[0] < self.progress_interval and fraction < 1.0:
                    return
                try:
                    queue.report_progress(self.store, claim, fraction, message or None)
                except LeaseLost:
                    lease.lost.set()
                    raise
                except Exception as exc:  # a busy database must not kill the job
                    log.warning("progress not recorded: %s", exc, extra=extra)
                    return
                last_write[0] = now

            ctx = JobContext(store=self.store, claim=claim, progress=progress, check=check)
            try:
                record = handler(ctx)
                lease.check()
                queue.complete(self.store, claim, record)
                outcome = "done"
            except JobCancelled:
                outcome = self._release(claim)
            except LeaseLost:
                log.warning("job abandoned: lease lost", extra=extra)
                outcome = "lost"
            except LandliftError as exc:
                outcome = self._fail(claim, f"{exc.code}: {exc.message}", retry=False)
            except KeyboardInterrupt:
                self._release(claim, reason="interrupted")
                raise
            except Exception as exc:
                detail = "".join(traceback.format_exception_only(type(exc), exc)).strip()
                log.error("job error: %s", detail, extra=extra, exc_info=True)
                outcome = self._fail(claim, detail, retry=True)
        log.info(
            "job finished",
            extra={**extra, "outcome": outcome, "seconds": round(time.monotonic() - started, 3)},
        )
        return outcome

    def _fail(self, claim: Claim, error: str, *, retry: bool) -> str:
        try:
            return queue.fail(self.store, claim, error, retry=retry)
        except LeaseLost:
            return "lost"

    def _release(self, claim: Claim, *, reason: str = "worker stopped") -> str:
        try:
            queue.release(self.store, claim, reason=reason)
            return "released"
        except LeaseLost:
            return "lost"


def run_worker(
    settings: Settings,
    *,
    stop_event: threading.Event | None = None,
    once: bool = False,
    max_jobs: int | None = None,
    drain: bool = False,
    name: str | None = None,
    handlers: Mapping[str, Handler] | None = None,
) -> int:
    """Open the store of ``settings`` and run a :class:`Worker`; return the jobs processed.

    The database must be at the newest schema revision (``landlift db upgrade``).
    """
    from app.store.migrate import head_revision

    store = Store.open(settings)
    try:
        from app.store.migrate import current_revision

        current = current_revision(settings.url)
        if current != head_revision():
            raise LandliftError(
                f"database schema is at revision {current!r}, not {head_revision()!r}: "
                "run `landlift db upgrade` first",
                code="schema_out_of_date",
            )
        worker = Worker(store, name=name, stop_event=stop_event, handlers=handlers)
        return worker.run(once=once, max_jobs=max_jobs, drain=drain)
    finally:
        store.close()


def start_worker_thread(
    settings: Settings,
    *,
    stop_event: threading.Event,
    name: str | None = None,
) -> threading.Thread:
    """Start a daemon thread running :func:`run_worker` until ``stop_event`` is set."""

    def _target() -> None:
        try:
            run_worker(settings, stop_event=stop_event, name=name)
        except Exception:  # pragma: no cover - logged, the server keeps serving
            log.exception("in-process worker stopped with an error")

    thread = threading.Thread(target=_target, name="landlift-worker", daemon=True)
    thread.start()
    return thread
