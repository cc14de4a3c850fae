"""Bad input (issue 2, item 7): a clear error naming the file, the variable and the problem.

Every case runs twice: through the engine (``app.runs.scoring.score_files`` raises the domain error,
whose message is checked) and through ``landlift score`` (exit status 2, the message on standard
error after ``landlift: error:``, and nothing written into the output folder). The CLI is called
in-process through ``app.cli.main`` (the console script's entry point) for speed; one case also
runs as a real ``landlift`` process.
"""

from __future__ import annotations

import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
from cf_factory import CasePaths
from run_support import run_options

from app.cli.main import main
from app.errors import InputError, LandliftError, NotFoundError, ParameterError
from app.runs.scoring import score_files

REPO = Path(__file__).resolve().parents[1]


@dataclass(frozen=True)
class Bad:
    id: str
    error: type[LandliftError]
    fragments: tuple[str, ...]
    changes: dict[str, Any] = field(default_factory=dict)
    options: dict[str, Any] = field(default_factory=dict)
    land: bool = False
    realistic: str | None = None  # replaces the realistic path (a path that does not exist)


CASES = [
    Bad("missing-units", InputError, ("observations.nc", "'tas'", "no 'units' attribute"),
        {"units_override": {"observations": None}}),
    Bad("unknown-units", InputError, ("scrambled.nc", "'tas'", "'bogus_units'", "not understood"),
        {"units_override": {"scrambled": "bogus_units"}}),
    Bad("malformed-units", InputError, ("realistic.nc", "'tas'", "'kg m-2 s-1)'", "not understood"),
        {"units_override": {"realistic": "kg m-2 s-1)"}}),
    Bad("units-do-not-match", InputError, ("observations.nc", "'tas'", "units m do not convert to K", "realistic.nc"),
        {"units_override": {"observations": "m"}}),
    Bad("grids-differ", InputError, ("scrambled.nc", "'tas'", "lat grid", "differs", "realistic.nc"),
        {"lat_offset": {"scrambled": 0.5}}),
    Bad("init-dates-do-not-overlap", InputError, ("scrambled.nc", "'tas'", "do not overlap", "realistic.nc"),
        {"year_offset": {"scrambled": 30}}),
    Bad("observations-do-not-overlap", InputError, ("observations.nc", "'tas'", "cover none"),
        {"year_offset": {"observations": 30}}),
    Bad("missing-member-dim", InputError, ("realistic.nc", "no realization dimension", "dims present"),
        {"drop_dim": {"realistic": "realization"}}),
    Bad("missing-lat-dim", InputError, ("observations.nc", "no lat dimension"),
        {"drop_dim": {"observations": "lat"}}),
    Bad("fewer-than-7-years", InputError, ("realistic.nc", "'tas'", "2 year(s)", "at least 7"),
        {"n_years": 2}),
    Bad("all-nan-observations", InputError, ("observations.nc", "'tas'", "all NaN"),
        {"all_nan": ("observations",)}),
    Bad("all-nan-hindcast", InputError, ("realistic.nc", "'tas'", "all NaN"),
        {"all_nan": ("realistic",)}),
    Bad("all-nan-land-state", InputError, ("land_state.nc", "'mrsos'", "NaN"),
        {"all_nan": ("land_state",)}, land=True),
    Bad("window-beyond-hindcast", InputError, ("realistic.nc", "'late'", "20-40", "beyond the hindcast"),
        options={"lead_windows": [{"label": "late", "first_day": 20, "last_day": 40}]}),
    Bad("requested-variable-absent", InputError, ("realistic.nc", "'pr'", "has no variable", "tas"),
        options={"variable": "pr"}),
    Bad("resamples-0", ParameterError, ("resamples", "1..10000", "got 0"), options={"resamples": 0}),
    Bad("resamples-10001", ParameterError, ("resamples", "1..10000", "got 10001"), options={"resamples": 10001}),
    Bad("non-monotonic-lat", InputError, ("realistic.nc", "'lat'", "not monotonic"),
        {"coord_defect": {"realistic": ("lat", "swap")}}),
    Bad("duplicated-lat", InputError, ("scrambled.nc", "'lat'", "duplicated"),
        {"coord_defect": {"scrambled": ("lat", "duplicate")}}),
    Bad("non-monotonic-time", InputError, ("observations.nc", "'time'", "not monotonic"),
        {"coord_defect": {"observations": ("time", "swap")}}),
    Bad("duplicated-init", InputError, ("realistic.nc", "'forecast_reference_time'", "duplicated"),
        {"coord_defect": {"realistic": ("forecast_reference_time", "duplicate")}}),
    Bad("not-netcdf", InputError, ("observations.nc", "cannot be read as NetCDF"),
        {"not_netcdf": ("observations",)}),
    Bad("nonexistent-path", InputError, ("nope.nc", "does not exist"), realistic="nope.nc"),
    Bad("extra-dim", InputError, ("realistic.nc", "'tas'", "extra dims", "height"),
        {"extra_dim": {"realistic": ("height", 2)}}),
    Bad("unknown-region", NotFoundError, ("'XYZ'", "CEU", "choose one of"), options={"regions": ["srex:XYZ"]}),
]


def _paths(case: CasePaths, bad: Bad, tmp: Path) -> tuple[Path, Path, Path, Path | None]:
    realistic = tmp / bad.realistic if bad.realistic else case.realistic
    return realistic, case.scrambled, case.observations, case.land_state if bad.land else None


def _cli_args(bad: Bad) -> list[str]:
    opts = {"resamples": 50, **bad.options}
    args = ["--resamples", str(opts["resamples"])]
    if "variable" in opts:
        args += ["--variable", opts["variable"]]
    for w in opts.get("lead_windows", []):
        args += ["--window", f"{w['label']}={w['first_day']}-{w['last_day']}"]
    for r in opts.get("regions", []):
        args += ["--region", r]
    return args


@pytest.mark.parametrize("bad", CASES, ids=[c.id for c in CASES])
def test_engine_raises_a_clear_error(bad: Bad, make_cf_case: Callable[..., CasePaths], tmp_path: Path) -> None:
    case = make_cf_case(**bad.changes)
    with pytest.raises(bad.error) as err:  # options are checked as they are built, data as read
        score_files(*_paths(case, bad, tmp_path), options=run_options(**{"resamples": 50, **bad.options}))
    for fragment in bad.fragments:
        assert fragment in err.value.message, (fragment, err.value.message)


@pytest.mark.parametrize("bad", CASES, ids=[c.id for c in CASES])
def test_cli_exits_2_with_the_message_and_writes_nothing(
    bad: Bad, make_cf_case: Callable[..., CasePaths], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    case = make_cf_case(**bad.changes)
    realistic, scrambled, observations, land = _paths(case, bad, tmp_path)
    out = tmp_path / "out"
    argv = ["score", "--realistic", str(realistic), "--scrambled", str(scrambled),
            "--observations", str(observations), "--out", str(out), *_cli_args(bad)]
    if land is not None:
        argv += ["--land-state", str(land)]
    status = main(argv)
    captured = capsys.readouterr()
    assert status == 2
    assert captured.err.startswith("landlift: error: "), captured.err
    for fragment in bad.fragments:
        assert fragment in captured.err, (fragment, captured.err)
    assert "Traceback" not in captured.err
    assert not out.exists() or not any(out.iterdir()), sorted(p.name for p in out.rglob("*"))


def test_failed_run_leaves_an_existing_output_folder_as_it_was(
    make_cf_case: Callable[..., CasePaths], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    case = make_cf_case(all_nan=("observations",))
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("kept")
    status = main(["score", *case.cli_args(), "--out", str(out), "--resamples", "20"])
    assert status == 2
    assert sorted(p.name for p in out.rglob("*")) == ["notes.txt"]
    assert "observations.nc" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("window", "fragment"), [("week 2", "LABEL=FIRST-LAST"), ("w=14-8", "first_day <= last_day")]
)
def test_cli_rejects_malformed_window_text(
    cf_case: CasePaths, tmp_path: Path, capsys: pytest.CaptureFixture[str], window: str, fragment: str
) -> None:
    status = main(["score", *cf_case.cli_args(), "--out", str(tmp_path / "out"), "--window", window])
    err = capsys.readouterr().err
    assert status == 2
    assert err.startswith("landlift: error: ") and fragment in err, err
    assert not (tmp_path / "out").exists()


def test_real_process_exit_status(make_cf_case: Callable[..., CasePaths], tmp_path: Path) -> None:
    bad = next(c for c in CASES if c.id == "grids-differ")
    case = make_cf_case(**bad.changes)
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "app.cli", "score", *case.cli_args(), "--out", str(out), *_cli_args(bad)]
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=REPO, timeout=120)
    assert proc.returncode == 2, proc.stderr
    assert proc.stdout == ""
    for fragment in bad.fragments:
        assert fragment in proc.stderr
    assert not out.exists()
