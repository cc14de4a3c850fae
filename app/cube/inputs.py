"""Open a hindcast pair, observations and an optional land state; align them; reduce tiles.

:func:`prepare` opens and cross-checks the files (variable, units, grid, start dates, lead
windows, observation coverage) and works out the sample layout: every common start date becomes
a (year, start slot) pair, a start slot being a calendar day shared across years.
:func:`reduce_tile` then turns one spatial tile of the inputs into anomalies shaped
``(n_years, n_slots, n_windows, n_cells)``, reading only that tile from disk.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from app.cube.sources import Source, check_not_all_nan, open_source, same_grid
from app.cube.units import Conversion, conversion, parse_units
from app.cube.windows import LeadWindow, default_windows, lead_indices
from app.errors import InputError
from app.stats.anomalies import anomalies, ensemble_mean, standardized_anomalies, window_means
from app.stats.resample import MIN_YEAR_BLOCKS

MIN_YEARS = MIN_YEAR_BLOCKS
#: default share of a window's days that must be observed for it to count (common practice: an
#: 80 % rule is usual for weekly and monthly means; no single published source fixes it)
DEFAULT_MIN_COVERAGE = 0.8
FloatArray = NDArray[np.float64]


@dataclass
class Prepared:
    """Opened, cross-checked inputs and their sample layout."""

    realistic: Source
    scrambled: Source
    observations: Source
    land_state: Source | None
    windows: list[LeadWindow]
    lead_index: list[NDArray[np.int64]]
    init_dates: NDArray[np.datetime64]  # common start dates
    years: NDArray[np.int64]
    slots: list[str]  # "MM-DD" of each start slot
    year_of: NDArray[np.int64]  # per common start date
    slot_of: NDArray[np.int64]
    pos_realistic: NDArray[np.int64]
    pos_scrambled: NDArray[np.int64]
    pos_land: NDArray[np.int64] | None  # -1 where the land state lacks that start
    obs_start: NDArray[np.int64]  # (n_init, n_windows) first obs index, -1 if not covered
    min_coverage: float  # share of a window's days that must be observed
    coverage_dropped: NDArray[np.int64]  # (n_windows,) start dates dropped by that rule
    to_units: dict[str, Conversion]
    units: str
    variable: str
    members_realistic: NDArray[np.int64] | None
    members_scrambled: NDArray[np.int64] | None
    warnings: list[str] = field(default_factory=list)

    @property
    def lat(self) -> FloatArray:
        return self.realistic.lat

    @property
    def lon(self) -> FloatArray:
        return self.realistic.lon

    @property
    def n_cells(self) -> int:
        return int(self.lat.size * self.lon.size)

    def close(self) -> None:
        for src in (self.realistic, self.scrambled, self.observations, self.land_state):
            if src is not None:
                src.close()

    def summary(self) -> dict[str, object]:
        return {
            "variable": self.variable,
            "units": self.units,
            "years": [int(y) for y in self.years],
            "start_slots": self.slots,
            "n_start_dates": int(self.init_dates.size),
            "windows": [w.to_dict() for w in self.windows],
            "members": {
                "realistic": int(self.realistic.members or 0),
                "scrambled": int(self.scrambled.members or 0),
            },
            "grid": {"lat": int(self.lat.size), "lon": int(self.lon.size)},
            "coverage": {
                "min_fraction": self.min_coverage,
                "dropped_start_dates": {
                    w.label: int(d) for w, d in zip(self.windows, self.coverage_dropped, strict=True)
                },
            },
            "warnings": list(self.warnings),
        }


def prepare(
    realistic: str | Path,
    scrambled: str | Path,
    observations: str | Path,
    land_state: str | Path | None = None,
    *,
    variable: str | None = None,
    windows: list[LeadWindow] | None = None,
    equalize_members: bool = False,
    seed: int = 1234,
    min_coverage: float = DEFAULT_MIN_COVERAGE,
) -> Prepared:
    """Open and cross-check the inputs; InputError naming file, variable and problem.

    An observed window counts only when at least ``min_coverage`` of its days are present
    (in the file's dates, and per cell when the tile is reduced)."""
    opened: list[Source] = []
    try:
        real = _open(realistic, "hindcast", variable, opened)
        scr = _open(scrambled, "hindcast", variable or real.variable, opened)
        obs = _open(observations, "observations", variable or real.variable, opened)
        land = _open(land_state, "land_state", None, opened) if land_state is not None else None
        if land is not None:
            check_not_all_nan(land)
        return _cross_check(
            real, scr, obs, land, windows=windows, equalize=equalize_members, seed=seed,
            min_coverage=min_coverage,
        )
    except Exception:
        for src in opened:
            src.close()
        raise


def _open(path: str | Path, role: str, variable: str | None, opened: list[Source]) -> Source:
    try:
        src = open_source(path, role=role, variable=variable)
    except InputError as exc:
        # a differently named observed variable is fine when the file holds only one
        if variable is None or role != "observations" or "has no variable" not in exc.message:
            raise
        src = open_source(path, role=role, variable=None)
        src.substitutes = variable
        src.warnings.append(f"{src.name}: variable {variable!r} absent; scoring {src.variable!r} instead")
    opened.append(src)
    return src


def _cross_check(
    real: Source,
    scr: Source,
    obs: Source,
    land: Source | None,
    *,
    windows: list[LeadWindow] | None,
    equalize: bool,
    seed: int,
    min_coverage: float,
) -> Prepared:
    warnings = [w for s in (real, scr, obs, land) if s is not None for w in s.warnings]
    target = parse_units(real.units, file=real.name, variable=real.variable)
    to_units = {"realistic": Conversion()}
    for key, src in (("scrambled", scr), ("observations", obs)):
        unit = parse_units(src.units, file=src.name, variable=src.variable)
        try:
            to_units[key] = conversion(unit, target, file=src.name, variable=src.variable, target_file=real.name)
        except InputError as exc:
            if src.substitutes is None:
                raise
            raise InputError(
                f"has no variable {src.substitutes!r}; its only variable {src.variable!r} is not "
                f"the same quantity ({exc.message})",
                file=src.name,
                variable=src.substitutes,
            ) from exc
    for src in (scr, obs) + ((land,) if land is not None else ()):
        same_grid(real, src)

    assert real.init_dates is not None and scr.init_dates is not None
    common = np.intersect1d(real.init_dates, scr.init_dates)
    if common.size == 0:
        raise InputError(
            f"start dates ({_date_range(scr.init_dates)}) do not overlap those of {real.name} "
            f"({_date_range(real.init_dates)})",
            file=scr.name,
            variable=scr.variable,
        )
    dropped = real.init_dates.size + scr.init_dates.size - 2 * common.size
    if dropped:
        warnings.append(f"{dropped} start date(s) not shared by both hindcasts were left out")

    assert real.lead_days is not None and scr.lead_days is not None
    max_lead = int(min(real.lead_days[-1], scr.lead_days[-1]))
    wins = windows or default_windows(max_lead)
    lead_index = lead_indices(wins, real.lead_days, file=real.name, variable=real.variable)
    lead_index_scr = lead_indices(wins, scr.lead_days, file=scr.name, variable=scr.variable)
    if any(not np.array_equal(a, b) for a, b in zip(lead_index, lead_index_scr, strict=True)):
        raise InputError(f"lead days differ from those of {real.name}", file=scr.name, variable=scr.variable)

    obs_start, coverage_dropped = _observation_index(obs, common, wins, min_coverage=min_coverage)
    covered = (obs_start >= 0).any(axis=1)
    if not covered.any():
        raise InputError(
            f"dates ({_date_range(obs.dates)}) cover none of the valid dates of the hindcast windows "
            f"(starts {_date_range(common)})",
            file=obs.name,
            variable=obs.variable,
        )
    if not covered.all():
        warnings.append(f"{int((~covered).sum())} start date(s) have no observed window and give no samples")

    years_all = common.astype("datetime64[Y]").astype(np.int64) + 1970
    month_day = np.array([str(d)[5:10] for d in common])
    years, year_of = np.unique(years_all, return_inverse=True)
    slots, slot_of = np.unique(month_day, return_inverse=True)
    scored_years = np.unique(year_of[covered])
    if scored_years.size < MIN_YEARS:
        raise InputError(
            f"only {scored_years.size} year(s) of start dates are shared by both hindcasts and "
            f"covered by {obs.name}; at least {MIN_YEARS} are needed",
            file=real.name,
            variable=real.variable,
        )
    per_slot = np.bincount(slot_of, minlength=slots.size)
    thin = [str(s) for s, n in zip(slots, per_slot, strict=True) if n < MIN_YEARS]
    if thin:
        warnings.append(
            f"start slot(s) {', '.join(thin)} have fewer than {MIN_YEARS} years: their climatology "
            "rests on few years"
        )

    pos_land = None
    if land is not None:
        assert land.init_dates is not None
        pos_land = _positions(land.init_dates, common)
        if (pos_land < 0).all():
            raise InputError(
                f"start dates ({_date_range(land.init_dates)}) do not overlap the hindcast starts",
                file=land.name,
                variable=land.variable,
            )

    m_real, m_scr = _members(real, scr, equalize=equalize, seed=seed, warnings=warnings)
    return Prepared(
        realistic=real,
        scrambled=scr,
        observations=obs,
        land_state=land,
        windows=wins,
        lead_index=lead_index,
        init_dates=common,
        years=years,
        slots=[str(s) for s in slots],
        year_of=year_of,
        slot_of=slot_of,
        pos_realistic=_positions(real.init_dates, common),
        pos_scrambled=_positions(scr.init_dates, common),
        pos_land=pos_land,
        obs_start=obs_start,
        min_coverage=min_coverage,
        coverage_dropped=coverage_dropped,
        to_units=to_units,
        units=real.units,
        variable=real.variable,
        members_realistic=m_real,
        members_scrambled=m_scr,
        warnings=warnings,
    )


def _members(
    real: Source, scr: Source, *, equalize: bool, seed: int, warnings: list[str]
) -> tuple[NDArray[np.int64] | None, NDArray[np.int64] | None]:
    m1, m2 = int(real.members or 0), int(scr.members or 0)
    if m1 == m2:
        return None, None
    if not equalize:
        warnings.append(
            f"member counts differ (realistic {m1}, scrambled {m2}); ensemble-mean correlation grows "
            "with ensemble size: consider equalize_members"
        )
        return None, None
    m = min(m1, m2)
    rng = np.random.default_rng(seed)
    pick = [np.sort(rng.choice(k, size=m, replace=False)) for k in (m1, m2)]
    warnings.append(f"members equalized to {m} per experiment (seed {seed})")
    return pick[0], pick[1]


def _positions(dates: NDArray[np.datetime64], wanted: NDArray[np.datetime64]) -> NDArray[np.int64]:
    idx = np.searchsorted(dates, wanted)
    idx = np.clip(idx, 0, max(dates.size - 1, 0))
    return np.where(dates[idx] == wanted, idx, -1).astype(np.int64)


def required_days(window: LeadWindow, min_coverage: float) -> int:
    """Days of ``window`` that must be observed (at least one)."""
    return max(1, int(np.ceil(min_coverage * window.days - 1e-9)))


def _observation_index(
    obs: Source, inits: NDArray[np.datetime64], wins: list[LeadWindow], *, min_coverage: float
) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """First observation index of each (start, window), -1 unless at least ``min_coverage`` of
    its days are in the file; and per window how many starts had some days but too few."""
    dates = obs.dates
    assert dates is not None
    full = np.arange(dates[0], dates[-1] + np.timedelta64(1, "D"))
    present = np.zeros(full.size, dtype=bool)
    present[(dates - dates[0]).astype(np.int64)] = True
    csum = np.concatenate([[0], np.cumsum(present)])
    out = np.full((inits.size, len(wins)), -1, dtype=np.int64)
    dropped = np.zeros(len(wins), dtype=np.int64)
    total = np.concatenate([csum, np.full(1, csum[-1])])
    for k, w in enumerate(wins):
        i0 = ((inits + np.timedelta64(w.first_day - 1, "D")) - dates[0]).astype(np.int64)
        i1 = i0 + w.days
        # days present inside the window (a window may run past either end of the record)
        lo, hi = np.clip(i0, 0, full.size), np.clip(i1, 0, full.size)
        have = total[hi] - total[lo]
        enough = have >= required_days(w, min_coverage)
        out[:, k] = np.where(enough, i0, -1)
        dropped[k] = int(((have > 0) & ~enough).sum())
    return out, dropped


def _date_range(dates: NDArray[np.datetime64] | None) -> str:
    if dates is None or dates.size == 0:
        return "none"
    return f"{dates[0]}..{dates[-1]}, {dates.size} dates"


@dataclass
class TileAnomalies:
    """Anomalies of one tile: ``(n_years, n_slots, n_windows, n_cells)``; land ``(Y, S, n_cells)``."""

    realistic: FloatArray
    scrambled: FloatArray
    observed: FloatArray
    land: FloatArray | None
    #: per window, the (start, cell) samples whose observed window had too few days
    coverage_dropped: NDArray[np.int64]


def reduce_tile(prep: Prepared, *, lat: slice, lon: slice, leave_one_out: bool = True) -> TileAnomalies:
    """Read one tile of every input and reduce it to anomalies (see module docstring)."""
    x1 = _hindcast_windows(prep, prep.realistic, prep.pos_realistic, prep.members_realistic, "realistic", lat, lon)
    x2 = _hindcast_windows(prep, prep.scrambled, prep.pos_scrambled, prep.members_scrambled, "scrambled", lat, lon)
    y, dropped = _observed_windows(prep, lat, lon)
    land = None
    if prep.land_state is not None and prep.pos_land is not None:
        raw = prep.land_state.read(lat=lat, lon=lon)  # (init, lat, lon)
        n_cells = raw.shape[1] * raw.shape[2]
        vals = np.full((prep.init_dates.size, n_cells), np.nan)
        have = prep.pos_land >= 0
        vals[have] = raw.reshape(raw.shape[0], n_cells)[prep.pos_land[have]]
        land = standardized_anomalies(_to_year_slot(prep, vals))
    return TileAnomalies(
        realistic=anomalies(_to_year_slot(prep, x1), leave_one_out=leave_one_out),
        scrambled=anomalies(_to_year_slot(prep, x2), leave_one_out=leave_one_out),
        observed=anomalies(_to_year_slot(prep, y), leave_one_out=leave_one_out),
        land=land,
        coverage_dropped=dropped,
    )


def _hindcast_windows(
    prep: Prepared,
    src: Source,
    positions: NDArray[np.int64],
    members: NDArray[np.int64] | None,
    key: str,
    lat: slice,
    lon: slice,
) -> FloatArray:
    raw = src.read(lat=lat, lon=lon, members=members)  # (init, member, lead, lat, lon), native dtype
    if not (positions.size == raw.shape[0] and np.array_equal(positions, np.arange(raw.shape[0]))):
        raw = raw[positions]  # the common start dates only
    ens = ensemble_mean(raw, axis=1)  # (init, lead, lat, lon) float64
    del raw
    win = window_means(ens, prep.lead_index, axis=1)  # (init, window, lat, lon)
    win = prep.to_units[key].apply(win)  # linear units commute with means
    return win.reshape(win.shape[0], win.shape[1], -1)


def _observed_windows(prep: Prepared, lat: slice, lon: slice) -> tuple[FloatArray, NDArray[np.int64]]:
    """Observed window means ``(n_init, n_windows, n_cells)``, NaN where fewer than the required
    share of the window's days are finite in that cell; and per window the (start, cell)
    samples that rule dropped."""
    raw = prep.observations.read(lat=lat, lon=lon, convert=prep.to_units["observations"])
    dates = prep.observations.dates
    assert dates is not None
    flat = raw.reshape(raw.shape[0], -1)  # (observed day, cells): absent days are not filled in
    finite = np.isfinite(flat)
    csum = np.concatenate([np.zeros((1, flat.shape[1])), np.cumsum(np.where(finite, flat, 0.0), axis=0)])
    ccnt = np.concatenate([np.zeros((1, flat.shape[1])), np.cumsum(finite, axis=0)])
    out = np.full((prep.init_dates.size, len(prep.windows), flat.shape[1]), np.nan)
    dropped = np.zeros(len(prep.windows), dtype=np.int64)
    for k, w in enumerate(prep.windows):
        start = prep.obs_start[:, k]
        ok = start >= 0
        first = dates[0] + start[ok].astype("timedelta64[D]")  # obs_start counts calendar days
        s0 = np.searchsorted(dates, first)
        s1 = np.searchsorted(dates, first + np.timedelta64(w.days - 1, "D"), side="right")
        total = csum[s1] - csum[s0]
        count = ccnt[s1] - ccnt[s0]
        need = required_days(w, prep.min_coverage)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[ok, k] = np.where(count >= need, total / count, np.nan)
        dropped[k] = int(((count > 0) & (count < need)).sum())
    return out, dropped


def _to_year_slot(prep: Prepared, values: FloatArray) -> FloatArray:
    """``(n_init, ...)`` -> ``(n_years, n_slots, ...)``, NaN where a year lacks a slot."""
    out = np.full((prep.years.size, len(prep.slots)) + values.shape[1:], np.nan)
    out[prep.year_of, prep.slot_of] = values
    return out
