"""The bad inputs of issue 3: each gets a 4xx with the DESIGN error body, the server keeps
serving (``/healthz`` still answers ok), and no row or file is left behind.

"Nothing left behind" is checked on the real database (row counts of every table) and the real
artifact store (every file under objects/ and tmp/) before and after each bad request. Runs on
SQLite and PostgreSQL. The validation child is made to crash (``os.abort()``) and to hang through
the test hook ``LANDLIFT_VALIDATION_FAULT`` (setting ``validation_fault``), acted on only by the child.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import httpx
import pytest
import xarray as xr
from api_support import Server, assert_error, running_server, tree_files, upload
from sqlalchemy import func, select

from app.store import Store
from app.store.models import (
    Artifact,
    CachedArtifact,
    Comparison,
    Dataset,
    Experiment,
    Job,
    ResultFile,
)

CAP = 3_000_000  # bytes: the sample hindcasts (about 2 MB) fit, a 3.5 MB body does not
TABLES = (Artifact, CachedArtifact, Comparison, Dataset, Experiment, Job, ResultFile)


def snapshot(store: Store) -> tuple[dict[str, int], set[str]]:
    """Row counts of every table and every file of the artifact store."""
    with store.db.read() as session:
        counts = {t.__tablename__: int(session.scalar(select(func.count()).select_from(t)) or 0)
                  for t in TABLES}
    return counts, tree_files(store.artifacts.root)


class Checker:
    """Send a bad request; check the error body, the server's health, and no leftovers."""

    def __init__(self, server: Server, store: Store) -> None:
        self.server = server
        self.store = store
        self.checked: list[str] = []

    def __call__(self, what: str, send: Callable[[], httpx.Response], status: int | tuple[int, ...],
                 code: str | tuple[str, ...] | None = None) -> dict[str, Any]:
        before = snapshot(self.store)
        err = assert_error(send(), status, code)
        assert self.server.alive(), f"{what}: the server died\n{self.server.log()}"
        assert self.server.healthy(), f"{what}: /healthz failed after the bad request"
        after = snapshot(self.store)
        assert after == before, f"{what}: left rows or files behind: {before} -> {after}"
        self.checked.append(what)
        print(f"{what}: {err['code']}: {err['message']}")  # shown with -s or on failure
        return err


def _variant(src: Path, out: Path, change: Callable[[xr.Dataset], xr.Dataset]) -> Path:
    with xr.open_dataset(src, decode_times=False) as ds:
        changed = change(ds.load())
        changed.to_netcdf(out)
    return out


def _set_attr(var: str, key: str, value: str) -> Callable[[xr.Dataset], xr.Dataset]:
    def change(ds: xr.Dataset) -> xr.Dataset:
        ds[var].attrs[key] = value
        return ds

    return change


def _shift_lat(ds: xr.Dataset) -> xr.Dataset:
    return ds.assign_coords(lat=ds["lat"] + 1.0)


def _rename_variable(ds: xr.Dataset) -> xr.Dataset:
    out = ds.rename({"tas": "huss"})
    out["huss"].attrs.update(units="1", long_name="near-surface specific humidity")
    return out


def test_bad_inputs_are_refused_cleanly(
    settings_env: dict[str, str],
    settings: Any,
    store: Store,
    make_token: Any,
    sample_files: dict[str, Path],
    tmp_path: Path,
) -> None:
    roots = settings.data_roots[0]
    files = tmp_path / "files"
    files.mkdir()
    not_netcdf = files / "notes.nc"
    not_netcdf.write_text("station,date,tas\nA,2001-05-01,288.1\n")
    empty = files / "empty.nc"
    empty.write_bytes(b"")
    truncated = files / "truncated.nc"
    truncated.write_bytes(sample_files["realistic"].read_bytes()[:400_000])
    classic_truncated = files / "classic_truncated.nc"
    classic_truncated.write_bytes(b"CDF\x01" + b"\x00\x00\x00\x0a" + b"\xff" * 64)
    too_big = files / "too_big.nc"
    too_big.write_bytes(b"CDF\x01" + bytes(3_500_000))
    obs_units = _variant(sample_files["observations"], files / "obs_units.nc",
                         _set_attr("tas", "units", "m"))
    obs_grid = _variant(sample_files["observations"], files / "obs_grid.nc", _shift_lat)
    obs_var = _variant(sample_files["observations"], files / "obs_var.nc", _rename_variable)
    late_starts = _variant(sample_files["realistic"], files / "late_starts.nc",
                           _set_attr("forecast_reference_time", "units", "days since 2061-01-01"))
    inside = roots / "inside_obs.nc"
    inside.write_bytes(sample_files["observations"].read_bytes())
    outside = tmp_path / "outside.nc"
    outside.write_bytes(sample_files["land_state"].read_bytes())
    (roots / "link_out.nc").symlink_to(outside)
    zarr_like = roots / "store.zarr"
    zarr_like.mkdir()
    (zarr_like / ".zgroup").write_text('{"zarr_format": 2}')
    (zarr_like / "escape").symlink_to(tmp_path)

    write = make_token("write")
    env_extra = {"LANDLIFT_MAX_UPLOAD_BYTES": str(CAP)}
    with running_server(settings_env, log_dir=tmp_path / "logs", extra_env=env_extra,
                        with_worker=False) as srv:
        c = srv.client(write)
        check = Checker(srv, store)

        # ---- setup: good datasets (and the crafted ones, each valid on its own) ----
        ids: dict[str, str] = {}
        for key, path, role in (
            ("realistic", sample_files["realistic"], "hindcast"),
            ("scrambled", sample_files["scrambled"], "hindcast"),
            ("observations", sample_files["observations"], "observations"),
            ("land_state", sample_files["land_state"], "land_state"),
            ("obs_units", obs_units, "observations"),
            ("obs_grid", obs_grid, "observations"),
            ("obs_var", obs_var, "observations"),
            ("late_starts", late_starts, "hindcast"),
        ):
            r = upload(c, path, role)
            assert r.status_code == 201, (key, r.text)
            ids[key] = r.json()["id"]
        good = {k: ids[k] for k in ("realistic", "scrambled", "observations", "land_state")}

        def experiment(**changes: Any) -> Callable[[], httpx.Response]:
            body: dict[str, Any] = {"name": "bad", "variable": "tas", **good,
                                    "bootstrap": {"resamples": 10}}
            body.update(changes)
            return lambda: c.post("/v1/experiments", json=body)

        # ---- uploads ----
        check("not NetCDF", lambda: upload(c, not_netcdf, "hindcast"), 422, "not_netcdf")
        check("empty file", lambda: upload(c, empty, "hindcast"), 422, "empty_file")
        err = check("truncated HDF5 file", lambda: upload(c, truncated, "hindcast"), 422,
                    ("invalid_input", "validation_crashed"))
        assert "truncated.nc" in err["message"]
        check("truncated classic file", lambda: upload(c, classic_truncated, "hindcast"), 422,
              ("invalid_input", "validation_crashed"))
        err = check("upload over the cap (Content-Length)", lambda: upload(c, too_big, "hindcast"),
                    413, "payload_too_large")
        assert err["detail"]["max_upload_bytes"] == CAP

        def chunked_over_cap() -> httpx.Response:
            boundary = "landliftboundary"
            head = (f"--{boundary}\r\nContent-Disposition: form-data; name=\"role\"\r\n\r\n"
                    f"hindcast\r\n--{boundary}\r\nContent-Disposition: form-data; name=\"file\"; "
                    f"filename=\"big.nc\"\r\nContent-Type: application/x-netcdf\r\n\r\n").encode()

            def body() -> Any:
                yield head + b"CDF\x01"
                for _ in range(70):  # 70 x 64 KiB = 4.4 MB, no Content-Length: chunked
                    yield bytes(65536)
                yield f"\r\n--{boundary}--\r\n".encode()

            return c.post("/v1/datasets", content=body(),
                          headers={"Content-Type": f"multipart/form-data; boundary={boundary}"})

        check("chunked upload over the cap", chunked_over_cap, 413, "payload_too_large")
        check("unknown role", lambda: upload(c, sample_files["observations"], "forecast"), 422,
              "invalid_request")
        check("same bytes, other role", lambda: upload(c, sample_files["observations"],
                                                        "land_state"), 409, "conflict")
        check("no file part", lambda: c.post("/v1/datasets", files={"role": (None, "hindcast")}),
              422, "invalid_request")
        check("not multipart", lambda: c.post("/v1/datasets", json={"role": "hindcast"}), 415,
              "unsupported_media_type")
        check("observations as hindcast", lambda: upload(c, obs_units, "hindcast"), 409,
              "conflict")

        # ---- experiments ----
        check("wrong role for its slot",
              experiment(realistic=ids["observations"]), 422, "invalid_parameter")
        check("land state in the observations slot",
              experiment(observations=ids["land_state"]), 422, "invalid_parameter")
        err = check("units disagree", experiment(observations=ids["obs_units"]), 422,
                    "invalid_input")
        assert "unit" in err["message"].lower()
        err = check("grids disagree", experiment(observations=ids["obs_grid"]), 422,
                    "invalid_input")
        assert "grid" in err["message"].lower() or "lat" in err["message"].lower()
        check("variable disagrees", experiment(observations=ids["obs_var"]), 422, "invalid_input")
        err = check("init dates do not overlap", experiment(realistic=ids["late_starts"]), 422,
                    "invalid_input")
        check("lead window beyond the hindcast",
              experiment(lead_windows=[{"label": "late", "first_day": 40, "last_day": 60}]),
              422, ("invalid_input", "invalid_parameter"))
        check("unknown dataset id", experiment(scrambled="ds_0000000000000000"), 404, "not_found")
        for resamples in (0, 10001, -5, "many", 2.5):
            check(f"resamples {resamples!r}", experiment(bootstrap={"resamples": resamples}), 422,
                  ("invalid_request", "invalid_parameter"))
        check("confidence 1.5", experiment(bootstrap={"confidence": 1.5}), 422)
        check("unknown region", experiment(regions=["srex:ATLANTIS"]), 404, "not_found")
        check("region naming a file", experiment(regions=["../../etc/regions.geojson"]), 422,
              ("invalid_request", "invalid_parameter"))
        check("unknown field in the body", experiment(colour="red"), 422, "invalid_request")
        check("malformed JSON", lambda: c.post(
            "/v1/experiments", content=b'{"name": "x", "realistic": ',
            headers={"Content-Type": "application/json"}), 400, "malformed_json")
        check("JSON that is not an object", lambda: c.post("/v1/experiments", json=[1, 2]), 422,
              "invalid_request")
        check("missing fields", lambda: c.post("/v1/experiments", json={"name": "x"}), 422,
              "invalid_request")

        # ---- register: data roots only ----
        def register(uri: str, role: str = "observations") -> Callable[[], httpx.Response]:
            return lambda: c.post("/v1/datasets/register", json={"uri": uri, "role": role})

        check("register outside the roots", register(str(outside), "land_state"), 422,
              "path_not_allowed")
        check("register through ..", register(f"{roots}/../outside.nc", "land_state"), 422,
              "path_not_allowed")
        check("register relative ..", register("../outside.nc", "land_state"), 422,
              "path_not_allowed")
        check("register a link out", register(str(roots / "link_out.nc"), "land_state"), 422,
              "path_not_allowed")
        check("register a store with a link out", register(str(zarr_like)), 422,
              "path_not_allowed")
        check("register a URL", register("http://127.0.0.1:9/data.nc"), 422, "path_not_allowed")
        check("register a file URL", register(f"file://{inside}"), 422, "path_not_allowed")
        check("register a missing file", register(str(roots / "missing.nc")), 404, "not_found")

        # ---- unknown ids and not-ready results ----
        for path in ("/v1/datasets/ds_nope", "/v1/experiments/ex_nope", "/v1/jobs/job_nope",
                     "/v1/experiments/ex_nope/skill", "/v1/experiments/ex_nope/conditional",
                     "/v1/experiments/ex_nope/maps/week 1", "/v1/comparisons/cmp_nope"):
            check(f"GET {path}", lambda p=path: c.get(p), 404, "not_found")
        check("compare unknown experiments", lambda: c.post(
            "/v1/comparisons", json={"baseline": "ex_a", "candidate": "ex_b"}), 404, "not_found")

        # ---- positive controls on the same server: the limits accept their bounds ----
        r = upload(c, inside, "observations")
        assert r.status_code == 200 and r.json()["id"] == ids["observations"]
        r = c.post("/v1/datasets/register", json={"uri": "inside_obs.nc", "role": "observations"})
        assert r.status_code == 200, r.text  # same bytes as an uploaded dataset: that one
        queued = []
        for resamples in (1, 10000):
            r = experiment(bootstrap={"resamples": resamples})()
            assert r.status_code == 202, r.text
            queued.append(r.json()["id"])
        check("result of an unfinished job",
              lambda: c.get(f"/v1/experiments/{queued[0]}/skill"), 409, "not_ready")
        check("compare unfinished experiments", lambda: c.post(
            "/v1/comparisons", json={"baseline": queued[0], "candidate": queued[1]}),
            409, "not_ready")
        check("compare an experiment with itself", lambda: c.post(
            "/v1/comparisons", json={"baseline": queued[0], "candidate": queued[0]}),
            422, "invalid_parameter")
        assert len(check.checked) >= 45
    assert not any(p.name.startswith("part-") for p in (store.artifacts.tmp_dir).iterdir())


def _spawned_children(pid: int) -> list[str]:
    """Command lines of the multiprocessing children (spawn_main) of process ``pid``."""
    out = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
            ppid = int(stat.rsplit(")", 1)[1].split()[1])
            cmd = (entry / "cmdline").read_bytes().replace(b"\0", b" ").decode()
        except (OSError, ValueError, IndexError):
            continue
        if ppid == pid and "spawn_main" in cmd:
            out.append(cmd)
    return out


@pytest.mark.parametrize(
    ("fault", "timeout", "code"),
    [("abort", 60.0, "validation_crashed"), ("sleep", 2.0, "validation_timeout")],
)
def test_validation_crash_or_timeout_leaves_server_serving(
    fault: str,
    timeout: float,
    code: str,
    settings_env: dict[str, str],
    store: Store,
    make_token: Any,
    sample_files: dict[str, Path],
    tmp_path: Path,
) -> None:
    token = make_token("write")
    extra = {"LANDLIFT_VALIDATION_FAULT": fault,
             "LANDLIFT_VALIDATION_TIMEOUT_SECONDS": str(timeout)}
    with running_server(settings_env, log_dir=tmp_path / "logs", extra_env=extra,
                        with_worker=False) as srv:
        c = srv.client(token)
        check = Checker(srv, store)
        started = time.monotonic()
        err = check(f"validation {fault}", lambda: upload(c, sample_files["realistic"],
                                                           "hindcast"), 422, code)
        assert err["detail"]["file"] == "realistic.nc"
        if fault == "abort":
            assert err["detail"]["exitcode"] == -6  # SIGABRT
        else:
            assert time.monotonic() - started < timeout + 30
        assert _spawned_children(srv.proc.pid) == []  # the child is gone (killed or dead)
        # the server still does real work afterwards: a second request is answered the same
        check(f"validation {fault} again", lambda: upload(c, sample_files["observations"],
                                                           "observations"), 422, code)
        assert os.getpid() != srv.proc.pid
