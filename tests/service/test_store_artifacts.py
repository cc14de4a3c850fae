"""Content-addressed artifact store: whole files only, atomic publication, rows after files."""

from __future__ import annotations

import hashlib
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from sqlalchemy import func, select

from app.errors import NotFoundError
from app.store import Store, common, derived_files
from app.store.artifacts import ArtifactRef, ArtifactStore, ArtifactTooLarge
from app.store.models import Artifact

REPO_ROOT = Path(__file__).resolve().parents[2]


def _objects(store: ArtifactStore) -> list[Path]:
    return sorted(p for p in store.objects_dir.rglob("*") if p.is_file())


def test_put_bytes_is_addressed_by_sha256(tmp_path: Path) -> None:
    store = ArtifactStore(tmp_path / "a")
    data = b"soil moisture anomaly" * 1000
    ref = store.put_bytes(data, media_type="text/plain")
    expected = hashlib.sha256(data).hexdigest()  # the standard library as the reference
    assert ref.sha256 == expected
    assert ref.size_bytes == len(data)
    assert ref.path == store.objects_dir / expected[:2] / expected[2:4] / expected
    assert ref.path.read_bytes() == data
    assert store.verify(expected)
    again = store.put_bytes(data)
    assert again.path == ref.path
    assert _objects(store) == [ref.path]
    assert list(store.tmp_dir.iterdir()) == []


def test_put_file_streams_a_copy(tmp_path: Path) -> None:
    source = tmp_path / "in.bin"
    source.write_bytes(os.urandom(3 * 1024 * 1024 + 17))
    store = ArtifactStore(tmp_path / "a")
    ref = store.put_file(source)
    assert ref.sha256 == hashlib.sha256(source.read_bytes()).hexdigest()
    assert ref.path.read_bytes() == source.read_bytes()


def test_writer_publishes_only_on_commit(tmp_path: Path) -> None:
    store = ArtifactStore(tmp_path / "a")
    with store.open_writer() as writer:
        writer.write(b"part one,")
        writer.write(b"part two")
        assert _objects(store) == []
        assert writer.temp_path.parent == store.tmp_dir
        sha = writer.finish()
        assert writer.temp_path.read_bytes() == b"part one,part two"
        ref = writer.commit()
    assert sha == hashlib.sha256(b"part one,part two").hexdigest() == ref.sha256
    assert _objects(store) == [ref.path]
    assert list(store.tmp_dir.iterdir()) == []


def test_writer_left_without_commit_leaves_nothing(tmp_path: Path) -> None:
    store = ArtifactStore(tmp_path / "a")
    with pytest.raises(RuntimeError), store.open_writer() as writer:
        writer.write(b"half a file")
        raise RuntimeError("client went away")
    assert _objects(store) == []
    assert list(store.tmp_dir.iterdir()) == []


def test_writer_cap(tmp_path: Path) -> None:
    store = ArtifactStore(tmp_path / "a")
    with store.open_writer(max_bytes=10) as writer:
        writer.write(b"x" * 10)
        with pytest.raises(ArtifactTooLarge) as info:
            writer.write(b"y")
    assert info.value.http_status == 413
    assert info.value.detail == {"limit": 10}
    assert _objects(store) == []
    assert list(store.tmp_dir.iterdir()) == []


@pytest.mark.parametrize("bad", ["../../etc/passwd", "ab" * 31, "G" * 64, ""])
def test_names_must_be_sha256(tmp_path: Path, bad: str) -> None:
    store = ArtifactStore(tmp_path / "a")
    with pytest.raises(NotFoundError):
        store.path_for(bad)


def test_verify_notices_a_changed_file(tmp_path: Path) -> None:
    store = ArtifactStore(tmp_path / "a")
    ref = store.put_bytes(b"original")
    ref.path.write_bytes(b"tampered")
    assert not store.verify(ref.sha256)
    assert not store.verify("0" * 64)


WRITER = """
import sys, time
from app.store.artifacts import ArtifactStore
store = ArtifactStore(sys.argv[1])
w = store.open_writer()
for i in range(10_000):
    w.write(b"z" * 65536)
    if i == 5:
        print(w.temp_path, flush=True)
    time.sleep(0.01)
w.commit()
"""


def test_killed_writer_leaves_no_object(tmp_path: Path) -> None:
    root = tmp_path / "a"
    proc = subprocess.Popen(
        [sys.executable, "-c", WRITER, str(root)], cwd=REPO_ROOT, stdout=subprocess.PIPE, text=True
    )
    assert proc.stdout is not None
    temp = Path(proc.stdout.readline().strip())
    time.sleep(0.2)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=10)
    store = ArtifactStore(root)
    assert temp.exists() and temp.parent == store.tmp_dir
    assert _objects(store) == []
    assert store.sweep_temp(older_than_seconds=0) == 1
    assert list(store.tmp_dir.iterdir()) == []


def _artifact_rows(store: Store) -> int:
    with store.db.read() as session:
        return int(session.scalar(select(func.count()).select_from(Artifact)) or 0)


def test_rows_only_for_whole_files(store: Store) -> None:
    ref = store.artifacts.put_bytes(b"a whole file")
    missing = ArtifactRef("1" * 64, 5, store.artifacts.path_for("1" * 64))
    partial = ArtifactRef(ref.sha256, ref.size_bytes + 100, ref.path)
    for bad in (missing, partial):
        with pytest.raises(RuntimeError), store.db.write() as session:
            common.record_artifact(session, bad)
    assert _artifact_rows(store) == 0
    with store.db.write() as session:
        common.record_artifact(session, ref)
        common.record_artifact(session, ref)  # recording twice is harmless
    assert _artifact_rows(store) == 1


def test_cached_derived_files(store: Store) -> None:
    key = "digest:skill:all:acc_of_region_mean.png"
    assert derived_files.get_cached(store, key) is None
    png = b"\x89PNG\r\n\x1a\n" + b"0" * 100
    path = derived_files.put_cached(store, key, png, media_type="image/png")
    assert path.read_bytes() == png
    assert derived_files.get_cached(store, key) == (path, "image/png")
    # the first stored picture wins; a second render under the same key is not recorded
    derived_files.put_cached(store, key, png + b"1", media_type="image/png")
    assert derived_files.get_cached(store, key) == (path, "image/png")
