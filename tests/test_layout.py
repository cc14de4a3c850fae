"""The code's layout holds: one-way layers, no import cycles, unique module names, settings read
in one place.

The layer contracts live in pyproject.toml (``[tool.importlinter]``) and are checked by
import-linter (``lint-imports``, also run by ``make test``); the tests here prove the check can
fail, and check what import-linter does not: cycles (including imports inside functions, which
grimp, import-linter's graph builder, records), duplicate module names and environment reads.
"""

from __future__ import annotations

import ast
import shutil
import subprocess
import sys
from collections import Counter
from pathlib import Path

import grimp
import pytest

REPO = Path(__file__).resolve().parents[1]
APP = REPO / "app"
LINT_IMPORTS = Path(sys.executable).with_name("lint-imports")


def _lint(root: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [str(LINT_IMPORTS), "--config", str(root / "pyproject.toml"), "--no-cache"],
        cwd=root, capture_output=True, text=True, timeout=300,
        env={"PYTHONPATH": str(root), "PATH": "/usr/bin:/bin"},
    )


def test_layer_contracts_hold() -> None:
    out = _lint(REPO)
    assert out.returncode == 0, out.stdout + out.stderr
    assert "4 kept, 0 broken" in out.stdout


def test_a_wrong_way_import_breaks_the_layer_contract(tmp_path: Path) -> None:
    root = tmp_path / "copy"
    shutil.copytree(APP, root / "app", ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(REPO / "pyproject.toml", root / "pyproject.toml")
    windows = root / "app" / "cube" / "windows.py"
    # an import inside a function counts too
    windows.write_text(windows.read_text() + "\n\ndef _wrong() -> None:\n    from app.store import Store  # noqa\n")
    out = _lint(root)
    assert out.returncode != 0
    assert "BROKEN" in out.stdout and "app.cube.windows -> app.store" in out.stdout


def _app_graph() -> grimp.ImportGraph:
    return grimp.build_graph("app", include_external_packages=False)


def test_no_import_cycles() -> None:
    graph = _app_graph()
    modules = sorted(graph.modules)
    edges = {m: sorted(graph.find_modules_directly_imported_by(m)) for m in modules}
    state: dict[str, int] = {}
    cycles: list[list[str]] = []

    def visit(m: str, path: list[str]) -> None:
        state[m] = 1
        for n in edges[m]:
            if state.get(n) == 1:
                cycles.append(path[path.index(n):] + [n] if n in path else [m, n])
            elif n not in state:
                visit(n, path + [n])
        state[m] = 2

    for m in modules:
        if m not in state:
            visit(m, [m])
    assert not cycles, f"import cycles: {cycles}"


def test_the_cli_is_a_package_of_commands() -> None:
    graph = _app_graph()
    cli = {m for m in graph.modules if m.startswith("app.cli")}
    assert {"app.cli.main", "app.cli.score", "app.cli.service", "app.cli.demo"} <= cli
    # commands never import each other: main imports them, they import lower layers
    for name in ("app.cli.score", "app.cli.service", "app.cli.demo"):
        assert not {m for m in graph.find_modules_directly_imported_by(name) if m.startswith("app.cli")}


def test_module_names_are_unique() -> None:
    names = Counter(p.stem for p in APP.rglob("*.py") if p.stem not in ("__init__", "__main__"))
    assert [n for n, k in names.items() if k > 1] == []


ENV_WRITERS = {
    # the validation child pins its numeric libraries to one thread (writes, never LANDLIFT_*)
    "app/runs/sandbox.py",
}


def _environment_uses(path: Path) -> list[str]:
    tree = ast.parse(path.read_text())
    found = []
    for node in ast.walk(tree):
        if (
            isinstance(node, ast.Attribute)
            and node.attr in ("environ", "getenv", "environb")
            and isinstance(node.value, ast.Name)
            and node.value.id == "os"
        ):
            found.append(f"os.{node.attr} at line {node.lineno}")
        if isinstance(node, ast.ImportFrom) and node.module == "os" and any(a.name in ("environ", "getenv") for a in node.names):
            found.append(f"from os import ... at line {node.lineno}")
    return found


@pytest.mark.parametrize("path", sorted(APP.rglob("*.py")), ids=lambda p: str(p.relative_to(REPO)))
def test_only_the_settings_class_reads_the_environment(path: Path) -> None:
    rel = str(path.relative_to(REPO))
    uses = _environment_uses(path)
    if rel == "app/settings.py":
        return
    if rel in ENV_WRITERS:
        assert "LANDLIFT_" not in path.read_text(), rel
        return
    assert uses == [], f"{rel} reads the environment: {uses}"


def test_one_code_version_lookup() -> None:
    lookups = sorted(
        str(p.relative_to(REPO)) for p in APP.rglob("*.py")
        if "metadata.version(" in p.read_text() or "from importlib.metadata import version" in p.read_text()
    )
    assert lookups == ["app/provenance.py"]


def test_one_content_checksum() -> None:
    """Dataset and input digests come from app.provenance alone (hashlib elsewhere hashes
    tokens, ETags and result identities, never a dataset's content)."""
    for p in APP.rglob("*.py"):
        text = p.read_text()
        if p.name != "provenance.py":
            assert "rglob(" not in text or "sha256" not in text, p
