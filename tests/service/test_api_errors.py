"""Every failure has the DESIGN error body, including the ones no route raises on purpose.

In-process app (``create_app`` on a real migrated SQLite database and artifact store) with one
extra route that fails with an unexpected exception: the client gets a 500 with the error body
and no traceback; unknown routes and wrong methods get 404 and 405 bodies.
"""

from __future__ import annotations

import asyncio
from pathlib import Path

import httpx
from api_support import assert_error
from fastapi import FastAPI

from app.api import create_app
from app.settings import Settings
from app.store.migrate import upgrade


def _app(tmp_path: Path) -> FastAPI:
    settings = Settings(data_dir=tmp_path / "data")
    upgrade(settings.url)
    app = create_app(settings)

    @app.get("/boom")
    def boom() -> None:
        raise RuntimeError("secret internal detail ll_abcdefghijklmnop")

    return app


def _requests(app: FastAPI, *calls: tuple[str, str]) -> list[httpx.Response]:
    async def run() -> list[httpx.Response]:
        transport = httpx.ASGITransport(app=app, raise_app_exceptions=False)
        async with httpx.AsyncClient(transport=transport, base_url="http://landlift") as client:
            return [await client.request(method, path) for method, path in calls]

    return asyncio.run(run())


def test_unexpected_exception_is_a_500_with_the_error_body(tmp_path: Path) -> None:
    (r,) = _requests(_app(tmp_path), ("GET", "/boom"))
    err = assert_error(r, 500, "internal_error")
    assert "secret" not in r.text and "Traceback" not in r.text
    assert err["detail"] == {"type": "RuntimeError"}


def test_unknown_route_and_wrong_method(tmp_path: Path) -> None:
    missing, wrong, health = _requests(
        _app(tmp_path), ("GET", "/v1/nothing-here"), ("DELETE", "/v1/experiments"),
        ("GET", "/healthz"),
    )
    err = assert_error(missing, 404, "not_found")
    assert "/v1/nothing-here" in err["message"]
    err = assert_error(wrong, 405, "method_not_allowed")
    assert "DELETE" in err["message"]
    assert health.status_code == 200
