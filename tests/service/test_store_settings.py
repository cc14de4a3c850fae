"""Settings: environment parsing, size strings, validation messages."""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from pydantic import ValidationError

from app.settings import Settings, parse_size


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # binary prefixes are powers of 1024, decimal ones powers of 1000 (IEC 80000-13)
        ("512MiB", 512 * 1024**2),
        ("2GiB", 2 * 1024**3),
        ("1.5GiB", 3 * 1024**3 // 2),
        ("4 GiB", 4 * 1024**3),
        ("1GB", 10**9),
        ("250kB", 250_000),
        ("1024", 1024),
        (2048, 2048),
        ("3TiB", 3 * 1024**4),
    ],
)
def test_parse_size(text: str | int, expected: int) -> None:
    assert parse_size(text) == expected


@pytest.mark.parametrize("text", ["", "GiB", "2 parsecs", "-1GiB", "0", "1.2.3MB"])
def test_parse_size_rejects(text: str) -> None:
    with pytest.raises(ValueError, match="size"):
        parse_size(text)


def _clear_env(monkeypatch: pytest.MonkeyPatch) -> None:
    for key in list(os.environ):
        if key.startswith("LANDLIFT_"):
            monkeypatch.delenv(key)


def test_defaults(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    _clear_env(monkeypatch)
    monkeypatch.chdir(tmp_path)
    s = Settings()
    assert s.data_dir == Path("landlift-data")
    assert s.url == f"sqlite:///{(tmp_path / 'landlift-data' / 'landlift.db').resolve()}"
    assert s.data_roots == []
    assert s.public_read is False
    assert s.max_upload_bytes == 4 * 1024**3
    assert s.memory_budget is None
    assert s.dask_scheduler is None
    assert s.heartbeat_seconds < s.lease_seconds
    assert s.artifacts_dir == Path("landlift-data") / "artifacts"


def test_environment(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    _clear_env(monkeypatch)
    a, b, c = (tmp_path / n for n in "abc")
    monkeypatch.setenv("LANDLIFT_DATA_DIR", str(tmp_path / "d"))
    monkeypatch.setenv("LANDLIFT_DATA_ROOTS", f"{a}{os.pathsep}{b},{c}")
    monkeypatch.setenv("LANDLIFT_PUBLIC_READ", "true")
    monkeypatch.setenv("LANDLIFT_MAX_UPLOAD_BYTES", "100MiB")
    monkeypatch.setenv("LANDLIFT_MEMORY_BUDGET", "512MiB")
    monkeypatch.setenv("LANDLIFT_DASK_SCHEDULER", "tcp://10.0.0.5:8786")
    monkeypatch.setenv("LANDLIFT_LEASE_SECONDS", "30")
    monkeypatch.setenv("LANDLIFT_HEARTBEAT_SECONDS", "5")
    monkeypatch.setenv("LANDLIFT_MAX_ATTEMPTS", "5")
    monkeypatch.setenv("LANDLIFT_DATABASE_URL", "postgresql+psycopg://u@db:5432/landlift")
    s = Settings()
    assert s.data_dir == tmp_path / "d"
    assert s.data_roots == [a.resolve(), b.resolve(), c.resolve()]
    assert s.public_read is True
    assert s.max_upload_bytes == 100 * 1024**2
    assert s.memory_budget == 512 * 1024**2
    assert s.dask_scheduler == "tcp://10.0.0.5:8786"
    assert (s.lease_seconds, s.heartbeat_seconds, s.max_attempts) == (30.0, 5.0, 5)
    assert s.url == "postgresql+psycopg://u@db:5432/landlift"
    assert not s.is_sqlite


def test_keyword_arguments_win(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.setenv("LANDLIFT_MAX_ATTEMPTS", "9")
    assert Settings(data_dir=tmp_path, max_attempts=2).max_attempts == 2


@pytest.mark.parametrize(
    ("overrides", "message"),
    [
        ({"lease_seconds": 5, "heartbeat_seconds": 5}, "heartbeat_seconds"),
        ({"max_attempts": 0}, "max_attempts"),
        ({"lease_seconds": -1}, "lease_seconds"),
        ({"memory_budget": "lots"}, "memory_budget"),
        ({"database_url": "mysql://x@y/z"}, "database_url"),
        ({"unknown_setting": 1}, "unknown_setting"),
    ],
)
def test_invalid_settings_name_the_value(
    tmp_path: Path, overrides: dict[str, object], message: str
) -> None:
    with pytest.raises(ValidationError, match=message):
        Settings(data_dir=tmp_path, **overrides)


def test_settings_are_frozen(tmp_path: Path) -> None:
    s = Settings(data_dir=tmp_path)
    with pytest.raises(ValidationError):
        s.public_read = True  # type: ignore[misc]
    assert s.model_copy(update={"public_read": True}).public_read is True
