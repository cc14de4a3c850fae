"""One error body for every failure the API answers: ``{"error": {"code", "message", "detail"}}``.

Domain errors (:class:`app.errors.LandliftError` and its subclasses) carry their own ``code`` and
``http_status``; :class:`ApiError` is the web layer's own (auth, upload limits, conflicts).
Request validation errors, malformed JSON, unknown routes and unexpected exceptions are mapped
to the same body by :func:`install_error_handlers`, the single place where errors become HTTP.
"""

from __future__ import annotations

import logging
import math
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from app.errors import LandliftError
from app.runs.options import describe_validation_errors

log = logging.getLogger("landlift.api")

_STATUS_CODES = {
    400: "bad_request",
    401: "unauthorized",
    403: "forbidden",
    404: "not_found",
    405: "method_not_allowed",
    406: "not_acceptable",
    409: "conflict",
    411: "length_required",
    413: "payload_too_large",
    415: "unsupported_media_type",
    422: "invalid_request",
    429: "too_many_requests",
    500: "internal_error",
    503: "unavailable",
}


class ApiError(Exception):
    """An error raised by the web layer itself, with its HTTP status and extra headers."""

    def __init__(
        self,
        status: int,
        code: str,
        message: str,
        *,
        detail: dict[str, Any] | None = None,
        headers: dict[str, str] | None = None,
    ) -> None:
        super().__init__(message)
        self.status = status
        self.code = code
        self.message = message
        self.detail = detail or {}
        self.headers = headers or {}


def error_body(code: str, message: str, detail: dict[str, Any] | None = None) -> dict[str, Any]:
    """The DESIGN section 5 error body."""
    return {"error": {"code": code, "message": message, "detail": detail or {}}}


def error_response(
    status: int,
    code: str,
    message: str,
    detail: dict[str, Any] | None = None,
    headers: dict[str, str] | None = None,
) -> JSONResponse:
    return JSONResponse(
        error_body(code, message, detail), status_code=status, headers=headers or None
    )


def _jsonable(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)  # NaN and infinities are not JSON
    if value is None or isinstance(value, str | int | float | bool):
        return value
    if isinstance(value, bytes):
        return value[:200].decode("utf-8", "replace")
    return str(value)


def _validation_detail(exc: RequestValidationError) -> tuple[str, str, dict[str, Any]]:
    errors = []
    malformed = False
    for item in exc.errors():
        if item.get("type") == "json_invalid":
            malformed = True
        errors.append(
            {
                "loc": [str(p) for p in item.get("loc", ())],
                "type": item.get("type"),
                "message": item.get("msg"),
                "input": _jsonable(item.get("input")),
            }
        )
    if malformed:
        return "malformed_json", "the request body is not valid JSON", {"errors": errors}
    return "invalid_request", describe_validation_errors(exc.errors()), {"errors": errors}


def to_response(request: Request, exc: Exception) -> JSONResponse:
    """THE mapping from an exception to the DESIGN error body and its HTTP status."""
    if isinstance(exc, LandliftError):
        status = int(getattr(exc, "http_status", 400))
        return error_response(status, exc.code, exc.message, _jsonable(exc.detail), exc.headers)
    if isinstance(exc, ApiError):
        return error_response(exc.status, exc.code, exc.message, _jsonable(exc.detail),
                              exc.headers)
    if isinstance(exc, RequestValidationError):
        code, message, detail = _validation_detail(exc)
        return error_response(422 if code == "invalid_request" else 400, code, message, detail)
    if isinstance(exc, StarletteHTTPException):
        code = _STATUS_CODES.get(exc.status_code, "error")
        message = exc.detail if isinstance(exc.detail, str) else code.replace("_", " ")
        if exc.status_code == 404 and message == "Not Found":
            message = f"no route {request.method} {request.url.path}"
        elif exc.status_code == 405:
            message = f"method {request.method} is not allowed on {request.url.path}"
        return error_response(exc.status_code, code, message, {}, dict(exc.headers or {}))
    log.exception("unhandled error on %s %s", request.method, request.url.path, exc_info=exc)
    return error_response(
        500, "internal_error", "the server failed on this request", {"type": type(exc).__name__}
    )


def install_error_handlers(app: FastAPI) -> None:
    """Register :func:`to_response` for every kind of error the app can raise."""

    async def handler(request: Request, exc: Exception) -> JSONResponse:
        return to_response(request, exc)

    for kind in (LandliftError, ApiError, RequestValidationError, StarletteHTTPException,
                 Exception):
        app.add_exception_handler(kind, handler)
