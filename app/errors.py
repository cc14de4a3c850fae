"""Domain errors shared by every layer.

Each error carries a machine-readable ``code``, a human ``message`` that names the bad value and,
where there is one, the valid choices, and a JSON-able ``detail``. The web layer maps them to HTTP
in one handler; the CLI prints the message and exits non-zero.
"""

from __future__ import annotations

from typing import Any


class LandliftError(ValueError):
    """Base of all domain errors."""

    code = "error"
    http_status = 400

    def __init__(self, message: str, **detail: Any) -> None:
        super().__init__(message)
        self.message = message
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
