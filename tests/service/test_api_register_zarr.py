"""Registered Zarr stores through the service (issue 4, item 2).

The sample scenario is converted to Zarr directory stores under a data root, registered with
``POST /v1/datasets/register`` (no copy), scored by the server's worker, and the curve equals
the one from the NetCDF files scored offline by the engine with the same seed (to the float32
precision of the stored hindcasts).
"""

from __future__ import annotations

from pathlib import Path

import pytest
import xarray as xr
from api_support import running_server, wait_for_job
from run_support import run_options

from app.runs.scoring import score_files
from app.settings import Settings

ROLES = {"realistic": "hindcast", "scrambled": "hindcast", "observations": "observations", "land_state": "land_state"}


def _to_zarr(src: Path, dest: Path) -> None:
    ds = xr.open_dataset(src, decode_timedelta=False)
    for v in ds.variables:
        keep = {"dtype", "scale_factor", "add_offset", "_FillValue", "units", "calendar"}
        ds[v].encoding = {k: val for k, val in ds[v].encoding.items() if k in keep}
    ds.to_zarr(dest, mode="w")
    ds.close()


def test_registered_zarr_stores_score_like_netcdf(
    settings: Settings, settings_env: dict[str, str], sample_files: dict[str, Path],
    make_token, tmp_path: Path,
) -> None:
    roots = settings.data_roots[0]
    for slot in ROLES:
        _to_zarr(sample_files[slot], roots / f"{slot}.zarr")
    token = make_token("write")
    with running_server(settings_env, log_dir=tmp_path / "logs") as srv, srv.client(token) as c:
        ids = {}
        for slot, role in ROLES.items():
            r = c.post("/v1/datasets/register", json={"uri": str(roots / f"{slot}.zarr"), "role": role})
            assert r.status_code == 201, r.text
            body = r.json()
            assert body["source"] == "register" and body["role"] == role
            ids[slot] = body["id"]
        again = c.post("/v1/datasets/register", json={"uri": str(roots / "realistic.zarr"), "role": "hindcast"})
        assert again.status_code == 200 and again.json()["id"] == ids["realistic"]
        r = c.post("/v1/experiments", json={"name": "zarr", "variable": "tas", **ids,
                                            "bootstrap": {"resamples": 60, "seed": 5}})
        assert r.status_code == 202, r.text
        job = wait_for_job(c, r.json()["job"]["id"])
        assert job["status"] == "done", job
        curve = c.get(f"/v1/experiments/{r.json()['id']}/skill").json()
    offline = score_files(
        sample_files["realistic"], sample_files["scrambled"], sample_files["observations"],
        sample_files["land_state"], options=run_options(resamples=60, seed=5, variable="tas"),
    ).curve()
    for got, want in zip(curve["windows"], offline["windows"], strict=True):
        assert got["label"] == want["label"] and got["n_samples"] == want["n_samples"]
        for key in ("acc_realistic", "acc_scrambled"):
            assert got[key]["value"] == pytest.approx(want[key]["value"], abs=1e-5)
        assert got["gain"]["value"] == pytest.approx(want["gain"]["value"], abs=1e-5)
