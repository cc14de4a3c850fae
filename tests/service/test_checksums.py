"""One checksum, whatever path a dataset takes: HTTP upload, registration, ``landlift score``.

A result's provenance names its inputs by SHA-256; the dataset rows are keyed by the same
digest, so a result can always be matched to its datasets. Checked for a NetCDF file (against
hashlib over the bytes) and for a Zarr directory store (against an independent rendering of the
rule in app.provenance: sorted relative paths, each path + NUL + bytes + NUL).
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest
import xarray as xr

from app.cli.main import main
from app.provenance import content_sha256
from app.runs.admission import ingest_file, register_path
from app.settings import Settings
from app.store import Store


def _zarr_digest(root: Path) -> str:
    """The directory-store rule written out again, independently of app.provenance."""
    h = hashlib.sha256()
    for member in sorted(p for p in root.rglob("*") if p.is_file()):
        h.update(member.relative_to(root).as_posix().encode() + b"\0" + member.read_bytes() + b"\0")
    return h.hexdigest()


@pytest.fixture
def roots(tmp_path: Path, sample_files: dict[str, Path]) -> Path:
    root = tmp_path / "registered"
    root.mkdir()
    for slot in ("realistic", "scrambled", "land_state"):
        (root / f"{slot}.nc").write_bytes(sample_files[slot].read_bytes())
    with xr.open_dataset(sample_files["observations"]) as ds:
        ds.load().to_zarr(root / "observations.zarr", mode="w")
    return root


def test_every_path_gives_the_same_digest(
    settings: Settings, store: Store, roots: Path, tmp_path: Path
) -> None:
    file, zarr = roots / "realistic.nc", roots / "observations.zarr"
    expected_file = hashlib.sha256(file.read_bytes()).hexdigest()
    expected_zarr = _zarr_digest(zarr)
    assert content_sha256(file) == expected_file and content_sha256(zarr) == expected_zarr

    # the upload path (streamed through the artifact writer's hasher)
    uploaded, created = ingest_file(store, settings, file, role="hindcast")
    assert created and uploaded["sha256"] == expected_file

    # the register path, for the same file and for the Zarr store
    with_roots = settings.model_copy(update={"data_roots": [roots.resolve()]})
    registered, created = register_path(store, with_roots, str(file), role="hindcast")
    assert not created and registered["id"] == uploaded["id"]  # same digest: the same dataset
    store_ds, created = register_path(store, with_roots, str(zarr), role="observations")
    assert created and store_ds["sha256"] == expected_zarr

    # the CLI path: the provenance of `landlift score` names the same digests
    out = tmp_path / "out"
    status = main([
        "score", "--realistic", str(file), "--scrambled", str(roots / "scrambled.nc"),
        "--observations", str(zarr), "--land-state", str(roots / "land_state.nc"),
        "--resamples", "20", "--out", str(out),
    ])
    assert status == 0
    provenance = json.loads((out / "result.json").read_text())["meta"]["provenance"]
    assert provenance["inputs_sha256"]["realistic"] == uploaded["sha256"]
    assert provenance["inputs_sha256"]["observations"] == store_ds["sha256"]
    with xr.open_dataset(out / "maps.nc") as maps:
        assert maps.attrs["input_sha256_observations"] == expected_zarr


def test_a_changed_member_changes_the_store_digest(roots: Path) -> None:
    zarr = roots / "observations.zarr"
    before = content_sha256(zarr)
    member = next(p for p in sorted(zarr.rglob("*")) if p.is_file() and p.name.startswith("0"))
    member.write_bytes(member.read_bytes() + b"\0")
    after = content_sha256(zarr)
    assert after != before and after == _zarr_digest(zarr)
