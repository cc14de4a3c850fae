"""API tokens: created once and shown once, stored as SHA-256 digests, scoped, revocable."""

from __future__ import annotations

import hashlib
import hmac
import secrets
from datetime import timedelta
from typing import Any

from sqlalchemy import select

from app.errors import NotFoundError, ParameterError
from app.store import Store
from app.store.common import iso
from app.store.models import TOKEN_SCOPES, Token, new_id, utcnow

TOKEN_PREFIX = "ll_"
_SCOPE_RANK = {scope: rank for rank, scope in enumerate(TOKEN_SCOPES)}
_TOUCH_EVERY = timedelta(seconds=60)


def _hash_token(token: str) -> str:
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


def _token_dict(row: Token) -> dict[str, Any]:
    return {
        "id": row.id,
        "name": row.name,
        "scope": row.scope,
        "prefix": row.prefix,
        "created_at": iso(row.created_at),
        "last_used_at": iso(row.last_used_at),
        "revoked_at": iso(row.revoked_at),
    }


def create_token(store: Store, *, name: str, scope: str) -> tuple[str, dict[str, Any]]:
    """Create an API token; return ``(token, info)``. The token itself is not stored (only its
    SHA-256 and a display prefix), so this is the only time it is seen."""
    if scope not in TOKEN_SCOPES:
        raise ParameterError(
            f"scope {scope!r} is not known: use one of {list(TOKEN_SCOPES)}", scope=scope
        )
    if not name or not name.strip() or len(name) > 200:
        raise ParameterError(f"token name {name!r} must be 1..200 characters", name=name)
    token = TOKEN_PREFIX + secrets.token_urlsafe(32)
    row = Token(
        id=new_id("tok"),
        name=name.strip(),
        scope=scope,
        prefix=token[: len(TOKEN_PREFIX) + 8],
        token_hash=_hash_token(token),
        created_at=utcnow(),
    )
    with store.db.write() as session:
        session.add(row)
        session.flush()
        info = _token_dict(row)
    return token, info


def verify_token(store: Store, token: str | None) -> dict[str, Any] | None:
    """The token's ``{"id", "name", "scope", "prefix", ...}`` if it is valid and not revoked.

    Looks candidates up by display prefix and compares SHA-256 digests with
    ``hmac.compare_digest`` (constant time). Returns None for a missing, malformed, unknown or
    revoked token.
    """
    candidate = _hash_token(token or "")
    if not token or not token.startswith(TOKEN_PREFIX) or len(token) > 200:
        hmac.compare_digest(candidate, candidate)
        return None
    prefix = token[: len(TOKEN_PREFIX) + 8]
    with store.db.read() as session:
        rows = session.scalars(select(Token).where(Token.prefix == prefix)).all()
        match = None
        for row in rows:
            if hmac.compare_digest(row.token_hash, candidate) and row.revoked_at is None:
                match = row
        if match is None:
            return None
        info = _token_dict(match)
        stale = match.last_used_at is None or utcnow() - match.last_used_at > _TOUCH_EVERY
    if stale:
        try:
            with store.db.write() as session:
                used = session.get(Token, info["id"])
                if used is not None:
                    used.last_used_at = utcnow()
        except Exception:  # pragma: no cover - a busy database must not fail the request
            pass
    return info


def scope_allows(scope: str, required: str) -> bool:
    """``read`` < ``write`` < ``admin``: whether a token of ``scope`` may do ``required``."""
    if required not in _SCOPE_RANK:
        raise ParameterError(f"scope {required!r} is not known: use one of {list(TOKEN_SCOPES)}")
    return _SCOPE_RANK.get(scope, -1) >= _SCOPE_RANK[required]


def list_tokens(store: Store) -> list[dict[str, Any]]:
    with store.db.read() as session:
        rows = session.scalars(select(Token).order_by(Token.created_at)).all()
        return [_token_dict(r) for r in rows]


def revoke_token(store: Store, token_id: str) -> dict[str, Any]:
    with store.db.write() as session:
        row = session.get(Token, token_id)
        if row is None:
            raise NotFoundError(f"token {token_id!r} does not exist", token=token_id)
        if row.revoked_at is None:
            row.revoked_at = utcnow()
        session.flush()
        return _token_dict(row)
