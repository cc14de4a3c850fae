"""docker-compose.yml stays true to the CLI and the settings (it cannot run on these machines).

Every ``command`` must be a ``landlift`` subcommand that the real argument parser accepts with
those options; every ``LANDLIFT_*`` variable must be a field of the one Settings class and the
whole environment must validate; the API, workers and migration share the database URL and the
data volume; the API's published port is the one it serves on.
"""

from __future__ import annotations

import re
import shlex
from pathlib import Path
from typing import Any

import pytest
import yaml

from app.cli.main import build_parser
from app.settings import Settings

COMPOSE = Path(__file__).resolve().parents[2] / "docker-compose.yml"
_SUBST = re.compile(r"\$\{(\w+)(?::?[-?][^}]*)?\}")


@pytest.fixture(scope="module")
def compose() -> dict[str, Any]:
    assert COMPOSE.is_file(), f"{COMPOSE} is missing"
    return yaml.safe_load(COMPOSE.read_text())


def _command(service: dict[str, Any]) -> list[str]:
    cmd = service["command"]
    return shlex.split(cmd) if isinstance(cmd, str) else [str(c) for c in cmd]


def _substituted(value: Any) -> str:
    return _SUBST.sub("placeholder", str(value))


def test_commands_are_landlift_subcommands(compose: dict[str, Any]) -> None:
    parser = build_parser()
    seen: dict[str, list[str]] = {}
    for name, service in compose["services"].items():
        if "command" not in service:
            continue
        argv = _command(service)
        if argv[0] == "dask":
            continue  # checked by test_dask_services
        assert argv[0] == "landlift", f"service {name} runs {argv[0]!r}, not landlift"
        try:
            args = parser.parse_args(argv[1:])
        except SystemExit as exc:  # argparse refuses unknown commands and options
            pytest.fail(f"service {name}: `{' '.join(argv)}` is not a valid landlift command "
                        f"(exit {exc.code})")
        assert callable(args.func), name
        seen[name] = argv[1:]
    assert seen["api"][0] == "serve" and seen["worker"][0] == "worker"
    assert seen["migrate"][:2] == ["db", "upgrade"]
    assert {"db", "api", "worker", "migrate"} <= set(compose["services"])
    assert compose["services"]["db"]["image"].startswith("postgres")


def test_environment_matches_settings(compose: dict[str, Any]) -> None:
    fields = set(Settings.model_fields)
    envs = {}
    for name, service in compose["services"].items():
        env = service.get("environment") or {}
        landlift = {k: v for k, v in env.items() if k.startswith("LANDLIFT_")}
        for key in landlift:
            assert key.removeprefix("LANDLIFT_").lower() in fields, (
                f"service {name}: {key} is not a setting; settings are "
                f"{sorted('LANDLIFT_' + f.upper() for f in fields)}"
            )
        if landlift:
            values = {k.removeprefix("LANDLIFT_").lower(): _substituted(v)
                      for k, v in landlift.items()}
            settings = Settings(**values)  # validates sizes, URLs, lease vs heartbeat
            assert not settings.is_sqlite, f"service {name} must use the shared PostgreSQL"
            envs[name] = landlift
    assert envs["api"] == envs["worker"] == envs["migrate"]
    url = envs["api"]["LANDLIFT_DATABASE_URL"]
    assert "@db:5432/" in url and url.startswith("postgresql+psycopg://")
    db_env = compose["services"]["db"]["environment"]
    assert url.split("@db:5432/")[1] == db_env["POSTGRES_DB"]
    assert url.split("://")[1].split(":")[0] == db_env["POSTGRES_USER"]


def test_api_port_and_shared_volumes(compose: dict[str, Any]) -> None:
    services = compose["services"]
    api_cmd = _command(services["api"])
    port = api_cmd[api_cmd.index("--port") + 1]
    assert any(str(p).split(":")[-1] == port for p in services["api"]["ports"])
    assert api_cmd[api_cmd.index("--host") + 1] == "0.0.0.0"  # reachable from outside the box
    assert "--no-worker" in api_cmd  # jobs run in the worker service
    data_dir = services["api"]["environment"]["LANDLIFT_DATA_DIR"]
    roots = services["api"]["environment"]["LANDLIFT_DATA_ROOTS"]
    for name in ("api", "worker", "migrate"):
        mounts = {str(v).split(":")[1]: str(v).split(":")[0] for v in services[name]["volumes"]}
        assert data_dir in mounts, f"{name} does not mount the data volume at {data_dir}"
        assert roots in mounts, f"{name} does not mount the data roots at {roots}"
    assert services["api"]["volumes"] == services["worker"]["volumes"]
    assert "/healthz" in " ".join(services["api"]["healthcheck"]["test"])


def test_dask_services(compose: dict[str, Any]) -> None:
    """The scheduler the workers name is the one compose starts; dask workers see the data."""
    import shutil
    import subprocess
    import sys

    services = compose["services"]
    scheduler = _command(services["dask-scheduler"])
    worker = _command(services["dask-worker"])
    assert scheduler[:2] == ["dask", "scheduler"] and worker[:2] == ["dask", "worker"]
    port = scheduler[scheduler.index("--port") + 1]
    address = f"tcp://dask-scheduler:{port}"
    assert worker[2] == address
    assert services["worker"]["environment"]["LANDLIFT_DASK_SCHEDULER"] == address
    assert services["dask-worker"]["volumes"] == services["worker"]["volumes"]
    # both commands exist in the installed distributed package and accept these options
    dask = shutil.which("dask", path=str(Path(sys.executable).parent))
    assert dask is not None, "the dask command of distributed is not installed"
    for argv in (scheduler, worker):
        flags = [a for a in argv[2:] if a.startswith("--")]
        helptext = subprocess.run([dask, argv[1], "--help"], capture_output=True, text=True, timeout=60).stdout
        for flag in flags:
            assert flag in helptext, f"`dask {argv[1]}` has no option {flag}"
