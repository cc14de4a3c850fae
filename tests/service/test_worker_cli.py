"""The service commands as a user runs them: ``landlift db|token|worker`` in subprocesses."""

from __future__ import annotations

import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import pytest
from run_support import run_options

from app.settings import Settings
from app.store import Store, experiment_rows, job_rows, token_rows
from app.store.migrate import head_revision, upgrade

REPO_ROOT = Path(__file__).resolve().parents[2]


def _landlift(env: dict[str, str], *args: str, timeout: float = 120) -> subprocess.CompletedProcess:
    # the console script's module (app.cli.main) registers these commands from app.cli.service
    return subprocess.run(
        [sys.executable, "-m", "app.cli", *args],
        cwd=REPO_ROOT, env=env, capture_output=True, text=True, timeout=timeout,
    )


def test_db_upgrade_and_current(settings: Settings, settings_env: dict[str, str]) -> None:
    behind = _landlift(settings_env, "db", "current")
    assert behind.returncode == 1 and behind.stdout.startswith("empty")
    up = _landlift(settings_env, "db", "upgrade")
    assert up.returncode == 0, up.stderr
    assert f"revision {head_revision()}" in up.stderr
    now = _landlift(settings_env, "db", "current")
    assert now.returncode == 0 and now.stdout.startswith(head_revision() or "?")


def test_token_create_prints_the_token_alone(
    settings: Settings, settings_env: dict[str, str], backend: str
) -> None:
    if backend == "postgresql":
        refused = _landlift(settings_env, "token", "create", "--scope", "read", "--name", "x")
        assert refused.returncode != 0 and "landlift db upgrade" in refused.stderr
        upgrade(settings.url)
    made = _landlift(settings_env, "token", "create", "--scope", "write", "--name", "ci robot")
    assert made.returncode == 0, made.stderr
    lines = made.stdout.splitlines()
    assert len(lines) == 1 and lines[0] == made.stdout.strip()
    token = lines[0]
    assert token not in made.stderr
    store = Store.open(settings)
    try:
        info = token_rows.verify_token(store, token)
        assert info is not None and (info["scope"], info["name"]) == ("write", "ci robot")
        listed = _landlift(settings_env, "token", "list")
        assert listed.returncode == 0 and info["id"] in listed.stdout
        assert token not in listed.stdout and info["prefix"] in listed.stdout
        revoked = _landlift(settings_env, "token", "revoke", info["id"])
        assert revoked.returncode == 0, revoked.stderr
        assert token_rows.verify_token(store, token) is None
    finally:
        store.close()


def test_token_create_rejects_an_unknown_scope(settings_env: dict[str, str]) -> None:
    bad = _landlift(settings_env, "token", "create", "--scope", "root", "--name", "x")
    assert bad.returncode == 2 and "invalid choice: 'root'" in bad.stderr


def test_worker_command_runs_queued_jobs(
    settings_env: dict[str, str],
    store: Store,
    ingest_sample: Callable[..., dict[str, str]],
) -> None:
    options = run_options(resamples=50, seed=3).dump()
    ids = ingest_sample(("realistic", "scrambled", "observations"))
    exps = [experiment_rows.create_experiment(store, name=f"w{i}", options=options, **ids) for i in range(2)]
    once = _landlift(settings_env, "worker", "--once", "--name", "cli-worker")
    assert once.returncode == 0, once.stderr
    assert "1 job(s) processed" in once.stderr
    assert [job_rows.get_job(store, e["job"]["id"])["status"] for e in exps] == ["done", "queued"]
    drained = _landlift(settings_env, "worker", "--drain")
    assert drained.returncode == 0 and "1 job(s) processed" in drained.stderr
    assert job_rows.get_job(store, exps[1]["job"]["id"])["status"] == "done"
    assert job_rows.job_attempts(store, exps[0]["job"]["id"])[0]["worker"] == "cli-worker"


def test_cli_module_entry(settings_env: dict[str, str]) -> None:
    out = subprocess.run(
        [sys.executable, "-m", "app.cli", "--help"],
        cwd=REPO_ROOT, env=settings_env, capture_output=True, text=True, timeout=60,
    )
    assert out.returncode == 0
    for command in ("serve", "worker", "token", "db"):
        assert command in out.stdout


@pytest.mark.parametrize("args", [["worker", "--once", "--drain"], ["worker", "--max-jobs", "0"]])
def test_worker_option_errors(settings_env: dict[str, str], args: list[str]) -> None:
    bad = _landlift(settings_env, *args)
    assert bad.returncode == 2
