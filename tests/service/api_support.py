"""Helpers for the API tests: a real ``landlift serve`` in a subprocess on a free loopback port.

Used by tests/service/test_api_*.py only. The server gets its settings from ``LANDLIFT_*``
environment variables (the ``settings_env`` fixture of conftest.py), its own data dir, and logs
to a file that a failing test prints.
"""

from __future__ import annotations

import contextlib
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import httpx

START_TIMEOUT = 90.0
ERROR_KEYS = {"code", "message", "detail"}


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def landlift_command() -> list[str]:
    script = Path(sys.executable).with_name("landlift")
    return [str(script)] if script.is_file() else [sys.executable, "-m", "app.cli"]


@dataclass
class Server:
    base_url: str
    proc: subprocess.Popen[bytes]
    log_path: Path
    env: dict[str, str]
    clients: list[httpx.Client] = field(default_factory=list)

    def client(
        self, token: str | None = None, *, schema: OpenApiChecker | None = None, **kwargs: Any
    ) -> httpx.Client:
        """An httpx client; with ``schema``, every JSON answer is checked against the app's
        own OpenAPI document as it arrives."""
        headers = {"Authorization": f"Bearer {token}"} if token else {}
        if schema is not None:
            kwargs["event_hooks"] = {"response": [schema.check]}
        c = httpx.Client(base_url=self.base_url, headers=headers, timeout=120.0, **kwargs)
        self.clients.append(c)
        return c

    def log(self) -> str:
        try:
            return self.log_path.read_text(errors="replace")[-20000:]
        except FileNotFoundError:
            return ""

    def alive(self) -> bool:
        return self.proc.poll() is None

    def healthy(self) -> bool:
        try:
            r = httpx.get(self.base_url + "/healthz", timeout=10.0)
        except httpx.HTTPError:
            return False
        return r.status_code == 200 and r.json().get("status") == "ok"

    def stop(self) -> None:
        for c in self.clients:
            c.close()
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)
            try:
                self.proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=10)


def start_server(
    env: dict[str, str], *, log_dir: Path, extra_env: dict[str, str] | None = None,
    with_worker: bool = True,
) -> Server:
    """Start ``landlift serve`` and wait until ``/healthz`` answers ok."""
    port = free_port()
    full_env = {**env, **(extra_env or {})}
    log_dir.mkdir(parents=True, exist_ok=True)
    log_path = log_dir / f"server-{port}.log"
    cmd = [*landlift_command(), "serve", "--host", "127.0.0.1", "--port", str(port)]
    if not with_worker:
        cmd.append("--no-worker")
    with log_path.open("wb") as log:
        proc = subprocess.Popen(
            cmd, env=full_env, stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
            cwd=str(log_dir),
        )
    server = Server(f"http://127.0.0.1:{port}", proc, log_path, full_env)
    deadline = time.monotonic() + START_TIMEOUT
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"server exited with {proc.returncode}:\n{server.log()}")
        if server.healthy():
            return server
        time.sleep(0.2)
    server.stop()
    raise AssertionError(f"server did not become healthy in {START_TIMEOUT} s:\n{server.log()}")


@contextlib.contextmanager
def running_server(
    env: dict[str, str], *, log_dir: Path, extra_env: dict[str, str] | None = None,
    with_worker: bool = True,
) -> Iterator[Server]:
    server = start_server(env, log_dir=log_dir, extra_env=extra_env, with_worker=with_worker)
    try:
        yield server
    except BaseException:
        sys.stderr.write(f"--- server log ({server.log_path}) ---\n{server.log()}\n")
        raise
    finally:
        server.stop()


class OpenApiChecker:
    """Checks responses against the server's own ``/openapi.json``.

    For each JSON answer: the route and method exist in the document, the status code is
    declared for them, and the body validates against the declared schema (JSON Schema 2020-12,
    which OpenAPI 3.1 schemas are, via ``jsonschema``; ``#/components`` references resolve in
    the document). ``seen`` records (method, path template, status) of every checked answer.
    """

    def __init__(self, base_url: str) -> None:
        import re

        self.spec: dict[str, Any] = httpx.get(base_url + "/openapi.json", timeout=30).json()
        self.routes = []
        for template in sorted(self.spec["paths"], key=lambda t: t.count("{")):  # literal first
            pattern = "^" + re.sub(r"\\{[^/]+?\\}", "[^/]+", re.escape(template)) + "$"
            self.routes.append((re.compile(pattern), template))
        self.seen: set[tuple[str, str, int]] = set()

    def template(self, path: str) -> str | None:
        from urllib.parse import unquote

        for pattern, template in self.routes:
            if pattern.match(unquote(path)):
                return template
        return None

    def check(self, response: httpx.Response) -> None:
        import jsonschema

        if not response.headers.get("content-type", "").startswith("application/json"):
            return
        response.read()
        method, path = response.request.method, response.request.url.path
        template = self.template(path)
        assert template is not None, f"{method} {path} is not in the OpenAPI document"
        operation = self.spec["paths"][template].get(method.lower())
        assert operation is not None, f"{method} {template} is not in the OpenAPI document"
        declared = operation["responses"]
        status = str(response.status_code)
        assert status in declared, (
            f"{method} {template} answered {status}, which the document does not declare "
            f"(declared: {sorted(declared)})"
        )
        content = declared[status].get("content", {}).get("application/json")
        assert content and "schema" in content, f"{method} {template} {status}: no JSON schema"
        schema = {**content["schema"], "components": self.spec.get("components", {})}
        try:
            jsonschema.Draft202012Validator(schema).validate(response.json())
        except jsonschema.ValidationError as exc:
            raise AssertionError(f"{method} {template} {status}: {exc.message}") from exc
        self.seen.add((method, template, response.status_code))

    def json_routes(self) -> set[tuple[str, str]]:
        """Every (method, template) with a JSON success answer in the document."""
        out = set()
        for template, ops in self.spec["paths"].items():
            for method, op in ops.items():
                for status, answer in op["responses"].items():
                    if status.startswith("2") and "application/json" in answer.get("content", {}):
                        out.add((method.upper(), template))
        return out


def assert_error(response: httpx.Response, status: int | tuple[int, ...],
                 code: str | tuple[str, ...] | None = None) -> dict[str, Any]:
    """The response is an error with the DESIGN body ``{"error": {"code", "message", "detail"}}``."""
    statuses = (status,) if isinstance(status, int) else status
    assert response.status_code in statuses, (response.status_code, response.text[:2000])
    assert response.headers["content-type"].startswith("application/json"), response.headers
    body = response.json()
    assert set(body) == {"error"}, body
    err = body["error"]
    assert set(err) == ERROR_KEYS, err
    assert isinstance(err["code"], str) and err["code"], err
    assert isinstance(err["message"], str) and err["message"], err
    assert isinstance(err["detail"], dict), err
    if code is not None:
        codes = (code,) if isinstance(code, str) else code
        assert err["code"] in codes, err
    return err


def upload(client: httpx.Client, path: Path, role: str, **fields: str) -> httpx.Response:
    with path.open("rb") as fh:
        return client.post(
            "/v1/datasets",
            files={"file": (path.name, fh, "application/x-netcdf")},
            data={"role": role, **fields},
        )


def wait_for_job(client: httpx.Client, job_id: str, *, timeout: float = 300.0) -> dict[str, Any]:
    """Poll ``/v1/jobs/{id}`` until done or failed; the last job body."""
    deadline = time.monotonic() + timeout
    last: dict[str, Any] = {}
    seen_progress: list[float] = []
    while time.monotonic() < deadline:
        r = client.get(f"/v1/jobs/{job_id}")
        assert r.status_code == 200, r.text
        last = r.json()
        seen_progress.append(float(last["progress"]))
        if last["status"] in ("done", "failed"):
            last["_progress_seen"] = seen_progress
            return last
        time.sleep(0.3)
    raise AssertionError(f"job {job_id} did not finish in {timeout} s: {last}")


def tree_files(root: Path) -> set[str]:
    """Every file under ``root`` (relative names), for before/after leftovers checks."""
    if not root.exists():
        return set()
    return {str(p.relative_to(root)) for p in root.rglob("*") if p.is_file()}
