"""Admitting datasets and experiments: the one path that the API and ``landlift demo`` share.

A file arrives in the artifact store's writer (fsynced under a temporary name, hashed); it is
then checked for emptiness and a NetCDF/HDF5 signature, deduplicated by SHA-256, validated in a
spawned child process with a time and memory limit, and only then renamed into the store and
recorded as a row. Any failure leaves neither a file nor a row.

An experiment is admitted only when its datasets have the roles of their slots and fit
together (variable, units, grid, start dates: the engine's ``check_inputs``); then it is stored
with its score job in one transaction.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

from app.api.errors import ApiError
from app.api.upload import Upload, sniff_format
from app.api.validation import ValidationFailure, validate_file
from app.errors import LandliftError, ParameterError
from app.settings import Settings
from app.store import Store, repo

if TYPE_CHECKING:
    from app.cube.engine import ScoreOptions

NETCDF_MEDIA = "application/x-netcdf"
CHUNK = 1 << 20


def admit_upload(
    store: Store, settings: Settings, upload: Upload, *, role: str, variable: str | None = None
) -> tuple[dict[str, Any], bool]:
    """Validate and publish a received file (blocking); ``(dataset, created)``."""
    shown = upload.filename or "upload"
    if upload.size == 0:
        raise ApiError(422, "empty_file", f"file {shown} is empty", detail={"file": shown})
    if sniff_format(upload.head) is None:
        raise ApiError(
            422,
            "not_netcdf",
            f"file {shown} is not NetCDF: it starts with neither a NetCDF classic "
            "('CDF\\x01', 'CDF\\x02', 'CDF\\x05') nor an HDF5 signature",
            detail={"file": shown, "first_bytes": upload.head[:8].hex()},
        )
    existing = repo.find_dataset(store, upload.sha256)
    if existing is not None:
        if existing["role"] != role:
            raise repo.ConflictError(
                f"these bytes are already dataset {existing['id']} with role "
                f"{existing['role']!r}, not {role!r}",
                dataset=existing["id"],
                role=existing["role"],
            )
        return existing, False
    try:
        description = validate_file(
            upload.path,
            role=role,
            variable=variable,
            timeout=settings.validation_timeout_seconds,
            memory_bytes=settings.validation_memory_bytes,
            display_name=shown,
        )
    except ValidationFailure as exc:
        raise ApiError(exc.status, exc.code, exc.message, detail=exc.detail) from None
    ref = upload.writer.commit()
    return repo.create_dataset(
        store,
        role=role,
        sha256=upload.sha256,
        size_bytes=upload.size,
        description=description,
        source="upload",
        artifact=ref,
        filename=upload.filename,
    )


def ingest_file(
    store: Store, settings: Settings, path: str | Path, *, role: str, variable: str | None = None
) -> tuple[dict[str, Any], bool]:
    """Admit a local file exactly as an upload of its bytes would be admitted."""
    p = Path(path)
    writer = store.artifacts.open_writer(media_type=NETCDF_MEDIA, max_bytes=settings.max_upload_bytes)
    head, size = b"", 0
    with p.open("rb") as fh:
        while block := fh.read(CHUNK):
            if len(head) < 16:
                head += block[: 16 - len(head)]
            writer.write(block)
            size += len(block)
    upload = Upload(writer=writer, size=size, sha256=writer.finish(), head=head, filename=p.name)
    try:
        return admit_upload(store, settings, upload, role=role, variable=variable)
    finally:
        upload.discard()  # no-op once committed


def submit_experiment(
    store: Store,
    *,
    name: str,
    datasets: dict[str, str | None],
    options: ScoreOptions,
    parameters: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Check the slots and the fit of the datasets, then queue the experiment's score job."""
    paths: dict[str, Any] = {}
    names: dict[str, str] = {}
    for slot, dataset_id in datasets.items():
        if dataset_id is None:
            continue
        dataset = repo.get_dataset(store, dataset_id)  # 404 for an unknown id
        expected = repo.SLOT_ROLES[slot]
        if dataset["role"] != expected:
            raise ParameterError(
                f"{slot} dataset {dataset_id!r} has role {dataset['role']!r}; the {slot} slot "
                f"needs a {expected!r} dataset",
                slot=slot,
                dataset=dataset_id,
                role=dataset["role"],
                expected=expected,
            )
        paths[slot] = repo.dataset_path(store, dataset_id)
        shown = dataset.get("filename") or dataset_id
        names[paths[slot].name] = f"{shown} (dataset {dataset_id}, {slot})"
    from app.cube.engine import check_inputs  # the engine's imports are heavy: load on use

    try:
        check_inputs(
            paths["realistic"],
            paths["scrambled"],
            paths["observations"],
            paths.get("land_state"),
            variable=options.variable,
            lead_windows=options.lead_windows,
        )
    except LandliftError as exc:
        raise _renamed(exc, names) from None
    return repo.create_experiment(
        store,
        name=name,
        realistic=datasets["realistic"] or "",
        scrambled=datasets["scrambled"] or "",
        observations=datasets["observations"] or "",
        land_state=datasets.get("land_state"),
        options=options.to_dict(),
        parameters=parameters,
    )


def _renamed(exc: LandliftError, names: dict[str, str]) -> LandliftError:
    """The engine names stored files by their content address: name the datasets instead."""

    def fix(value: Any) -> Any:
        if isinstance(value, str):
            for stored, shown in names.items():
                value = value.replace(stored, shown)
        return value

    exc.message = fix(exc.message)
    exc.detail = {k: fix(v) for k, v in exc.detail.items()}
    exc.args = (exc.message,)
    return exc


