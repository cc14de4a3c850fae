"""``/v1/tokens`` (admin scope): list, create and revoke API tokens."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Body

from app.api.deps import AdminAccess, StoreDep, forget_tokens
from app.api.schemas import TokenCreated, TokenIn, TokenOut
from app.store import repo

router = APIRouter(prefix="/v1/tokens", tags=["tokens"])


@router.get("", response_model=list[TokenOut])
def list_tokens(store: StoreDep, _: AdminAccess) -> list[dict[str, Any]]:
    """Every token's id, name, scope and display prefix (never the token itself)."""
    return repo.list_tokens(store)


@router.post("", status_code=201, response_model=TokenCreated)
def create_token(
    body: Annotated[TokenIn, Body()], store: StoreDep, _: AdminAccess
) -> dict[str, Any]:
    """Create a token; the answer is the only time the token is shown."""
    token, info = repo.create_token(store, name=body.name, scope=body.scope)
    return {**info, "token": token}


@router.delete("/{token_id}", response_model=TokenOut)
def revoke_token(token_id: str, store: StoreDep, _: AdminAccess) -> dict[str, Any]:
    """Revoke a token: it stops working at once."""
    info = repo.revoke_token(store, token_id)
    forget_tokens()  # this process stops honouring it at once; others within TOKEN_CACHE_SECONDS
    return info
