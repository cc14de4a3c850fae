"""Shared dependencies: the store, the settings and the caller's token (``Annotated`` aliases).

Routes declare what they need as parameters typed with these aliases::

    def get_job(job_id: str, store: StoreDep, _: ReadAccess) -> JobOut: ...

``ReadAccess``/``WriteAccess``/``AdminAccess`` check ``Authorization: Bearer <token>`` against
the stored token hashes (constant-time compare in :func:`app.store.token_rows.verify_token`): no token
or a bad token is 401, too small a scope is 403, each with the DESIGN error body. With the
``public_read`` setting, reads need no token (a token that is sent must still be valid).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Annotated

from fastapi import Depends, Request

from app.api.error_handlers import ApiError
from app.settings import Settings
from app.store import Store, token_rows


async def get_store(request: Request) -> Store:
    return request.app.state.store  # type: ignore[no-any-return]


async def get_settings(request: Request) -> Settings:
    return request.app.state.settings  # type: ignore[no-any-return]


StoreDep = Annotated[Store, Depends(get_store)]
SettingsDep = Annotated[Settings, Depends(get_settings)]


@dataclass(frozen=True)
class Principal:
    """Who is calling: a token's id, name and scope, or the anonymous public reader."""

    scope: str
    token_id: str | None = None
    name: str | None = None

    @property
    def public(self) -> bool:
        return self.token_id is None


_CHALLENGE = {"WWW-Authenticate": 'Bearer realm="landlift"'}


def _bearer(request: Request) -> str | None:
    header = request.headers.get("authorization")
    if header is None:
        return None
    scheme, _, value = header.strip().partition(" ")
    if scheme.lower() != "bearer" or not value.strip():
        raise ApiError(
            401,
            "unauthorized",
            "the Authorization header must be 'Bearer <token>'",
            headers=_CHALLENGE,
        )
    return value.strip()


#: verified tokens are remembered for a few seconds (a revocation takes effect
#: within that time); unknown tokens are never cached
TOKEN_CACHE_SECONDS = 5.0
_token_cache: dict[tuple[str, str], tuple[float, dict]] = {}


def forget_tokens() -> None:
    _token_cache.clear()


async def _verified(store: Store, token: str) -> dict | None:
    import hashlib
    import time

    from starlette.concurrency import run_in_threadpool

    key = (store.db.url, hashlib.sha256(token.encode()).hexdigest())
    now = time.monotonic()
    hit = _token_cache.get(key)
    if hit is not None and hit[0] > now:
        return hit[1]
    info = await run_in_threadpool(token_rows.verify_token, store, token)
    if info is not None:
        if len(_token_cache) > 1024:
            _token_cache.clear()
        _token_cache[key] = (now + TOKEN_CACHE_SECONDS, info)
    return info


def require(scope: str) -> object:
    """A dependency that admits tokens of ``scope`` or higher (read < write < admin)."""

    async def _check(request: Request, store: StoreDep, settings: SettingsDep) -> Principal:
        token = _bearer(request)
        if token is None:
            if scope == "read" and settings.public_read:
                return Principal(scope="public")
            raise ApiError(
                401,
                "unauthorized",
                f"this request needs a bearer token with scope {scope!r} or higher",
                detail={"required_scope": scope},
                headers=_CHALLENGE,
            )
        info = await _verified(store, token)
        if info is None:
            raise ApiError(
                401,
                "invalid_token",
                "the bearer token is unknown or revoked",
                headers={"WWW-Authenticate": 'Bearer realm="landlift", error="invalid_token"'},
            )
        if not token_rows.scope_allows(info["scope"], scope):
            raise ApiError(
                403,
                "forbidden",
                f"token {info['prefix']}… has scope {info['scope']!r}; this request needs "
                f"{scope!r} or higher",
                detail={"required_scope": scope, "token_scope": info["scope"]},
            )
        return Principal(scope=info["scope"], token_id=info["id"], name=info["name"])

    _check.__name__ = f"require_{scope}"
    return _check


ReadAccess = Annotated[Principal, Depends(require("read"))]
WriteAccess = Annotated[Principal, Depends(require("write"))]
AdminAccess = Annotated[Principal, Depends(require("admin"))]
