"""The auth matrix over every route of the real server, on SQLite and PostgreSQL.

Credentials: none, a malformed header, an unknown token, a revoked token, and real ``read``,
``write`` and ``admin`` tokens. Expected (issue 3 item 5, DESIGN 5): open routes answer anyone;
under /v1 no token or a bad one is 401, too small a scope is 403, each with the error body; a
large enough scope gets past auth (the request may then fail for its own reasons: fake ids give
404, empty bodies 415/422). The matrix must name every route the server's OpenAPI lists, so a new
route cannot slip in untested. With ``LANDLIFT_PUBLIC_READ=true`` reads need no token, writes do.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import httpx
from api_support import Server, assert_error, running_server

from app.store import Store, token_rows

# (method, path template, concrete path, scope needed or None for open, request kwargs, the
# status once past auth: fake ids give 404, empty bodies 415/422)
ROUTES: list[tuple[str, str, str, str | None, dict[str, Any], int]] = [
    ("GET", "/healthz", "/healthz", None, {}, 200),
    ("GET", "/metrics", "/metrics", None, {}, 200),
    ("GET", "/", "/", None, {}, 200),
    ("GET", "/docs", "/docs", None, {}, 200),
    ("GET", "/openapi.json", "/openapi.json", None, {}, 200),
    ("GET", "/static/dashboard.js", "/static/dashboard.js", None, {}, 200),
    ("GET", "/v1/datasets/{dataset_id}", "/v1/datasets/ds_x", "read", {}, 404),
    ("GET", "/v1/experiments", "/v1/experiments", "read", {}, 200),
    ("GET", "/v1/experiments/{experiment_id}", "/v1/experiments/ex_x", "read", {}, 404),
    ("GET", "/v1/jobs/{job_id}", "/v1/jobs/job_x", "read", {}, 404),
    ("GET", "/v1/experiments/{experiment_id}/skill", "/v1/experiments/ex_x/skill", "read", {}, 404),
    ("GET", "/v1/experiments/{experiment_id}/maps/{window}",
     "/v1/experiments/ex_x/maps/week 1", "read", {}, 404),
    ("GET", "/v1/experiments/{experiment_id}/conditional",
     "/v1/experiments/ex_x/conditional", "read", {}, 404),
    ("GET", "/v1/regions", "/v1/regions", "read", {}, 200),
    ("GET", "/v1/comparisons/{comparison_id}", "/v1/comparisons/cmp_x", "read", {}, 404),
    ("POST", "/v1/datasets", "/v1/datasets", "write", {"json": {}}, 415),
    ("POST", "/v1/datasets/register", "/v1/datasets/register", "write", {"json": {}}, 422),
    ("POST", "/v1/experiments", "/v1/experiments", "write", {"json": {}}, 422),
    ("POST", "/v1/comparisons", "/v1/comparisons", "write", {"json": {}}, 422),
    ("GET", "/v1/tokens", "/v1/tokens", "admin", {}, 200),
    ("POST", "/v1/tokens", "/v1/tokens", "admin", {"json": {}}, 422),
    ("DELETE", "/v1/tokens/{token_id}", "/v1/tokens/tok_x", "admin", {}, 404),
]
RANK = {"read": 0, "write": 1, "admin": 2}


def _send(server: Server, method: str, path: str, headers: dict[str, str],
          kwargs: dict[str, Any]) -> httpx.Response:
    with httpx.Client(base_url=server.base_url, timeout=60.0) as c:
        return c.request(method, path, headers=headers, **kwargs)


def _check_route_coverage(server: Server) -> None:
    spec = httpx.get(server.base_url + "/openapi.json").json()
    listed = {(m.upper(), p) for p, ops in spec["paths"].items() for m in ops}
    covered = {(m, t) for m, t, *_ in ROUTES}
    missing = listed - covered
    assert not missing, f"routes without an auth check in the matrix: {sorted(missing)}"


def test_auth_matrix(settings_env: dict[str, str], store: Store, make_token: Any,
                     tmp_path: Path) -> None:
    tokens = {scope: make_token(scope) for scope in ("read", "write", "admin")}
    revoked, info = token_rows.create_token(store, name="gone", scope="admin")
    token_rows.revoke_token(store, info["id"])
    bad = {
        "no token": {},
        "malformed header": {"Authorization": "Basic dXNlcjpwYXNz"},
        "bearer without token": {"Authorization": "Bearer"},
        "unknown token": {"Authorization": "Bearer ll_" + "A" * 43},
        "not a landlift token": {"Authorization": "Bearer hunter2"},
        "revoked token": {"Authorization": f"Bearer {revoked}"},
    }
    with running_server(settings_env, log_dir=tmp_path / "logs", with_worker=False) as srv:
        _check_route_coverage(srv)
        checked = 0
        for method, _template, path, needed, kwargs, expected in ROUTES:
            if needed is None:
                for what, headers in bad.items():
                    r = _send(srv, method, path, headers, kwargs)
                    assert r.status_code == 200, (method, path, what, r.status_code)
                    checked += 1
                continue
            for what, headers in bad.items():
                r = _send(srv, method, path, headers, kwargs)
                err = assert_error(r, 401, ("unauthorized", "invalid_token"))
                assert r.headers["www-authenticate"].startswith("Bearer"), (method, path, what)
                assert "token" in err["message"] or "Bearer" in err["message"]
                checked += 1
            for scope, token in tokens.items():
                r = _send(srv, method, path, {"Authorization": f"Bearer {token}"}, kwargs)
                if RANK[scope] < RANK[needed]:
                    err = assert_error(r, 403, "forbidden")
                    assert err["detail"] == {"required_scope": needed, "token_scope": scope}
                else:
                    assert r.status_code == expected, (method, path, scope, r.text)
                checked += 1
        assert checked == 6 * 6 + 16 * 9

        # admin manages tokens over HTTP; a revoked token stops working at once
        admin = srv.client(tokens["admin"])
        r = admin.post("/v1/tokens", json={"name": "dashboard", "scope": "read"})
        assert r.status_code == 201, r.text
        made = r.json()
        assert made["scope"] == "read" and made["token"].startswith(made["prefix"])
        viewer = srv.client(made["token"])
        assert viewer.get("/v1/experiments").status_code == 200
        listed = admin.get("/v1/tokens").json()
        assert made["id"] in {t["id"] for t in listed}
        assert all("token" not in t and "token_hash" not in t for t in listed)
        assert admin.delete(f"/v1/tokens/{made['id']}").status_code == 200
        assert_error(viewer.get("/v1/experiments"), 401, "invalid_token")
    log = srv.log()
    for token in (*tokens.values(), revoked, made["token"]):
        assert token not in log


def test_public_read(settings_env: dict[str, str], store: Store, make_token: Any,
                     tmp_path: Path) -> None:
    write = make_token("write")
    extra = {"LANDLIFT_PUBLIC_READ": "true"}
    with running_server(settings_env, log_dir=tmp_path / "logs", extra_env=extra,
                        with_worker=False) as srv:
        for method, _template, path, needed, kwargs, expected in ROUTES:
            r = _send(srv, method, path, {}, kwargs)
            if needed in (None, "read"):
                assert r.status_code == expected, (method, path, r.text)
            else:
                assert_error(r, 401, "unauthorized")
        # a token that is sent must still be valid, even for a public read
        assert_error(_send(srv, "GET", "/v1/experiments",
                           {"Authorization": "Bearer ll_" + "B" * 43}, {}), 401, "invalid_token")
        r = _send(srv, "GET", "/v1/tokens", {"Authorization": f"Bearer {write}"}, {})
        assert_error(r, 403, "forbidden")
