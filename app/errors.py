"""Domain errors shared by every layer.

Each error carries a machine-readable ``code``, a human ``message`` that names the bad value and,
where there is one, the valid choices, a JSON-able ``detail`` and the HTTP status it stands for.
The web layer maps them to HTTP in one handler; the CLI prints the message and exits 2.

A class gives the usual code and status of its kind; one raise may name a more precise code
(``InputError("is empty", file=..., code="empty_file")``) without a class of its own.
"""

from __future__ import annotations

from typing import Any


class LandliftError(ValueError):
    """Base of all domain errors."""

    code = "error"
    http_status = 400

    def __init__(
        self,
        message: str,
        *,
        code: str | None = None,
        http_status: int | None = None,
        headers: dict[str, str] | None = None,
        **detail: Any,
    ) -> None:
        super().__init__(message)
        self.message = message
        if code is not None:
            self.code = code
        if http_status is not None:
            self.http_status = http_status
        self.headers = dict(headers or {})
        self.detail = {k: v for k, v in detail.items() if v is not None}


class InputError(LandliftError):
    """A data file is unusable: the message names the file, the variable and the problem."""

    code = "invalid_input"
    http_status = 422

    def __init__(
        self,
        problem: str,
        *,
        file: str | None = None,
        variable: str | None = None,
        **detail: Any,
    ) -> None:
        where = ", ".join(
            part for part in (f"file {file}" if file else "", f"variable {variable!r}" if variable else "") if part
        )
        super().__init__(f"{where}: {problem}" if where else problem, file=file, variable=variable, **detail)


class ParameterError(LandliftError):
    """A scoring option is out of range or unknown."""

    code = "invalid_parameter"
    http_status = 422


class NotFoundError(LandliftError):
    """A named thing (region, window, field, id) does not exist."""

    code = "not_found"
    http_status = 404


class ConflictError(LandliftError):
    """The request conflicts with stored state (e.g. same bytes posted with another role)."""

    code = "conflict"
    http_status = 409


class ResultNotReady(LandliftError):
    """The experiment (or comparison) exists but its job has not finished successfully."""

    code = "not_ready"
    http_status = 409


class RefusedError(LandliftError):
    """A request the service will not carry out (a path outside the data roots, a file that
    makes the HDF5 library open another file)."""

    code = "refused"
    http_status = 422


class TooLargeError(LandliftError):
    """More bytes, cells or items than a configured limit allows."""

    code = "payload_too_large"
    http_status = 413


class BusyError(LandliftError):
    """The service is at a configured concurrency limit; the client should retry later."""

    code = "busy"
    http_status = 503
