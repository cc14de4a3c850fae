"""The upload validator runs in a spawned child with a memory limit and a wall-clock timeout.

Real child processes: one that segfaults, one that aborts, one that hangs, one that asks for more
memory than its RLIMIT_AS allows, and real files (the sample scenario, a truncated copy). The
parent must always come back with a description or an InputError, never die or hang.
The fault hook is the ``fault`` argument (setting ``validation_fault``, app.runs.sandbox.FAULTS).
"""

from __future__ import annotations

import resource
import time
from pathlib import Path

import pytest

from app.cube.sources import describe_dataset
from app.errors import InputError
from app.runs.admission import sniff_format
from app.runs.sandbox import validate_file


def test_valid_file_is_described_like_in_process(sample_files: dict[str, Path]) -> None:
    got = validate_file(sample_files["observations"], role="observations", timeout=120,
                        memory_bytes=2 * 1024**3)
    assert got == describe_dataset(sample_files["observations"], role="observations")


@pytest.mark.parametrize(
    ("fault", "exitcode"), [("segfault", -11), ("abort", -6)]  # SIGSEGV, SIGABRT (POSIX numbers)
)
def test_crashing_child_is_a_422(fault: str, exitcode: int, monkeypatch: pytest.MonkeyPatch,
                                 sample_files: dict[str, Path]) -> None:
    with pytest.raises(InputError) as info:
        validate_file(sample_files["observations"], role="observations", timeout=120,
                      memory_bytes=None, display_name="obs.nc", fault=fault)
    failure = info.value
    assert (failure.http_status, failure.code) == (422, "validation_crashed")
    assert failure.detail["exitcode"] == exitcode
    assert "obs.nc" in failure.message


def test_hanging_child_is_killed_at_the_timeout(monkeypatch: pytest.MonkeyPatch,
                                                sample_files: dict[str, Path]) -> None:
    fault = "sleep"
    started = time.monotonic()
    with pytest.raises(InputError) as info:
        validate_file(sample_files["observations"], role="observations", timeout=3,
                      memory_bytes=None, fault=fault)
    elapsed = time.monotonic() - started
    assert info.value.code == "validation_timeout"
    assert 3 <= elapsed < 20, elapsed


def test_memory_limit_is_enforced_in_the_child(monkeypatch: pytest.MonkeyPatch,
                                               sample_files: dict[str, Path]) -> None:
    # the hook allocates twice the limit; without RLIMIT_AS in the child this would succeed
    # (1 GiB on a 24 GiB machine) and the file would validate
    fault = "allocate"
    limit = 512 * 1024**2
    with pytest.raises(InputError) as info:
        validate_file(sample_files["observations"], role="observations", timeout=120,
                      memory_bytes=limit, fault=fault)
    assert info.value.code == "validation_memory"
    assert info.value.detail["memory_bytes"] == limit
    # the parent's own limit is untouched
    assert resource.getrlimit(resource.RLIMIT_AS)[0] in (resource.RLIM_INFINITY,) or \
        resource.getrlimit(resource.RLIMIT_AS)[0] > limit


def test_truncated_file_is_refused(tmp_path: Path, sample_files: dict[str, Path]) -> None:
    cut = tmp_path / "cut.nc"
    cut.write_bytes(sample_files["realistic"].read_bytes()[:300_000])
    with pytest.raises(InputError) as info:
        validate_file(cut, role="hindcast", timeout=120, memory_bytes=2 * 1024**3)
    assert info.value.http_status == 422
    assert info.value.code in ("invalid_input", "validation_crashed")
    assert "cut.nc" in info.value.message


def test_signatures(tmp_path: Path, sample_files: dict[str, Path]) -> None:
    # the NetCDF and HDF5 magic numbers, against files written by the netCDF-C library itself
    import numpy as np
    import xarray as xr

    ds = xr.Dataset({"tas": (("lat",), np.arange(3.0))})
    for fmt, expected in (("NETCDF3_CLASSIC", "netcdf3-classic"),
                          ("NETCDF3_64BIT", "netcdf3-64bit-offset"),
                          ("NETCDF4", "hdf5"), ("NETCDF4_CLASSIC", "hdf5")):
        path = tmp_path / f"{fmt}.nc"
        ds.to_netcdf(path, format=fmt, engine="netcdf4")
        assert sniff_format(path.read_bytes()[:8]) == expected, fmt
    import netCDF4

    cdf5 = tmp_path / "cdf5.nc"
    with netCDF4.Dataset(cdf5, "w", format="NETCDF3_64BIT_DATA") as nc:
        nc.createDimension("x", 2)
    assert sniff_format(cdf5.read_bytes()[:8]) == "netcdf3-64bit-data"
    assert sniff_format(sample_files["realistic"].read_bytes()[:8]) == "hdf5"
    assert sniff_format(b"CDF\x01\x00\x00\x00\x00") == "netcdf3-classic"
    assert sniff_format(b"CDF\x02\x00\x00\x00\x00") == "netcdf3-64bit-offset"
    assert sniff_format(b"CDF\x05\x00\x00\x00\x00") == "netcdf3-64bit-data"
    assert sniff_format(b"CDF\x03\x00\x00\x00\x00") is None
    assert sniff_format(b"PK\x03\x04") is None
    assert sniff_format(b"") is None
