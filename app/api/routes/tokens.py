"""``/v1/tokens`` (admin scope): list, create and revoke API tokens."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Body

from app.api.deps import AdminAccess, StoreDep, forget_tokens
from app.api.schemas import TokenCreated, TokenIn, TokenOut
from app.store import token_rows

router = APIRouter(prefix="/v1/tokens", tags=["tokens"])


@router.get("", response_model=list[TokenOut])
def list_tokens(store: StoreDep, _: AdminAccess) -> list[TokenOut]:
    """Every token's id, name, scope and display prefix (never the token itself)."""
    return [TokenOut.model_validate(t) for t in token_rows.list_tokens(store)]


@router.post("", status_code=201, response_model=TokenCreated)
def create_token(
    body: Annotated[TokenIn, Body()], store: StoreDep, _: AdminAccess
) -> TokenCreated:
    """Create a token; the answer is the only time the token is shown."""
    token, info = token_rows.create_token(store, name=body.name, scope=body.scope)
    return TokenCreated.model_validate({**info, "token": token})


@router.delete("/{token_id}", response_model=TokenOut)
def revoke_token(token_id: str, store: StoreDep, _: AdminAccess) -> TokenOut:
    """Revoke a token: it stops working at once."""
    info = token_rows.revoke_token(store, token_id)
    forget_tokens()  # this process stops honouring it at once; others within TOKEN_CACHE_SECONDS
    return TokenOut.model_validate(info)
