"""Provenance shared by every layer: the code version, content checksums, history lines.

One checksum definition serves every path a dataset can take (HTTP upload, registration,
``landlift score``), so a result's provenance can always be matched to its dataset:

- a file: the SHA-256 of its bytes (:class:`ContentHasher` computes the same digest while an
  upload streams in);
- a directory store (Zarr): the SHA-256 over its regular files in sorted relative-path order,
  each contributing ``relative/path`` + NUL + its bytes + NUL.
"""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path

CHUNK = 1 << 20


def code_version() -> str:
    """The installed landlift version (``0+unknown`` when run from an uninstalled tree)."""
    try:
        return metadata.version("landlift")
    except metadata.PackageNotFoundError:
        return "0+unknown"


class ContentHasher:
    """The file digest of :func:`content_sha256`, fed chunk by chunk (for streamed uploads)."""

    def __init__(self) -> None:
        self._hash = hashlib.sha256()

    def update(self, chunk: bytes) -> None:
        self._hash.update(chunk)

    def hexdigest(self) -> str:
        return self._hash.hexdigest()


def store_members(path: Path) -> list[Path]:
    """The files of a directory store (links followed, as a reader follows them), in the order
    the checksum takes them."""
    return sorted(p for p in path.rglob("*") if p.is_file())


def content_sha256(path: str | Path) -> str:
    """SHA-256 of a file or a directory store (see the module docstring)."""
    p = Path(path)
    if p.is_dir():
        digest = hashlib.sha256()
        for member in store_members(p):
            digest.update(member.relative_to(p).as_posix().encode("utf-8") + b"\0")
            with member.open("rb") as fh:
                while block := fh.read(CHUNK):
                    digest.update(block)
            digest.update(b"\0")
        return digest.hexdigest()
    hasher = ContentHasher()
    with p.open("rb") as fh:
        while block := fh.read(CHUNK):
            hasher.update(block)
    return hasher.hexdigest()


def content_size(path: str | Path) -> int:
    """Bytes of a file, or of the regular files of a directory store."""
    p = Path(path)
    if p.is_dir():
        return int(sum(m.stat().st_size for m in store_members(p)))
    return int(p.stat().st_size)


def history_line(action: str) -> str:
    """A CF ``history`` line: UTC time stamp, program and version, what was done."""
    stamp = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    return f"{stamp} landlift {code_version()}: {action}"
