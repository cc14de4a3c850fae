"""ScoreResult: everything one scoring run produced, its files, and on-demand regions.

Files of a saved result (DESIGN section 6):
    skill.json     list of skill curves, the default (region ``all``, ``acc_of_region_mean``) first
    maps.nc        CF NetCDF maps per window, lat, lon
    anomalies.nc   the reduced anomaly cube (year, start_slot, window, lat, lon), from which any
                   further region is assessed on demand with the run's own seed
    result.json    options, layout summary, provenance, conditional tables
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from app.cube.assess import Cube
from app.cube.pipeline import (
    RegionAssessment,
    Resampling,
    RunOutput,
    Scoring,
    assess_region,
    region_assessments,
)
from app.cube.regions import resolve_region
from app.cube.windows import LeadWindow
from app.errors import NotFoundError, ParameterError
from app.provenance import code_version, history_line
from app.results.contract import AGGREGATIONS, MAP_FIELDS, RESULT_FILES
from app.results.curves import conditional_table, region_curves
from app.stats.fisher import MIN_CELL_SAMPLES
from app.stats.scramble import DEFAULT_SCRAMBLE

#: p-values stay float64 so that "p < 1 - confidence" read from the file agrees with the bounds
MAP_DTYPES: dict[str, type] = {"p_value": np.float64, "n_samples": np.int32, "n_years": np.int32}


class ScoreResult:
    """Curves, maps and conditional gain of one run (see module docstring)."""

    def __init__(
        self,
        *,
        meta: dict[str, Any],
        curves: list[dict[str, Any]],
        conditional: dict[str, dict[str, Any]],
        maps: xr.Dataset,
        anomalies: xr.Dataset | None = None,
        anomalies_path: Path | None = None,
    ) -> None:
        self.meta = meta
        self.curves = curves
        self._conditional = conditional
        self.maps = maps
        self._anomalies = anomalies
        self._anomalies_path = anomalies_path

    # -- building -----------------------------------------------------------------------------
    @classmethod
    def from_run(
        cls, out: RunOutput, *, experiment: str, provenance: dict[str, Any], options: dict[str, Any]
    ) -> ScoreResult:
        """Format a finished run; ``options`` are the run's options as the client gave them."""
        boot = out.scoring.bootstrap
        meta = {
            "experiment": experiment,
            "variable": out.summary["variable"],
            "units": out.summary["units"],
            "confidence": boot.confidence,
            "resamples": boot.resamples,
            "seed": boot.seed,
            "interval_method": boot.interval,
            "fdr_alpha": out.scoring.fdr_alpha,
            "scramble": out.scoring.scramble,
            "min_cell_samples": out.scoring.min_cell_samples,
            "min_coverage": out.scoring.min_coverage,
            "options": options,
            "summary": out.summary,
            "windows": [w.to_dict() for w in out.windows],
            "provenance": provenance,
        }
        curves: list[dict[str, Any]] = []
        conditional: dict[str, dict[str, Any]] = {}
        for ra in region_assessments(out):
            curves.extend(region_curves(ra, out.windows, meta))
            conditional[ra.region.id] = conditional_table(ra, out.windows, meta)
        maps = build_maps(out, meta)
        anomalies = build_anomalies(out)
        return cls(meta=meta, curves=curves, conditional=conditional, maps=maps, anomalies=anomalies)

    # -- reading ------------------------------------------------------------------------------
    @property
    def window_labels(self) -> list[str]:
        return [w["label"] for w in self.meta["windows"]]

    @property
    def windows(self) -> list[LeadWindow]:
        return [LeadWindow(**w) for w in self.meta["windows"]]

    @property
    def provenance(self) -> dict[str, Any]:
        return dict(self.meta["provenance"])

    @property
    def scoring(self) -> Scoring:
        """The run's assessment settings, to assess further regions on the same resampled years."""
        m = self.meta
        return Scoring(
            bootstrap=Resampling(
                resamples=int(m["resamples"]), seed=int(m["seed"]),
                confidence=float(m["confidence"]), interval=str(m["interval_method"]),
            ),
            fdr_alpha=float(m["fdr_alpha"]),
            scramble=str(m.get("scramble", DEFAULT_SCRAMBLE)),
            min_cell_samples=int(m.get("min_cell_samples", MIN_CELL_SAMPLES)),
        )

    def curve(self, region: str = "all", aggregation: str = "acc_of_region_mean") -> dict[str, Any]:
        """The skill curve of a region; a region not scored yet is assessed now and kept."""
        if aggregation not in AGGREGATIONS:
            raise ParameterError(f"unknown aggregation {aggregation!r}; choose one of {', '.join(AGGREGATIONS)}")
        for c in self.curves:
            if c["region"] == region and c["aggregation"] == aggregation:
                return c
        self._assess_more(region)
        return self.curve(region, aggregation)

    def conditional(self, region: str = "all") -> dict[str, Any]:
        if region not in self._conditional:
            self._assess_more(region)
        return self._conditional[region]

    def map_field(self, *, window: str, field: str) -> xr.DataArray:
        if field not in MAP_FIELDS:
            raise NotFoundError(f"unknown map field {field!r}; choose one of {', '.join(MAP_FIELDS)}")
        if field not in self.maps:
            raise NotFoundError(
                f"map field {field!r} is not in this result (scramble {self.meta.get('scramble')!r}: "
                "nothing is corrected for independent scrambled states)"
            )
        if window not in self.window_labels:
            raise NotFoundError(f"unknown lead window {window!r}; choose one of {', '.join(self.window_labels)}")
        return self.maps[field].sel(window=window)

    def _assess_more(self, region: str) -> None:
        reg = resolve_region(region)
        cube, lat, lon = self.anomaly_cube()
        sig = self.maps["significant"].values.reshape(len(self.window_labels), -1).astype(bool)
        ra: RegionAssessment = assess_region(
            cube, reg, lat=lat, lon=lon, scoring=self.scoring, significant=sig
        )
        if reg.id != region:
            raise NotFoundError(f"region {region!r} resolves to {reg.id!r}")
        self.curves.extend(region_curves(ra, self.windows, self.meta))
        self._conditional[reg.id] = conditional_table(ra, self.windows, self.meta)

    def anomaly_cube(self) -> tuple[Cube, np.ndarray, np.ndarray]:
        """The reduced anomaly cube with its latitudes and longitudes (loaded on first use)."""
        if self._anomalies is None:
            if self._anomalies_path is None:
                raise NotFoundError("this result has no anomaly cube; only the regions scored with it are available")
            self._anomalies = xr.load_dataset(self._anomalies_path)
        a = self._anomalies
        lat, lon = a["lat"].values, a["lon"].values

        def flat(name: str) -> np.ndarray:
            v = a[name].values
            return v.reshape(v.shape[:-2] + (-1,))

        land = flat("land_z") if "land_z" in a else None
        return Cube(flat("realistic"), flat("scrambled"), flat("observed"), land), lat, lon

    def sample_layout(self) -> tuple[np.ndarray, list[str]]:
        """The cube's years and start slots (``MM-DD``)."""
        self.anomaly_cube()
        a = self._anomalies
        assert a is not None
        return a["year"].values.astype(np.int64), [str(s) for s in a["start_slot"].values]

    # -- files --------------------------------------------------------------------------------
    def skill_json(self) -> str:
        return json.dumps(self.curves, indent=1, allow_nan=False)

    def save(self, directory: str | Path) -> dict[str, Path]:
        """Write the four files (module docstring) into ``directory``; their paths."""
        d = Path(directory)
        d.mkdir(parents=True, exist_ok=True)
        paths = {name: d / name for name in RESULT_FILES}
        _atomic_text(paths["skill.json"], self.skill_json())
        _atomic_netcdf(paths["maps.nc"], self.maps)
        if self._anomalies is None and self._anomalies_path is not None:
            self._anomalies = xr.load_dataset(self._anomalies_path)
        if self._anomalies is not None:
            _atomic_netcdf(paths["anomalies.nc"], self._anomalies)
        else:
            paths.pop("anomalies.nc")
        _atomic_text(
            paths["result.json"],
            json.dumps({"meta": self.meta, "conditional": self._conditional}, indent=1, allow_nan=False),
        )
        return paths

    @classmethod
    def load(cls, source: str | Path | Mapping[str, str | Path]) -> ScoreResult:
        """Read a saved result from a directory or a ``{file name: path}`` mapping."""
        files = {n: Path(source) / n for n in RESULT_FILES} if isinstance(source, (str, Path)) else {
            n: Path(p) for n, p in source.items()
        }
        missing = [n for n in ("skill.json", "maps.nc", "result.json") if n not in files or not files[n].exists()]
        if missing:
            raise NotFoundError(f"saved result lacks {', '.join(missing)}")
        body = json.loads(files["result.json"].read_text())
        anomalies_path = files.get("anomalies.nc")
        return cls(
            meta=body["meta"],
            curves=json.loads(files["skill.json"].read_text()),
            conditional=body["conditional"],
            maps=xr.load_dataset(files["maps.nc"]),
            anomalies_path=anomalies_path if anomalies_path is not None and anomalies_path.exists() else None,
        )


def _atomic_text(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".part")
    tmp.write_text(text)
    tmp.replace(path)


def _atomic_netcdf(path: Path, ds: xr.Dataset) -> None:
    tmp = path.with_name(path.name + ".part")
    ds.to_netcdf(tmp, engine="netcdf4", format="NETCDF4")
    tmp.replace(path)


def _cf_lat_lon(lat: np.ndarray, lon: np.ndarray) -> dict[str, xr.DataArray]:
    return {
        "lat": xr.DataArray(lat, dims="lat", attrs={"standard_name": "latitude", "units": "degrees_north", "axis": "Y"}),
        "lon": xr.DataArray(lon, dims="lon", attrs={"standard_name": "longitude", "units": "degrees_east", "axis": "X"}),
    }


def build_maps(out: RunOutput, meta: dict[str, Any]) -> xr.Dataset:
    """CF NetCDF maps ``(window, lat, lon)`` of DESIGN section 6."""
    W, ny, nx = len(out.windows), out.lat.size, out.lon.size

    def grid(a: np.ndarray) -> np.ndarray:
        return a.reshape(W, ny, nx)

    c = out.cells
    dims = ("window", "lat", "lon")
    conf = f"{round(100 * out.scoring.bootstrap.confidence, 3):g}%"
    variables = {
        "acc_realistic": (grid(c.acc_realistic), "anomaly correlation of the realistic-start ensemble mean"),
        "acc_scrambled": (grid(c.acc_scrambled), "anomaly correlation of the scrambled-start ensemble mean"),
        "gain": (grid(c.gain), "skill gain from land initialisation (acc_realistic - acc_scrambled)"),
        "gain_low": (grid(c.gain_low), f"lower bound of the {conf} year-block bootstrap interval of the gain"),
        "gain_high": (grid(c.gain_high), f"upper bound of the {conf} year-block bootstrap interval of the gain"),
        "p_value": (grid(c.p_value), "two-sided year-block bootstrap p-value of gain = 0"),
        "n_samples": (grid(c.n_samples), "number of (year, start date) samples scored"),
        "n_years": (grid(c.n_years), "number of years with a scored sample"),
    }
    if out.scoring.scramble == "other_years":
        note = "corrected for scrambled land states drawn from other years of the period"
        variables.update({
            "acc_scrambled_corrected": (grid(c.acc_scrambled_corrected), f"acc_scrambled {note}"),
            "gain_corrected": (grid(c.gain_corrected), f"gain {note}: (n-1)/n x gain"),
            "gain_corrected_low": (grid(c.gain_corrected_low), f"lower bound of the {conf} interval of gain_corrected"),
            "gain_corrected_high": (grid(c.gain_corrected_high), f"upper bound of the {conf} interval of gain_corrected"),
        })
    data = {
        name: xr.DataArray(
            values.astype(MAP_DTYPES.get(name, np.float32)),
            dims=dims,
            attrs={"long_name": long, "units": "1"},
        )
        for name, (values, long) in variables.items()
    }
    data["significant"] = xr.DataArray(
        grid(out.significant).astype(np.int8),
        dims=dims,
        attrs={
            "long_name": f"gain significant under the Benjamini-Hochberg false discovery rate {out.scoring.fdr_alpha:g} across the map",
            "flag_values": np.array([0, 1], dtype=np.int8),
            "flag_meanings": "not_significant significant",
        },
    )
    coords = _cf_lat_lon(out.lat, out.lon)
    coords["window"] = xr.DataArray([w.label for w in out.windows], dims="window", attrs={"long_name": "lead window"})
    coords["first_day"] = xr.DataArray(
        np.array([w.first_day for w in out.windows], dtype=np.int32), dims="window", attrs={"long_name": "first lead day of the window", "units": "days"}
    )
    coords["last_day"] = xr.DataArray(
        np.array([w.last_day for w in out.windows], dtype=np.int32), dims="window", attrs={"long_name": "last lead day of the window", "units": "days"}
    )
    attrs = _global_attrs(meta, title="land-initialisation skill gain maps")
    ds = xr.Dataset(data, coords=coords, attrs=attrs)
    for v in ds.data_vars:
        ds[v].encoding.update({"zlib": True, "complevel": 4})
    return ds


def build_anomalies(out: RunOutput) -> xr.Dataset:
    """The anomaly cube with its coordinates (for on-demand regions and comparisons)."""
    Y, S, W = out.years.size, len(out.slots), len(out.windows)
    ny, nx = out.lat.size, out.lon.size
    dims = ("year", "start_slot", "window", "lat", "lon")

    def shaped(a: np.ndarray) -> np.ndarray:
        return a.reshape(Y, S, W, ny, nx)

    data = {
        "realistic": xr.DataArray(shaped(out.cube.realistic), dims=dims, attrs={"long_name": "realistic-start ensemble-mean anomaly", "units": out.summary["units"]}),
        "scrambled": xr.DataArray(shaped(out.cube.scrambled), dims=dims, attrs={"long_name": "scrambled-start ensemble-mean anomaly", "units": out.summary["units"]}),
        "observed": xr.DataArray(shaped(out.cube.observed), dims=dims, attrs={"long_name": "observed anomaly of the window", "units": out.summary["units"]}),
    }
    if out.cube.land is not None:
        data["land_z"] = xr.DataArray(
            out.cube.land.reshape(Y, S, ny, nx), dims=("year", "start_slot", "lat", "lon"), attrs={"long_name": "standardised initial land anomaly", "units": "1"}
        )
    coords = _cf_lat_lon(out.lat, out.lon)
    coords["year"] = xr.DataArray(out.years.astype(np.int32), dims="year")
    coords["start_slot"] = xr.DataArray(list(out.slots), dims="start_slot", attrs={"long_name": "calendar day (MM-DD) of the start date"})
    coords["window"] = xr.DataArray([w.label for w in out.windows], dims="window")
    ds = xr.Dataset(data, coords=coords, attrs={"Conventions": "CF-1.8", "title": "landlift anomaly cube", "source": f"landlift {code_version()}"})
    return ds


def _global_attrs(meta: dict[str, Any], *, title: str) -> dict[str, Any]:
    prov = meta["provenance"]
    attrs: dict[str, Any] = {
        "Conventions": "CF-1.8",
        "title": f"{title}: {meta['experiment']}",
        "institution": "landlift",
        "source": f"landlift {code_version()}",
        "history": history_line(f"scored experiment {meta['experiment']!r}"),
        "variable": meta["variable"],
        "variable_units": meta["units"],
        "bootstrap_resamples": meta["resamples"],
        "bootstrap_seed": meta["seed"],
        "bootstrap_confidence": meta["confidence"],
        "interval_method": meta["interval_method"],
        "fdr_alpha": meta["fdr_alpha"],
        "scramble": meta["scramble"],
        "comment": "Statistical evidence about hindcasts; not a guarantee of forecast quality.",
    }
    for role, sha in (prov.get("inputs_sha256") or {}).items():
        attrs[f"input_sha256_{role}"] = sha
    return attrs
