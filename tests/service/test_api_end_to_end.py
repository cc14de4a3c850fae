"""End to end through the real server: upload the sample scenario, score it, read every result.

The server is ``landlift serve`` in a subprocess (uvicorn on a free loopback port, the in-process
worker), on SQLite and on a fresh PostgreSQL database (the ``database_url`` parametrisation of
conftest.py). The numbers are checked against things outside the API: ``landlift score`` run on
the same files with the same seed (the offline path of the engine), hashlib for the dataset
checksums, xarray for the files' contents, matplotlib's PNG reader, regionmask for the region ids.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import subprocess
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import xarray as xr
from api_support import (
    OpenApiChecker,
    assert_error,
    landlift_command,
    running_server,
    tree_files,
    upload,
    wait_for_job,
)

RESAMPLES = 50
SEED = 7
SLOT_ROLES = {
    "realistic": "hindcast",
    "scrambled": "hindcast",
    "observations": "observations",
    "land_state": "land_state",
}


def _score_offline(files: dict[str, Path], out: Path, *, name: str, seed: int, env: dict[str, str]
                   ) -> Path:
    cmd = [
        *landlift_command(), "score",
        "--realistic", str(files["realistic"]),
        "--scrambled", str(files["scrambled"]),
        "--observations", str(files["observations"]),
        "--land-state", str(files["land_state"]),
        "--variable", "tas",
        "--resamples", str(RESAMPLES),
        "--seed", str(seed),
        "--name", name,
        "--out", str(out),
    ]
    done = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-4000:]
    return out


def _experiment_body(ids: dict[str, str], *, name: str, seed: int) -> dict[str, Any]:
    return {
        "name": name,
        "variable": "tas",
        **ids,
        "bootstrap": {"resamples": RESAMPLES, "seed": seed, "confidence": 0.95},
    }


def test_scenario_end_to_end(
    settings_env: dict[str, str],
    settings: Any,
    make_token: Any,
    sample_files: dict[str, Path],
    tmp_path: Path,
    backend: str,
) -> None:
    write_token, read_token = make_token("write"), make_token("read")
    admin_token = make_token("admin")
    roots = {"LANDLIFT_DATA_ROOTS": str(sample_files["realistic"].parent)}
    with running_server(settings_env, log_dir=tmp_path / "logs", extra_env=roots) as srv:
        schema = OpenApiChecker(srv.base_url)  # every JSON answer below is checked against it
        writer = srv.client(write_token, schema=schema)
        reader = srv.client(read_token, schema=schema)

        # -- datasets: 201 new, checksum by hashlib, 200 with the same row for the same bytes --
        ids: dict[str, str] = {}
        for slot, role in SLOT_ROLES.items():
            r = upload(writer, sample_files[slot], role)
            assert r.status_code == 201, r.text
            body = r.json()
            assert body["role"] == role
            assert body["sha256"] == hashlib.sha256(sample_files[slot].read_bytes()).hexdigest()
            assert r.headers["location"] == f"/v1/datasets/{body['id']}"
            ids[slot] = body["id"]
        again = upload(writer, sample_files["realistic"], "hindcast")
        assert again.status_code == 200, again.text
        assert again.json()["id"] == ids["realistic"]

        # -- dataset description against xarray's own reading of the file --
        r = reader.get(f"/v1/datasets/{ids['realistic']}")
        assert r.status_code == 200, r.text
        desc = r.json()
        with xr.open_dataset(sample_files["realistic"]) as ds:
            assert desc["variable"] == "tas" and desc["units"] == ds["tas"].attrs["units"]
            assert desc["members"] == ds.sizes["realization"]
            assert len(desc["init_dates"]) == ds.sizes["forecast_reference_time"]
            assert desc["dims"]["lat"] == ds.sizes["lat"] and desc["dims"]["lon"] == ds.sizes["lon"]
        assert r.headers["etag"] and "max-age" in r.headers["cache-control"]

        # -- experiment: 202 with a queued job, then poll the job to done --
        r = writer.post("/v1/experiments", json=_experiment_body(ids, name="scenario", seed=SEED))
        assert r.status_code == 202, r.text
        exp = r.json()
        assert exp["job"]["status"] in ("queued", "running", "done")
        assert set(exp["job"]) >= {"id", "status"}
        assert r.headers["location"] == f"/v1/experiments/{exp['id']}"
        job = wait_for_job(reader, exp["job"]["id"])
        assert job["status"] == "done", job
        assert job["progress"] == 1.0
        assert all(0.0 <= p <= 1.0 for p in job["_progress_seen"])
        r = reader.get(f"/v1/jobs/{job['id']}")
        assert r.headers["cache-control"] == "private, no-cache"
        assert set(r.json()) >= {"id", "status", "progress", "message", "error"}

        r = reader.get(f"/v1/experiments/{exp['id']}")
        assert r.status_code == 200
        detail = r.json()
        assert detail["status"] == "done"
        assert detail["provenance"]["seed"] == SEED
        assert detail["provenance"]["inputs"]["realistic"]["sha256"] == hashlib.sha256(
            sample_files["realistic"].read_bytes()
        ).hexdigest()
        assert detail["provenance"]["code_version"]
        assert r.headers["cache-control"] == "private, no-cache"

        # -- the skill curve equals the offline `landlift score` for the same inputs and seed --
        offline = _score_offline(
            sample_files, tmp_path / "offline", name=exp["id"], seed=SEED, env=settings_env
        )
        offline_curves = json.loads((offline / "skill.json").read_text())
        r = reader.get(f"/v1/experiments/{exp['id']}/skill")
        assert r.status_code == 200, r.text
        assert r.headers["content-type"].startswith("application/json")
        curve = r.json()
        assert curve == offline_curves[0]
        for key in ("experiment", "variable", "units", "region", "aggregation", "confidence",
                    "resamples", "seed", "windows"):
            assert key in curve
        assert (curve["region"], curve["aggregation"]) == ("all", "acc_of_region_mean")
        assert (curve["resamples"], curve["seed"]) == (RESAMPLES, SEED)
        for w in curve["windows"]:
            assert set(w) >= {"label", "first_day", "last_day", "n_years", "n_samples",
                              "acc_realistic", "acc_scrambled", "gain"}
            assert set(w["gain"]) >= {"value", "low", "high", "p_value"}
            # gain = ACC(realistic) - ACC(scrambled) (DESIGN 3.4), to the JSON's rounding
            assert math.isclose(w["gain"]["value"],
                                w["acc_realistic"]["value"] - w["acc_scrambled"]["value"],
                                abs_tol=2e-6)

        # -- ETag / If-None-Match: 304 with the same ETag and Cache-Control --
        etag, cache = r.headers["etag"], r.headers["cache-control"]
        assert "max-age=" in cache and cache.startswith("private")
        r304 = reader.get(f"/v1/experiments/{exp['id']}/skill", headers={"If-None-Match": etag})
        assert r304.status_code == 304 and r304.content == b""
        assert r304.headers["etag"] == etag and r304.headers["cache-control"] == cache
        assert r304.headers.get("vary") == r.headers.get("vary")

        # -- CSV: one row per window, same numbers as the JSON --
        r = reader.get(f"/v1/experiments/{exp['id']}/skill", params={"format": "csv"})
        assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
        rows = list(csv.DictReader(io.StringIO(r.text)))
        assert [row["window"] for row in rows] == [w["label"] for w in curve["windows"]]
        for row, w in zip(rows, curve["windows"], strict=True):
            assert float(row["gain"]) == pytest.approx(w["gain"]["value"], abs=1e-6)
            assert float(row["acc_realistic"]) == pytest.approx(w["acc_realistic"]["value"],
                                                                abs=1e-6)

        # -- PNG: signature, decodes with matplotlib, sensible size, rendered once --
        objects = settings.artifacts_dir / "objects"
        r = reader.get(f"/v1/experiments/{exp['id']}/skill", params={"format": "png"})
        assert r.status_code == 200 and r.headers["content-type"] == "image/png"
        _check_png(r.content)
        stored_after_first = tree_files(objects)
        r2 = reader.get(f"/v1/experiments/{exp['id']}/skill", params={"format": "png"})
        assert r2.content == r.content
        assert tree_files(objects) == stored_after_first  # nothing rendered or stored again
        digest = hashlib.sha256(r.content).hexdigest()
        assert (objects / digest[:2] / digest[2:4] / digest).is_file()  # kept in the store

        # -- maps: PNG and CF NetCDF, equal to the offline maps.nc --
        label = curve["windows"][2]["label"]
        r = reader.get(f"/v1/experiments/{exp['id']}/maps/{label}", params={"field": "gain"})
        assert r.status_code == 200, r.text
        _check_png(r.content)
        r = reader.get(f"/v1/experiments/{exp['id']}/maps/{label}", params={"format": "netcdf"})
        assert r.status_code == 200, r.text
        assert r.headers["content-type"] == "application/x-netcdf"
        assert r.content[:8] == b"\x89HDF\r\n\x1a\n"
        map_path = tmp_path / "map.nc"
        map_path.write_bytes(r.content)
        with xr.open_dataset(map_path) as got, xr.open_dataset(offline / "maps.nc") as ref:
            assert got.attrs["Conventions"].startswith("CF-")
            assert "history" in got.attrs and got.attrs["title"]
            assert got["lat"].attrs["standard_name"] == "latitude"
            assert got["lat"].attrs["units"] == "degrees_north"
            assert got["lon"].attrs["standard_name"] == "longitude"
            assert got["lon"].attrs["units"] == "degrees_east"
            assert list(got["window"].values) == [label]
            for name in ("gain", "gain_low", "gain_high", "acc_realistic", "acc_scrambled",
                         "p_value", "significant"):
                assert name in got, name
                np.testing.assert_array_equal(
                    got[name].sel(window=label).values, ref[name].sel(window=label).values
                )
        r = reader.get(f"/v1/experiments/{exp['id']}/maps/{label}",
                       params={"format": "netcdf", "field": "p_value"})
        assert r.status_code == 200
        etag = r.headers["etag"]
        r304 = reader.get(f"/v1/experiments/{exp['id']}/maps/{label}",
                          params={"format": "netcdf", "field": "p_value"},
                          headers={"If-None-Match": etag})
        assert r304.status_code == 304 and r304.headers["etag"] == etag
        assert r304.headers["cache-control"] == r.headers["cache-control"]
        assert_error(reader.get(f"/v1/experiments/{exp['id']}/maps/week 99"), 404, "not_found")
        assert_error(
            reader.get(f"/v1/experiments/{exp['id']}/maps/{label}", params={"field": "nope"}),
            404, "not_found",
        )

        # -- conditional gain and regions --
        r = reader.get(f"/v1/experiments/{exp['id']}/conditional")
        assert r.status_code == 200, r.text
        offline_result = json.loads((offline / "result.json").read_text())
        assert r.json() == offline_result["conditional"]["all"]
        r = reader.get("/v1/regions")
        assert r.status_code == 200
        region_ids = {item["id"] for item in r.json()["regions"]}
        import regionmask  # the offline reference regions (regionmask's own list)

        assert "all" in region_ids
        assert {f"srex:{a}" for a in regionmask.defined_regions.srex.abbrevs} <= region_ids
        box = "box:40,50,10,30"
        r = reader.get(f"/v1/experiments/{exp['id']}/skill", params={"region": box})
        assert r.status_code == 200, r.text
        assert r.json()["region"] == box
        assert_error(
            reader.get(f"/v1/experiments/{exp['id']}/skill", params={"region": "atlantis"}),
            404, "not_found",
        )
        assert_error(
            reader.get(f"/v1/experiments/{exp['id']}/skill", params={"aggregation": "median"}),
            422, "invalid_parameter",
        )

        # -- a second experiment, a comparison of the two, equal to compare_results offline --
        r = writer.post("/v1/experiments", json=_experiment_body(ids, name="scenario-b", seed=11))
        assert r.status_code == 202, r.text
        exp_b = r.json()
        assert wait_for_job(reader, exp_b["job"]["id"])["status"] == "done"
        r = writer.post("/v1/comparisons", json={
            "baseline": exp["id"], "candidate": exp_b["id"],
            "bootstrap": {"resamples": RESAMPLES, "seed": 3, "confidence": 0.9},
        })
        assert r.status_code == 202, r.text
        cmp = r.json()
        assert set(cmp["job"]) >= {"id", "status"}
        assert wait_for_job(reader, cmp["job"]["id"])["status"] == "done"
        r = reader.get(f"/v1/comparisons/{cmp['id']}")
        assert r.status_code == 200, r.text
        got_cmp = r.json()
        assert got_cmp["status"] == "done" and got_cmp["result"]
        offline_b = _score_offline(
            sample_files, tmp_path / "offline_b", name=exp_b["id"], seed=11, env=settings_env
        )
        from run_support import comparison_options

        from app.results.result import ScoreResult
        from app.runs.compare import compare_experiments

        expected = compare_experiments(ScoreResult.load(offline), ScoreResult.load(offline_b), options=comparison_options(resamples=RESAMPLES, seed=3, confidence=0.9))
        assert got_cmp["result"] == json.loads(json.dumps(expected))
        r304 = reader.get(f"/v1/comparisons/{cmp['id']}",
                          headers={"If-None-Match": r.headers["etag"]})
        assert r304.status_code == 304

        # -- listing with filters and pagination --
        r = reader.get("/v1/experiments", params={"variable": "tas", "status": "done", "limit": 1})
        assert r.status_code == 200
        page = r.json()
        assert page["total"] == 2 and len(page["items"]) == 1
        assert page["items"][0]["id"] == exp_b["id"]  # newest first
        r = reader.get("/v1/experiments", params={"name": "scenario", "offset": 0})
        assert [e["id"] for e in r.json()["items"]] == [exp["id"]]
        assert_error(reader.get("/v1/experiments", params={"status": "lost"}), 422)

        # -- registration of the same file: the same checksum, so the uploaded dataset --
        r = writer.post("/v1/datasets/register",
                        json={"uri": str(sample_files["realistic"]), "role": "hindcast"})
        assert r.status_code == 200, r.text
        assert r.json()["id"] == ids["realistic"]

        # -- tokens (admin scope): create, list, revoke --
        admin = srv.client(admin_token, schema=schema)
        r = admin.post("/v1/tokens", json={"name": "dashboard", "scope": "read"})
        assert r.status_code == 201, r.text
        made = r.json()
        assert made["token"].startswith("ll_") and made["scope"] == "read"
        assert made["id"] in {t["id"] for t in admin.get("/v1/tokens").json()}
        r = admin.delete(f"/v1/tokens/{made['id']}")
        assert r.status_code == 200 and r.json()["revoked_at"]

        # -- operations --
        health = srv.client(schema=schema).get("/healthz").json()
        assert health == {"status": "ok", "database": "ok", "version": health["version"]}
        # every JSON route of the document answered and validated against its own schema
        answered = {(m, t) for m, t, status in schema.seen if 200 <= status < 300}
        assert schema.json_routes() - answered == set(), sorted(schema.json_routes() - answered)
        metrics = srv.client().get("/metrics").text
        assert 'landlift_jobs{state="done"} 3.0' in metrics
        assert "landlift_job_duration_seconds_count 3.0" in metrics
        assert ('landlift_http_requests_total{method="GET",'
                'route="/v1/experiments/{experiment_id}/skill",status="304"}') in metrics
        health = srv.client().get("/healthz").json()
        assert health == {"status": "ok", "database": "ok", "version": health["version"]}
        page_html = srv.client().get("/")
        assert page_html.status_code == 200 and "/v1/experiments" in srv.client().get(
            "/static/dashboard.js").text
    log = srv.log()
    assert write_token not in log and read_token not in log  # no secrets in the logs
    assert backend in ("sqlite", "postgresql")


def _check_png(data: bytes) -> None:
    from matplotlib import image as mpimg

    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pixels = mpimg.imread(io.BytesIO(data), format="png")
    height, width = pixels.shape[:2]
    assert 200 <= height <= 4000 and 300 <= width <= 4000, pixels.shape
    assert pixels.shape[2] in (3, 4)
    assert float(pixels[..., :3].std()) > 0.01  # not a blank image
