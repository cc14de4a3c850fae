"""Provenance: checksums of input files and Zarr stores, code version, history line."""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path


def code_version() -> str:
    try:
        return metadata.version("landlift")
    except metadata.PackageNotFoundError:
        return "0+unknown"


def sha256_of(path: str | Path, *, chunk: int = 1 << 20) -> str:
    """SHA-256 of a file's bytes, or of a directory store (relative paths and bytes, sorted)."""
    p = Path(path)
    h = hashlib.sha256()
    files = sorted(f for f in p.rglob("*") if f.is_file()) if p.is_dir() else [p]
    for f in files:
        if p.is_dir():
            h.update(str(f.relative_to(p)).encode() + b"\0")
        with f.open("rb") as fh:
            while block := fh.read(chunk):
                h.update(block)
    return h.hexdigest()


def history_line(action: str) -> str:
    stamp = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    return f"{stamp} landlift {code_version()}: {action}"
