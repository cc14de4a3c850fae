"""Streaming multipart upload: byte cap, SHA-256 while streaming.

The body is read with ``request.stream()`` and fed to python-multipart's streaming
``MultipartParser``; the ``file`` part goes straight into an artifact-store writer (a temporary
file in the store, hashed with SHA-256 as it arrives), so memory stays bounded whatever the upload
size, and nothing is published under a content address until the caller commits it. The cap counts the
bytes actually received, so a chunked body (no ``Content-Length``) is held to it too.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Callable
from dataclasses import dataclass, field

import anyio
from python_multipart import MultipartParser
from python_multipart.exceptions import MultipartParseError
from python_multipart.multipart import parse_options_header
from starlette.requests import ClientDisconnect, Request

from app.api.error_handlers import ApiError
from app.runs.admission import ReceivedFile
from app.store.artifacts import ArtifactWriter

#: Bytes allowed on top of the file cap for multipart framing and the small form fields.
FRAMING_ALLOWANCE = 64 * 1024
#: Largest accepted value of a plain (non-file) form field.
MAX_FIELD_BYTES = 4096
#: Buffer size of the writes to the temporary file (each write runs in a worker thread).
WRITE_BUFFER = 1024 * 1024

@dataclass
class Upload:
    """A received upload: the file (whole, fsynced, not yet published) plus the form fields."""

    file: ReceivedFile
    fields: dict[str, str] = field(default_factory=dict)

    def discard(self) -> None:
        self.file.discard()


def too_large(limit: int, received: int | None = None) -> ApiError:
    detail: dict[str, int] = {"max_upload_bytes": limit}
    if received is not None:
        detail["received_bytes"] = received
    return ApiError(
        413,
        "payload_too_large",
        f"the upload is larger than the limit of {limit} bytes (setting max_upload_bytes)",
        detail=detail,
        headers={"Connection": "close"},
    )


class _Sink:
    """Collects the multipart events; writes the file part through a hashing buffer."""

    def __init__(
        self, *, open_writer: Callable[[], ArtifactWriter], file_field: str, max_file_bytes: int
    ) -> None:
        self.open_writer = open_writer
        self.file_field = file_field
        self.max_file_bytes = max_file_bytes
        self.fields: dict[str, str] = {}
        self.head = b""
        self.size = 0
        self.filename: str | None = None
        self.writer: ArtifactWriter | None = None
        self.pending = bytearray()
        self.error: ApiError | None = None
        self.seen_file = False
        self.finished = False
        # state of the current part
        self._header_field = bytearray()
        self._header_value = bytearray()
        self._headers: dict[str, str] = {}
        self._name: str | None = None
        self._is_file = False
        self._value = bytearray()

    # -- python-multipart callbacks (synchronous, cheap) -------------------------------------
    def on_part_begin(self) -> None:
        self._headers = {}
        self._name = None
        self._is_file = False
        self._value = bytearray()

    def on_header_field(self, data: bytes, start: int, end: int) -> None:
        self._header_field += data[start:end]

    def on_header_value(self, data: bytes, start: int, end: int) -> None:
        self._header_value += data[start:end]

    def on_header_end(self) -> None:
        self._headers[self._header_field.decode("latin-1").lower()] = self._header_value.decode(
            "latin-1"
        )
        self._header_field = bytearray()
        self._header_value = bytearray()

    def on_headers_finished(self) -> None:
        disposition, params = parse_options_header(self._headers.get("content-disposition", ""))
        if disposition != b"form-data" or b"name" not in params:
            self._fail(400, "bad_multipart", "a multipart part has no form-data name")
            return
        self._name = params[b"name"].decode("utf-8", "replace")
        if self._name == self.file_field:
            if self.seen_file:
                self._fail(400, "bad_multipart", f"more than one {self.file_field!r} part")
                return
            self.seen_file = True
            self._is_file = True
            raw = params.get(b"filename")
            self.filename = os.path.basename(raw.decode("utf-8", "replace")) if raw else None
            self.writer = self.open_writer()

    def on_part_data(self, data: bytes, start: int, end: int) -> None:
        if self.error is not None:
            return
        chunk = data[start:end]
        if self._is_file:
            self.size += len(chunk)
            if self.size > self.max_file_bytes:
                self.error = too_large(self.max_file_bytes, self.size)
                return
            if len(self.head) < 16:
                self.head += chunk[: 16 - len(self.head)]
            self.pending += chunk
        else:
            self._value += chunk
            if len(self._value) > MAX_FIELD_BYTES:
                self._fail(
                    400, "bad_multipart", f"form field {self._name!r} exceeds {MAX_FIELD_BYTES} bytes"
                )

    def on_part_end(self) -> None:
        if self.error is None and not self._is_file and self._name is not None:
            self.fields[self._name] = self._value.decode("utf-8", "replace")

    def on_end(self) -> None:
        self.finished = True

    def _fail(self, status: int, code: str, message: str) -> None:
        if self.error is None:
            self.error = ApiError(status, code, message)

    # -- file writes (run in a worker thread) --------------------------------------------------
    def write_pending(self) -> None:
        if self.pending and self.writer is not None:
            data = bytes(self.pending)
            self.pending.clear()
            self.writer.write(data)

    def finish(self) -> str:
        assert self.writer is not None
        self.write_pending()
        return self.writer.finish()

    def remove(self) -> None:
        if self.writer is not None:
            with contextlib.suppress(OSError):
                self.writer.abort()


def _boundary(request: Request) -> bytes:
    content_type, params = parse_options_header(request.headers.get("content-type", ""))
    if content_type != b"multipart/form-data":
        raise ApiError(
            415,
            "unsupported_media_type",
            "send the dataset as multipart/form-data with a 'file' part and a 'role' field",
            detail={"content_type": request.headers.get("content-type")},
        )
    boundary = params.get(b"boundary")
    if not boundary:
        raise ApiError(400, "bad_multipart", "the multipart Content-Type has no boundary")
    return boundary


async def receive_upload(
    request: Request,
    *,
    open_writer: Callable[[], ArtifactWriter],
    max_bytes: int,
    file_field: str = "file",
) -> Upload:
    """Stream a multipart body into an artifact writer; raise :class:`ApiError` on any problem.

    On error nothing is left on disk. On success the caller owns ``Upload.writer`` and must
    ``commit()`` it into the store or :meth:`Upload.discard` it.
    """
    boundary = _boundary(request)
    body_limit = max_bytes + FRAMING_ALLOWANCE
    declared = request.headers.get("content-length")
    if declared is not None:
        try:
            length = int(declared)
        except ValueError:
            raise ApiError(400, "bad_request", "Content-Length is not a number") from None
        if length > body_limit:
            raise too_large(max_bytes, length)
    sink = _Sink(open_writer=open_writer, file_field=file_field, max_file_bytes=max_bytes)
    parser = MultipartParser(
        boundary,
        {
            "on_part_begin": sink.on_part_begin,
            "on_part_data": sink.on_part_data,
            "on_part_end": sink.on_part_end,
            "on_header_field": sink.on_header_field,
            "on_header_value": sink.on_header_value,
            "on_header_end": sink.on_header_end,
            "on_headers_finished": sink.on_headers_finished,
            "on_end": sink.on_end,
        },
    )
    received = 0
    try:
        async for chunk in request.stream():
            received += len(chunk)
            if received > body_limit:
                raise too_large(max_bytes, received)
            try:
                parser.write(chunk)
            except MultipartParseError as exc:
                raise ApiError(400, "bad_multipart", f"malformed multipart body: {exc}") from None
            if sink.error is not None:
                raise sink.error
            if len(sink.pending) >= WRITE_BUFFER:
                await anyio.to_thread.run_sync(sink.write_pending)
        try:
            parser.finalize()
        except MultipartParseError as exc:
            raise ApiError(400, "bad_multipart", f"malformed multipart body: {exc}") from None
        if sink.error is not None:
            raise sink.error
        if not sink.finished:
            raise ApiError(400, "bad_multipart", "the multipart body ended before its last boundary")
        if not sink.seen_file or sink.writer is None:
            raise ApiError(
                422,
                "invalid_request",
                f"the upload has no {file_field!r} part",
                detail={"fields": sorted(sink.fields)},
            )
        sha256 = await anyio.to_thread.run_sync(sink.finish)
    except ClientDisconnect:
        sink.remove()
        raise ApiError(400, "client_disconnect", "the client went away mid-upload") from None
    except BaseException:
        sink.remove()
        raise
    return Upload(
        file=ReceivedFile(
            writer=sink.writer, size=sink.size, sha256=sha256, head=sink.head, filename=sink.filename
        ),
        fields=sink.fields,
    )
