"""ETag and Cache-Control helpers.

A finished result never changes (DESIGN 5), so its ETag is a hash of its identity: the result id
plus the representation asked for (region, aggregation, format, window, field). A 304 carries the
same ``ETag``, ``Cache-Control`` and ``Vary`` headers as the 200 it stands for (RFC 9110 15.4.5).
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

from fastapi import Request, Response

#: Finished results are immutable: a day of freshness, then revalidation by ETag.
RESULT_CACHE = "private, max-age=86400, immutable"
#: Job status and other live state: always revalidate.
LIVE_CACHE = "private, no-cache"


def make_etag(*parts: Any) -> str:
    """A strong ETag from the identity of a representation."""
    raw = json.dumps([str(p) for p in parts], separators=(",", ":")).encode()
    return '"' + hashlib.sha256(raw).hexdigest()[:32] + '"'


def _matches(header: str | None, etag: str) -> bool:
    if not header:
        return False
    if header.strip() == "*":
        return True
    wanted = etag.removeprefix("W/")
    return any(tag.strip().removeprefix("W/") == wanted for tag in header.split(","))


def cache_headers(etag: str, cache_control: str = RESULT_CACHE) -> dict[str, str]:
    return {"ETag": etag, "Cache-Control": cache_control, "Vary": "Authorization"}


def not_modified(request: Request, headers: dict[str, str]) -> Response | None:
    """A 304 with ``headers`` when ``If-None-Match`` names the ETag, else ``None``."""
    if _matches(request.headers.get("if-none-match"), headers["ETag"]):
        return Response(status_code=304, headers=headers)
    return None
