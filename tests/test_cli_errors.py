"""Every command maps every error it can meet to one line on standard error and exit status 2.

Real processes (``python -m app.cli``), so what the user sees is what is checked: no traceback,
one ``landlift: error: ...`` line naming the problem, exit status 2.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


def _run(*args: str, env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
    base = {k: v for k, v in os.environ.items() if not k.startswith("LANDLIFT_")}
    return subprocess.run(
        [sys.executable, "-m", "app.cli", *args], cwd=REPO, env={**base, **(env or {})},
        capture_output=True, text=True, timeout=180,
    )


def _one_line_error(proc: subprocess.CompletedProcess[str], *fragments: str) -> str:
    assert proc.returncode == 2, (proc.returncode, proc.stderr)
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert "Traceback" not in proc.stderr, proc.stderr
    assert len(lines) == 1 and lines[0].startswith("landlift: error: "), proc.stderr
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])
    return lines[0]


@pytest.mark.parametrize(
    ("args", "env", "fragments"),
    [
        # a bad setting names the variable
        (["token", "list"], {"LANDLIFT_MAX_ATTEMPTS": "0"}, ("max_attempts",)),
        (["score", "--realistic", "r.nc", "--scrambled", "s.nc", "--observations", "o.nc",
          "--out", "x"], {"LANDLIFT_MEMORY_BUDGET": "lots"}, ("LANDLIFT_MEMORY_BUDGET",)),
        # the database does not answer (nothing listens on port 9)
        (["token", "list", "--database-url", "postgresql+psycopg://nobody@127.0.0.1:9/none"], {},
         ("OperationalError",)),
        # the data folder cannot be made (a file stands where the folder should be)
        (["demo", "--data-dir", "/dev/null/landlift"], {}, ("/dev/null/landlift",)),
        # an option out of range, and a file that is not there
        (["score", "--realistic", "r.nc", "--scrambled", "s.nc", "--observations", "o.nc",
          "--resamples", "0", "--out", "x"], {}, ("bootstrap.resamples", "1..10000", "got 0")),
        (["score", "--realistic", "nope.nc", "--scrambled", "s.nc", "--observations", "o.nc",
          "--out", "x"], {}, ("nope.nc", "does not exist")),
    ],
    ids=["bad-setting", "bad-budget-setting", "database-down", "data-dir-unwritable",
         "option-out-of-range", "missing-file"],
)
def test_commands_fail_in_one_line(args: list[str], env: dict[str, str], fragments: tuple[str, ...]) -> None:
    _one_line_error(_run(*args, env=env), *fragments)


def test_traceback_on_request() -> None:
    proc = _run("--traceback", "token", "list", "--database-url",
                "postgresql+psycopg://nobody@127.0.0.1:9/none")
    assert proc.returncode == 2 and "Traceback" in proc.stderr
    assert proc.stderr.strip().splitlines()[-1].startswith("landlift: error: ")
