"""Content-addressed artifact store on a local or shared volume.

A file is written to a temporary name under ``ROOT/tmp``, hashed (SHA-256) while it is written,
flushed and fsynced, then renamed to ``ROOT/objects/ab/cd/<sha256>`` and the folder fsynced.
The rename is atomic, so a reader sees either no file or the whole file; a database row may point
at an artifact only after :meth:`ArtifactWriter.commit` has returned (see
``app.store.common.record_artifact``). Identical content lands on the same name, so two workers
storing the same result simply agree.
"""

from __future__ import annotations

import os
import re
import shutil
import tempfile
import time
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from types import TracebackType
from typing import BinaryIO

from app.errors import NotFoundError, TooLargeError
from app.provenance import ContentHasher, content_sha256

_HEX64 = re.compile(r"^[0-9a-f]{64}$")
CHUNK = 1024 * 1024


class ArtifactTooLarge(TooLargeError):
    """More bytes than the cap were written."""

    code = "too_large"


@dataclass(frozen=True)
class ArtifactRef:
    """A whole file in the store."""

    sha256: str
    size_bytes: int
    path: Path
    media_type: str = "application/octet-stream"


def _fsync_dir(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


class ArtifactWriter:
    """Streams bytes to a temporary file while hashing them; :meth:`commit` publishes it.

    Use as a context manager: leaving the block without ``commit()`` removes the temporary file.
    ``temp_path`` may be read (e.g. by a validation process) after :meth:`finish` and before
    :meth:`commit`.
    """

    def __init__(self, store: ArtifactStore, *, media_type: str, max_bytes: int | None) -> None:
        self._store = store
        self.media_type = media_type
        self.max_bytes = max_bytes
        fd, name = tempfile.mkstemp(prefix="part-", dir=store.tmp_dir)
        self.temp_path = Path(name)
        self._file: BinaryIO | None = os.fdopen(fd, "wb")
        self._hash = ContentHasher()
        self.size_bytes = 0
        self._sha256: str | None = None
        self._done = False
        self._committed = False

    def write(self, chunk: bytes) -> None:
        if self._file is None:
            raise RuntimeError("artifact writer is already finished")
        self.size_bytes += len(chunk)
        if self.max_bytes is not None and self.size_bytes > self.max_bytes:
            self.abort()
            raise ArtifactTooLarge(
                f"more than {self.max_bytes} bytes: the limit is {self.max_bytes}",
                limit=self.max_bytes,
            )
        self._hash.update(chunk)
        self._file.write(chunk)

    def finish(self) -> str:
        """Flush and fsync the temporary file; return the SHA-256 hex digest."""
        if self._file is not None:
            self._file.flush()
            os.fsync(self._file.fileno())
            self._file.close()
            self._file = None
            self._sha256 = self._hash.hexdigest()
        assert self._sha256 is not None
        return self._sha256

    @property
    def sha256(self) -> str:
        return self.finish()

    def commit(self) -> ArtifactRef:
        """Publish the file under its content address (atomic rename) and return its ref."""
        if self._done:
            raise RuntimeError("artifact writer already committed or aborted")
        sha = self.finish()
        target = self._store.path_for(sha)
        target.parent.mkdir(parents=True, exist_ok=True)
        if target.exists() and target.stat().st_size == self.size_bytes:
            self.temp_path.unlink(missing_ok=True)
        else:
            os.chmod(self.temp_path, 0o644)
            os.replace(self.temp_path, target)
            _fsync_dir(target.parent)
        self._done = True
        self._committed = True
        return ArtifactRef(sha, self.size_bytes, target, self.media_type)

    def abort(self) -> None:
        """Remove the temporary file (a no-op once committed)."""
        if self._committed:
            return
        if self._file is not None:
            self._file.close()
            self._file = None
        self.temp_path.unlink(missing_ok=True)
        self._done = True

    def __enter__(self) -> ArtifactWriter:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if not self._done:
            self.abort()


class ArtifactStore:
    """Files by SHA-256 under ``root`` (``root/objects`` and ``root/tmp``)."""

    def __init__(self, root: str | os.PathLike[str]) -> None:
        self.root = Path(root).expanduser().resolve()
        self.objects_dir = self.root / "objects"
        self.tmp_dir = self.root / "tmp"
        self.objects_dir.mkdir(parents=True, exist_ok=True)
        self.tmp_dir.mkdir(parents=True, exist_ok=True)

    def path_for(self, sha256: str) -> Path:
        if not _HEX64.match(sha256):
            raise NotFoundError(f"artifact {sha256!r} is not a SHA-256 hex digest", sha256=sha256)
        return self.objects_dir / sha256[:2] / sha256[2:4] / sha256

    def exists(self, sha256: str) -> bool:
        return self.path_for(sha256).is_file()

    def path(self, sha256: str) -> Path:
        """The path of a stored artifact; NotFoundError when it is not in the store."""
        p = self.path_for(sha256)
        if not p.is_file():
            raise NotFoundError(f"artifact {sha256} is not in the store", sha256=sha256)
        return p

    def read_bytes(self, sha256: str) -> bytes:
        return self.path(sha256).read_bytes()

    def open_writer(
        self, *, media_type: str = "application/octet-stream", max_bytes: int | None = None
    ) -> ArtifactWriter:
        return ArtifactWriter(self, media_type=media_type, max_bytes=max_bytes)

    def put_bytes(self, data: bytes, *, media_type: str = "application/octet-stream") -> ArtifactRef:
        with self.open_writer(media_type=media_type) as writer:
            writer.write(data)
            return writer.commit()

    def put_chunks(
        self,
        chunks: Iterable[bytes],
        *,
        media_type: str = "application/octet-stream",
        max_bytes: int | None = None,
    ) -> ArtifactRef:
        with self.open_writer(media_type=media_type, max_bytes=max_bytes) as writer:
            for chunk in chunks:
                writer.write(chunk)
            return writer.commit()

    def put_file(
        self, source: str | os.PathLike[str], *, media_type: str = "application/octet-stream"
    ) -> ArtifactRef:
        """Copy a file into the store (streamed, never loaded whole)."""
        with open(source, "rb") as fh, self.open_writer(media_type=media_type) as writer:
            while chunk := fh.read(CHUNK):
                writer.write(chunk)
            return writer.commit()

    def verify(self, sha256: str) -> bool:
        """Re-hash a stored file and compare with its name."""
        p = self.path_for(sha256)
        return p.is_file() and content_sha256(p) == sha256

    def sweep_temp(self, *, older_than_seconds: float = 24 * 3600) -> int:
        """Remove abandoned temporary files (from killed processes); return how many."""
        cutoff = time.time() - older_than_seconds
        removed = 0
        for entry in self.tmp_dir.iterdir():
            try:
                if entry.stat().st_mtime < cutoff:
                    if entry.is_dir():
                        shutil.rmtree(entry, ignore_errors=True)
                    else:
                        entry.unlink(missing_ok=True)
                    removed += 1
            except FileNotFoundError:
                continue
        return removed

    def temp_dir(self) -> Path:
        """A fresh private folder under ``tmp`` on the store's filesystem (caller removes it)."""
        return Path(tempfile.mkdtemp(prefix="work-", dir=self.tmp_dir))
