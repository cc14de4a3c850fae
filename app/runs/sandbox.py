"""Validate a dataset file in a separate *spawned* process with a memory and a time limit.

Crafted or truncated files can crash the C libraries (HDF5, netCDF-C) that read them. The check
therefore runs :func:`app.cube.sources.describe_dataset` in a fresh interpreter started with the
``spawn`` method (no copy of the server's threads, sockets or database connections), whose address
space is capped with ``resource.setrlimit(RLIMIT_AS)`` and which is killed when it outlives the
wall-clock timeout. Whatever happens to the child, the caller only sees the description or an
:class:`app.errors.InputError` whose code says what happened (``invalid_input``,
``validation_crashed``, ``validation_timeout``, ``validation_memory``).

Keep this module light at import: the child imports it to find its target.
"""

from __future__ import annotations

import contextlib
import importlib
import multiprocessing
import os
import signal
import time
from pathlib import Path
from typing import Any

from app.errors import InputError

#: Test hook (setting ``validation_fault``), acted on by the child only: ``abort`` makes it call
#: ``os.abort()`` (SIGABRT), ``segfault`` makes it read address 0 (SIGSEGV), ``sleep`` makes it
#: hang, ``allocate`` makes it ask for more memory than its limit. The end-to-end tests use it to
#: prove that a dying or runaway validator never takes the server down and leaves nothing behind.
FAULTS: tuple[str, ...] = ("", "abort", "segfault", "sleep", "allocate")


def _inject_fault(fault: str, memory_bytes: int | None) -> None:
    if fault == "abort":
        os.abort()
    elif fault == "segfault":
        import ctypes

        ctypes.string_at(0)
    elif fault == "sleep":
        time.sleep(3600)
    elif fault == "allocate":
        bytearray(2 * (memory_bytes or 1 << 40))


def _child(
    conn: Any, path: str, role: str, variable: str | None, memory_bytes: int | None, fault: str
) -> None:
    """Entry point of the spawned process: import, set the limit, describe, answer once.

    The readers are imported before the limit is set, so the limit bounds what reading the file
    costs (RLIMIT_AS counts the whole address space, imports included).
    """
    try:
        for name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ.setdefault(name, "1")  # one thread per numeric library
        from app.cube.sources import describe_dataset
        from app.errors import LandliftError

        for reader in ("netCDF4", "h5netcdf", "zarr"):  # loaded lazily by xarray otherwise
            with contextlib.suppress(ImportError):
                importlib.import_module(reader)
        if memory_bytes:
            import resource

            resource.setrlimit(resource.RLIMIT_AS, (memory_bytes, memory_bytes))
        try:
            _inject_fault(fault, memory_bytes)
            description = describe_dataset(path, role=role, variable=variable)
        except LandliftError as exc:
            conn.send(("invalid", exc.code, exc.message, dict(exc.detail)))
            return
        except MemoryError:
            conn.send(("memory", "", "", {}))
            return
        except Exception as exc:  # a reader library failing on a damaged file
            conn.send(("unreadable", type(exc).__name__, str(exc)[:2000], {}))
            return
        conn.send(("ok", "", "", description))
    except MemoryError:
        with contextlib.suppress(Exception):
            conn.send(("memory", "", "", {}))
    finally:
        conn.close()


def _signal_name(exitcode: int) -> str:
    try:
        return signal.Signals(-exitcode).name
    except ValueError:
        return f"signal {-exitcode}"


def validate_file(
    path: Path,
    *,
    role: str,
    variable: str | None = None,
    timeout: float,
    memory_bytes: int | None,
    display_name: str | None = None,
    fault: str = "",
) -> dict[str, Any]:
    """Describe ``path`` in a spawned child; return the description or raise InputError.

    Blocking: call it from a worker thread in async code.
    """
    shown = display_name or path.name
    ctx = multiprocessing.get_context("spawn")
    parent_conn, child_conn = ctx.Pipe(duplex=False)
    proc = ctx.Process(
        target=_child,
        args=(child_conn, str(path), role, variable, memory_bytes, fault),
        name="landlift-validate",
        daemon=True,
    )
    started = time.monotonic()
    proc.start()
    child_conn.close()
    message: tuple[str, str, str, Any] | None = None
    try:
        if parent_conn.poll(timeout):
            try:
                message = parent_conn.recv()
            except (EOFError, OSError):
                message = None  # the child died before it could answer
        else:
            proc.kill()
            proc.join(5)
            raise InputError(
                f"validation did not finish within {timeout:g} s "
                "(setting validation_timeout_seconds)",
                file=shown, code="validation_timeout", timeout_seconds=timeout,
            )
        proc.join(10)
        if proc.is_alive():
            proc.kill()
            proc.join(5)
    finally:
        parent_conn.close()
        if proc.is_alive():
            proc.kill()
            proc.join(5)
    elapsed = time.monotonic() - started
    if message is None:
        code = proc.exitcode
        how = _signal_name(code) if code is not None and code < 0 else f"exit status {code}"
        raise InputError(
            f"the validation process crashed ({how}); the file is damaged or "
            "not a readable NetCDF/HDF5 dataset",
            file=shown, code="validation_crashed", exitcode=code, seconds=round(elapsed, 3),
        )
    kind, code_name, text, payload = message

    def named(value: str) -> str:  # the temporary name means nothing to the client
        return value.replace(str(path), shown).replace(path.name, shown)

    if kind == "ok":
        return dict(payload)
    if kind == "invalid":
        detail = {k: named(v) if isinstance(v, str) else v for k, v in payload.items()}
        detail["file"] = shown
        error = InputError(named(text), code=code_name or "invalid_input")
        error.detail = detail
        raise error
    if kind == "memory":
        raise InputError(
            f"validation needed more than {memory_bytes} bytes of memory "
            "(setting validation_memory_bytes)",
            file=shown, code="validation_memory", memory_bytes=memory_bytes,
        )
    raise InputError(
        f"could not be read as a NetCDF/HDF5 dataset ({code_name}: {named(text)})",
        file=shown, reader_error=code_name,
    )
