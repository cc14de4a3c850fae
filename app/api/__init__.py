"""The HTTP API (FastAPI): routes only parse, call the store and engine, and map errors."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from fastapi import FastAPI

    from app.settings import Settings

__all__ = ["create_app"]


def create_app(settings: Settings, **kwargs: Any) -> FastAPI:
    from app.api.app import create_app as _create

    return _create(settings, **kwargs)
