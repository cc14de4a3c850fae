"""The dashboard page in a real headless Chromium (marker ``browser``).

Needs the Debian package ``chromium`` (/usr/bin/chromium): without it this test FAILS with the
install command, it does not skip. The server runs with public reads (the dashboard's trusted-
network mode), one experiment is scored through the API, and Chromium loads ``/``: the DOM after
the page's JavaScript ran must list the experiment as done and show its skill-curve PNG, fetched
from ``/v1/experiments/{id}/skill?format=png``; a screenshot must decode as a PNG of the window.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path
from typing import Any

import pytest
from api_support import running_server, upload, wait_for_job

pytestmark = pytest.mark.browser

CHROMIUM_FLAGS = (
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
)


def _chromium() -> str:
    found = shutil.which("chromium") or (
        "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None
    )
    assert found, (
        "headless Chromium is needed for the dashboard test: `apt-get install -y chromium` "
        "(the project's .ci/run must install it); deselect with -m 'not browser'"
    )
    return found


def _run_chromium(url: str, profile: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    cmd = [_chromium(), *CHROMIUM_FLAGS, f"--user-data-dir={profile}",
           "--virtual-time-budget=20000", "--window-size=1280,900", *extra, url]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


def test_dashboard_shows_experiments_and_skill_png(
    settings_env: dict[str, str], make_token: Any, sample_files: dict[str, Path], tmp_path: Path,
) -> None:
    chromium = _chromium()
    write = make_token("write")
    with running_server(settings_env, log_dir=tmp_path / "logs",
                        extra_env={"LANDLIFT_PUBLIC_READ": "true"}) as srv:
        c = srv.client(write)
        ids = {}
        for slot, role in (("realistic", "hindcast"), ("scrambled", "hindcast"),
                           ("observations", "observations")):
            r = upload(c, sample_files[slot], role)
            assert r.status_code == 201, r.text
            ids[slot] = r.json()["id"]
        r = c.post("/v1/experiments", json={"name": "belt check", "variable": "tas", **ids,
                                            "bootstrap": {"resamples": 20}})
        assert r.status_code == 202, r.text
        exp = r.json()
        assert wait_for_job(c, exp["job"]["id"])["status"] == "done"

        done = _run_chromium(srv.base_url + "/", tmp_path / "profile-dom", "--dump-dom")
        assert done.returncode == 0, f"{chromium} failed: {done.stderr[-3000:]}"
        dom = done.stdout
        assert "1 experiment(s)" in dom, dom[:3000]
        assert re.search(r"<td>belt check</td>.*?<td class=\"status-done\">done</td>", dom, re.S)
        assert f"belt check ({exp['id']})" in dom
        assert re.search(r'<img id="skill"[^>]*src="blob:http://127\.0\.0\.1', dom), dom[-3000:]
        metrics = c.get("/metrics").text
        assert re.search(
            r'landlift_http_requests_total\{method="GET",route="/v1/experiments/'
            r'\{experiment_id\}/skill",status="200"\} [1-9]', metrics)

        shot = tmp_path / "dashboard.png"
        done = _run_chromium(srv.base_url + "/", tmp_path / "profile-shot",
                             f"--screenshot={shot}")
        assert done.returncode == 0 and shot.is_file(), done.stderr[-3000:]
        from matplotlib import image as mpimg

        pixels = mpimg.imread(shot)
        assert pixels.shape[:2] == (900, 1280)
        assert float(pixels[..., :3].std()) > 0.05  # a page with content, not a blank window
