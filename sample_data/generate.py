"""Deterministic generator of the landlift sample scenario (synthetic, fictional continent).

The scenario is invented from scratch; no real place, model or data set is behind it.

Domain
    A rectangular, all-land mid-latitude continent on a regular grid of 10 latitudes
    (35.0 to 56.6 N, step 2.4) by 16 longitudes (5.0 to 42.5 E, step 2.5). The columns form three
    climate zones: arid west (lon 5-15 E, 5 columns), a semi-arid belt (lon 17.5-30 E, 6 columns)
    and a humid east (lon 32.5-42.5 E, 5 columns). ``REGION_COLUMNS`` gives the column indices.

Time layout
    20 hindcast years (2001-2020), 4 start dates per year (1 May, 16 May, 1 June, 16 June),
    4 ensemble members, 30 daily lead days. Lead day d is the d-th day after initialisation, so
    its valid date is init + d - 1. Every year is simulated independently from 30 April (the day
    before the first start) to 15 July (the last start + 29 days).

Physics (all anomalies in standardised units unless stated)
    * True soil-moisture anomaly ``s`` per cell: a stationary AR(1) process in daily steps,
      ``s[t] = phi * s[t-1] + sqrt(1 - phi**2) * eps[t]``, ``phi = exp(-1 / tau_land)``, with
      e-folding time ``tau_land`` of 70-90 days in the arid west, 42-45 days in the belt and 7-9
      days in the humid east (root-zone memory is longest where it is dry). The innovations are
      spatially correlated (Gaussian smoothing of white noise, length ``LAND_SMOOTH_CELLS`` = 2.5
      cells, about 600 km, renormalised to unit variance), so ``s`` has unit variance everywhere.
    * Atmosphere ``a`` (K) = synoptic weather (AR(1), e-folding 3 days, ``WEATHER_STD`` = 1.0 K,
      smoothing length 1 cell) + a large-scale circulation anomaly (AR(1), e-folding 4 days,
      ``CIRCULATION_STD`` = 2.0 K, smoothing length 4 cells). The circulation dominates the
      regional means.
    * Land-forced temperature (K). Evaporation is limited by soil water below a threshold and by
      energy above it, so the equilibrium response is ``coupling(lon) * (G(s) - E[G])`` with
      ``G(s) = k log(1 + exp((theta - s) / k))``, ``theta`` = ``DRY_THRESHOLD`` = 1.0 and
      ``k`` = ``THRESHOLD_SHARPNESS`` = 0.8: about ``coupling`` K per unit drying where the soil is
      dry (slope 0.98 at s = -2), 0.78 at s = 0, 0.22 at s = +2 (wet soil hardly matters). ``E[G]``
      is the mean over a standard normal ``s`` (Gauss-Hermite quadrature). The near-surface air
      adjusts to this forcing with e-folding ``ADJUST_TAU_DAYS`` = 5 days (boundary-layer and
      surface memory): ``l[t] = l[t-1] + (1 - exp(-1/5)) * (forcing[t] - l[t-1])``. The coupling is
      1.5-1.75 K in the belt (transitional regime), 0.25-0.45 K in the arid west (little water to
      evaporate) and 0.05-0.1 K in the humid east (energy-limited).
    * Observed daily-mean temperature (K): ``tas = seasonal_cycle(lat, lon, day of year) + a + l``.
      The seasonal cycle is a cosine in day of year peaking on 19 July, colder to the north,
      warmer in the arid west; it spans about 283-301 K over May to mid July. In the belt the
      land-forced part is about 30 % of the variance of a weekly regional mean and 35 % of that of
      the weeks 3-4 mean (the atmospheric part averages down over 14 days).
    * Hindcasts: initial land state. At each start the initial land anomaly of member m is
      ``s0 = s_source + ANALYSIS_ERROR * e + MEMBER_SPREAD * p_m``, where ``e`` is an analysis
      error shared by all members (and by both experiments) and ``p_m`` a member perturbation.
      The source is the true anomaly of the day before the start (the state known at 00 UTC of
      the start date): of the same year for the *realistic* experiment, of year (i + 7) mod 20 at
      the same start date for the *scrambled* experiment (a fixed derangement of years). It then
      evolves as ``s_m[d] = phi * s_m[d-1] + MEMBER_LAND_NOISE * sqrt(1 - phi**2) * eta``.
    * Hindcasts: atmosphere. Both experiments start from the observed atmospheric state, so both
      know the weather and circulation of the first days. A member's atmospheric anomaly at lead d
      is ``rho(d) * a_obs[valid date] + sqrt(1 - rho(d)**2) * a_own[d]``, where ``a_own`` is the
      member's own atmosphere (independent processes with the observed statistics) and
      ``rho(d)**2 = 1 - e(d)`` with a logistic growth of the error-variance fraction
      ``e(d) = 1 / (1 + (1 / E0 - 1) * exp(-r * d))``, ``E0`` = 0.08, ``r`` = 0.4 per day (error
      doubling in under two days, saturated by week 3; logistic error growth is common practice).
      rho is 0.94 on day 1, 0.64 on day 7, 0.42 on day 10, 0.20 on day 14 and 0.05 on day 21.
      The scrambled twin of a member starts from the same atmospheric state and perturbations;
      its own atmosphere is ``kappa(d) * a_own(realistic) + sqrt(1 - kappa(d)**2) * (independent)``,
      with kappa from the same logistic growth started at ``TWIN_DIFFERENCE_DAY0`` = 1e-4 (kappa
      is 0.99 on day 14, 0.83 on day 21 and 0.35 on day 28: the twins drift apart in weeks 3-4).
    * Hindcasts: land-forced temperature. The model's land-forced part starts from the observed
      one at the start (it is in the observed atmospheric state) and relaxes toward the model's
      own forcing ``coupling * (G(s_m[d]) - E[G])`` with the same 5-day e-folding. So in week 1
      the scrambled run still carries about half of the true land signal, and the wrong land
      state of the other year takes over from week 2.
    * Model temperature: ``seasonal_cycle + MODEL_BIAS + DRIFT_PER_DAY * d + atmosphere + land
      part``; the constant bias (-0.4 K) and lead-dependent drift (+0.03 K per lead day) are what
      the per-lead hindcast climatology has to remove. The land noise of the two experiments is
      independent.
    * Land state file: the true initial root-zone soil moisture at each start (same day as the
      hindcast source state), ``mrsos = mean(lon, date) * exp(SOIL_RELATIVE_STD * s - ...)`` in
      kg m-2: a climatological mean from about 20 kg m-2 in the west to 300 kg m-2 in the east,
      drying by about 10 % from May to mid June, times a positive multiplicative anomaly.

Expected outcome (DESIGN section 7 and issue 7): both experiments share the atmospheric skill of
weeks 1-2 (regional-mean ACC above 0.9 in week 1, about 0.45-0.7 in week 2); the gain
ACC(realistic) - ACC(scrambled) is small in week 1, grows through week 2 and is largest in the belt
at weeks 3-4 (about +0.25 for the belt's regional mean, larger after large initial anomalies), small
in the far west and zero in the humid east. ``sample_data/README.md`` gives the measured numbers
of the committed files and the spread over other seeds.

Determinism: one ``numpy.random.SeedSequence(SEED)`` spawns an independent ``default_rng`` stream
per noise component; values do not depend on wall-clock time or on the output folder. Spatial
smoothing is done with explicit shifted sums (no BLAS). Values are stored CF-packed (int16 with
``scale_factor``/``add_offset``), which also absorbs last-bit differences of transcendental
functions between CPUs. The random streams are those of the installed numpy version.

Usage: ``.venv/bin/python sample_data/generate.py [--out DIR]`` (default: this folder), or
``write_sample(out_dir)`` from Python.
"""

from __future__ import annotations

import argparse
import math
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

SEED = 40  # chosen among seeds 1-40 as a typical draw (sample_data/README.md, "Other seeds")

YEARS: tuple[int, ...] = tuple(range(2001, 2021))
START_MONTH_DAYS: tuple[tuple[int, int], ...] = ((5, 1), (5, 16), (6, 1), (6, 16))
N_MEMBERS = 4
N_LEADS = 30
SCRAMBLE_SHIFT = 7  # scrambled year i takes the land state of year (i + 7) mod 20

LAT = np.round(35.0 + 2.4 * np.arange(10), 6)
LON = np.round(5.0 + 2.5 * np.arange(16), 6)

# Column indices of the three climate zones (west third, middle belt, east third).
REGION_COLUMNS: dict[str, tuple[int, ...]] = {
    "west": tuple(range(0, 5)),
    "belt": tuple(range(5, 11)),
    "east": tuple(range(11, 16)),
}

# Profiles along longitude (piecewise linear between anchors, constant beyond them).
_PROFILE_LON = (5.0, 12.5, 15.0, 17.5, 23.75, 30.0, 32.5, 42.5)
_TAU_LAND_DAYS = (90.0, 80.0, 70.0, 45.0, 45.0, 42.0, 9.0, 7.0)
_COUPLING_K = (0.25, 0.35, 0.45, 1.5, 1.75, 1.5, 0.1, 0.05)
_SOIL_MEAN_LON = (5.0, 15.0, 23.75, 32.5, 42.5)
_SOIL_MEAN_KG_M2 = (20.0, 45.0, 120.0, 230.0, 300.0)

# Atmosphere: local synoptic weather (fast) plus a large-scale circulation anomaly (slower).
WEATHER_TAU_DAYS = 3.0
WEATHER_STD = 1.0  # K, daily
WEATHER_SMOOTH_CELLS = 1.0
CIRCULATION_TAU_DAYS = 4.0
CIRCULATION_STD = 2.0  # K, daily
CIRCULATION_SMOOTH_CELLS = 4.0
# Atmospheric predictability of the hindcasts: the error-variance fraction of a member grows
# logistically with lead, e(d) = 1 / (1 + (1 / E0 - 1) exp(-GROWTH d)); the member's atmosphere
# tracks the observed one with correlation rho(d) = sqrt(1 - e(d)).
ERROR_FRACTION_DAY0 = 0.08
ERROR_GROWTH_PER_DAY = 0.4
# The two experiments of a member start from the same atmospheric state and perturbations; their
# atmospheres diverge by the same logistic growth from a smaller initial difference.
TWIN_DIFFERENCE_DAY0 = 0.0001
# Land-temperature coupling with a dry threshold: T_land = coupling * (G(s) - E[G]) with
# G(s) = k log(1 + exp((theta - s) / k)): slope -coupling for s well below theta, flat above.
DRY_THRESHOLD = 1.0  # theta, standardised soil-moisture anomaly
THRESHOLD_SHARPNESS = 0.8  # k, standardised units
LAND_SMOOTH_CELLS = 2.5
# Near-surface temperature adjusts to the land forcing with this e-folding time (boundary layer
# and soil-temperature memory): the land-forced part relaxes toward coupling * (G(s) - E[G]).
ADJUST_TAU_DAYS = 5.0
ANALYSIS_ERROR = 0.3  # standardised units, shared by the members of a start
MEMBER_SPREAD = 0.1  # standardised units, member perturbation of the initial land state
MEMBER_LAND_NOISE = 0.5  # fraction of the true land innovation amplitude
MODEL_BIAS = -0.4  # K
DRIFT_PER_DAY = 0.03  # K per lead day
SOIL_RELATIVE_STD = 0.2
KELVIN_OFFSET = 273.15

SPIN_START = (4, 30)  # first simulated day of each year
SPIN_DAYS = 77  # 30 April .. 15 July

ROLES = ("realistic", "scrambled", "observations", "land_state")
SOURCE = "landlift sample scenario generator (synthetic, fictional continent)"
HISTORY = f"created by sample_data/generate.py with seed {SEED} (synthetic values)"
TIME_UNITS = "days since 2001-01-01"

# CF packing: (scale_factor, add_offset) per stored quantity.
_PACK = {
    "tas_K": (0.01, 290.0),
    "tas_degC": (0.01, 20.0),
    "mrsos": (0.02, 300.0),
}
_FILL = -32767


@dataclass(frozen=True)
class Scenario:
    """The simulated arrays (float64) before packing."""

    init_dates: np.ndarray  # (n_init,) datetime64[D], ordered by year then start
    obs_dates: np.ndarray  # (n_obs,) datetime64[D]
    realistic: np.ndarray  # (n_init, member, lead, lat, lon) K
    scrambled: np.ndarray  # (n_init, member, lead, lat, lon) K
    observations: np.ndarray  # (n_obs, lat, lon) degC
    land_state: np.ndarray  # (n_init, lat, lon) kg m-2


def _profile(anchors_x: tuple[float, ...], anchors_y: tuple[float, ...]) -> np.ndarray:
    """A longitude profile broadcast to (lat, lon)."""
    column = np.interp(LON, np.asarray(anchors_x), np.asarray(anchors_y))
    return np.broadcast_to(column, (LAT.size, LON.size)).copy()


def cell_parameters() -> dict[str, np.ndarray]:
    """Per-cell physical parameters, each shaped (lat, lon)."""
    return {
        "tau_land": _profile(_PROFILE_LON, _TAU_LAND_DAYS),
        "coupling": _profile(_PROFILE_LON, _COUPLING_K),
        "soil_mean": _profile(_SOIL_MEAN_LON, _SOIL_MEAN_KG_M2),
    }


def _smooth_axis(x: np.ndarray, *, axis: int, length: float) -> np.ndarray:
    """Gaussian smoothing along one axis by explicit shifted sums, symmetric edges."""
    half = math.ceil(3.0 * length)
    weights = [math.exp(-0.5 * (k / length) ** 2) for k in range(-half, half + 1)]
    total = sum(weights)
    weights = [w / total for w in weights]
    n = x.shape[axis]
    pad = [(0, 0)] * x.ndim
    pad[axis] = (half, half)
    padded = np.pad(x, pad, mode="symmetric")
    out = np.zeros_like(x)
    for offset, w in enumerate(weights):
        out += w * np.take(padded, np.arange(offset, offset + n), axis=axis)
    return out


def _correlated_noise(
    rng: np.random.Generator, shape: tuple[int, ...], *, length: float
) -> np.ndarray:
    """Standard-normal noise with Gaussian spatial correlation on the last two axes (lat, lon).

    Each cell has unit variance: the smoothed field is divided by the exact per-cell standard
    deviation of the (separable, linear) smoothing operator.
    """
    white = rng.standard_normal(shape)
    smooth = _smooth_axis(_smooth_axis(white, axis=-2, length=length), axis=-1, length=length)
    op_lat = _smooth_axis(np.eye(LAT.size), axis=0, length=length)
    op_lon = _smooth_axis(np.eye(LON.size), axis=0, length=length)
    std = np.sqrt(np.outer((op_lat**2).sum(axis=1), (op_lon**2).sum(axis=1)))
    return smooth / std


def _day_of_year(dates: np.ndarray) -> np.ndarray:
    return (dates - dates.astype("datetime64[Y]")).astype(np.int64) + 1


def seasonal_cycle(dates: np.ndarray) -> np.ndarray:
    """Climatological daily-mean temperature (K), shaped dates.shape + (lat, lon)."""
    doy = _day_of_year(np.asarray(dates, dtype="datetime64[D]")).astype(float)
    lat = LAT[:, None]
    lon = LON[None, :]
    annual_mean = 287.0 - 0.4 * (lat - 46.0) + 2.0 * np.clip((20.0 - lon) / 15.0, 0.0, 1.0)
    amplitude = 8.0 + 0.05 * (lat - 46.0)
    phase = np.cos(2.0 * np.pi * (doy - 200.0) / 365.25)
    return annual_mean + amplitude * phase[..., None, None]


def _soil_mean(dates: np.ndarray, soil_mean: np.ndarray) -> np.ndarray:
    """Climatological root-zone soil moisture (kg m-2): drying by about 10 % from 1 May to mid June."""
    doy = _day_of_year(dates).astype(float)
    factor = 1.0 - 0.1 * (doy - 121.0) / 46.0
    return soil_mean * factor[:, None, None]


def dry_response(s: np.ndarray) -> np.ndarray:
    """G(s) = k log(1 + exp((theta - s) / k)): about theta - s for dry soil, about 0 for wet soil."""
    k = THRESHOLD_SHARPNESS
    return k * np.logaddexp(0.0, (DRY_THRESHOLD - np.asarray(s, dtype=np.float64)) / k)


def mean_dry_response() -> float:
    """E[G(s)] for a standard-normal s (Gauss-Hermite quadrature, 64 nodes)."""
    nodes, weights = np.polynomial.hermite_e.hermegauss(64)
    return float((weights * dry_response(nodes)).sum() / weights.sum())


def _logistic_correlation(lead: np.ndarray, day0: float) -> np.ndarray:
    d = np.asarray(lead, dtype=np.float64)
    error = 1.0 / (1.0 + (1.0 / day0 - 1.0) * np.exp(-ERROR_GROWTH_PER_DAY * d))
    return np.sqrt(1.0 - error)


def atmosphere_correlation(lead: np.ndarray) -> np.ndarray:
    """rho(d): correlation of a member's atmospheric anomaly with the observed one at lead day d."""
    return _logistic_correlation(lead, ERROR_FRACTION_DAY0)


def twin_correlation(lead: np.ndarray) -> np.ndarray:
    """kappa(d): correlation of the two experiments' atmospheric errors at lead day d."""
    return _logistic_correlation(lead, TWIN_DIFFERENCE_DAY0)


def _ar1(
    rng: np.random.Generator, shape: tuple[int, ...], *, tau: float, std: float, length: float
) -> np.ndarray:
    """Stationary AR(1) along axis 0 (daily steps, e-folding ``tau`` days), spatially correlated
    on the last two axes, standard deviation ``std``; the first step is drawn stationary."""
    eps = _correlated_noise(rng, shape, length=length)
    phi = math.exp(-1.0 / tau)
    innov = math.sqrt(1.0 - phi**2)
    out = np.empty(shape)
    out[0] = eps[0]
    for t in range(1, shape[0]):
        out[t] = phi * out[t - 1] + innov * eps[t]
    return std * out


def simulate(seed: int = SEED) -> Scenario:
    """Run the scenario; deterministic for a given seed."""
    params = cell_parameters()
    phi_land = np.exp(-1.0 / params["tau_land"])
    innov_land = np.sqrt(1.0 - phi_land**2)
    coupling = params["coupling"]
    g_mean = mean_dry_response()

    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(11)]
    rng_land, rng_weather, rng_circ, rng_analysis, rng_member = streams[:5]
    rng_exp = {"realistic": streams[5:8], "scrambled": streams[8:11]}

    n_years, n_starts = len(YEARS), len(START_MONTH_DAYS)
    nlat, nlon = LAT.size, LON.size
    grid = (nlat, nlon)

    # Truth: daily land, weather and circulation anomalies per year, 30 April .. 15 July.
    land = np.empty((n_years, SPIN_DAYS, *grid))
    eps_land = _correlated_noise(rng_land, (SPIN_DAYS, n_years, *grid), length=LAND_SMOOTH_CELLS)
    land[:, 0] = eps_land[0]
    for t in range(1, SPIN_DAYS):
        land[:, t] = phi_land * land[:, t - 1] + innov_land * eps_land[t]
    weather = _ar1(
        rng_weather, (SPIN_DAYS, n_years, *grid),
        tau=WEATHER_TAU_DAYS, std=WEATHER_STD, length=WEATHER_SMOOTH_CELLS,
    )
    circulation = _ar1(
        rng_circ, (SPIN_DAYS, n_years, *grid),
        tau=CIRCULATION_TAU_DAYS, std=CIRCULATION_STD, length=CIRCULATION_SMOOTH_CELLS,
    )
    atmosphere = np.moveaxis(weather + circulation, 0, 1)  # (year, day, lat, lon) K
    # Land-forced temperature (K, dry soil is warm), relaxing toward its equilibrium.
    alpha = 1.0 - math.exp(-1.0 / ADJUST_TAU_DAYS)
    forcing = coupling * (dry_response(land) - g_mean)
    land_effect = np.empty_like(forcing)
    land_effect[:, 0] = forcing[:, 0]
    for t in range(1, SPIN_DAYS):
        land_effect[:, t] = (1.0 - alpha) * land_effect[:, t - 1] + alpha * forcing[:, t]

    spin0 = np.array([np.datetime64(f"{y}-{SPIN_START[0]:02d}-{SPIN_START[1]:02d}") for y in YEARS])
    days = spin0[:, None] + np.arange(SPIN_DAYS)  # (year, day) datetime64[D]
    init_dates = np.array(
        [np.datetime64(f"{y}-{m:02d}-{d:02d}") for y in YEARS for (m, d) in START_MONTH_DAYS]
    ).reshape(n_years, n_starts)
    init_index = (init_dates - spin0[:, None]).astype(np.int64)  # (year, start), index of init day
    if not np.all(init_index - 1 + N_LEADS <= SPIN_DAYS - 1) or np.any(init_index < 1):
        raise ValueError(f"start dates {init_dates[0]} do not fit the simulated period")

    # Observations: every valid date the hindcasts need (first start .. last start + 29 days).
    first_obs = int(init_index.min())
    last_obs = int(init_index.max()) - 1 + N_LEADS
    span = slice(first_obs, last_obs + 1)
    obs_days = days[:, span]
    obs_k = seasonal_cycle(obs_days) + atmosphere[:, span] + land_effect[:, span]
    observations = (obs_k - KELVIN_OFFSET).reshape(-1, *grid)

    # Initial land states (the day before each start), shaped (year, start, lat, lon).
    yi = np.arange(n_years)[:, None]
    land0 = land[yi, init_index - 1]
    effect0 = land_effect[yi, init_index - 1]  # in the observed atmospheric state at the start
    soil_mean0 = _soil_mean(init_dates.reshape(-1), params["soil_mean"]).reshape(
        n_years, n_starts, *grid
    )
    land_state = soil_mean0 * np.exp(SOIL_RELATIVE_STD * land0 - 0.5 * SOIL_RELATIVE_STD**2)

    shape = (n_years, n_starts, N_MEMBERS, *grid)
    analysis_error = ANALYSIS_ERROR * _correlated_noise(
        rng_analysis, (n_years, n_starts, 1, *grid), length=LAND_SMOOTH_CELLS
    )
    member_pert = MEMBER_SPREAD * _correlated_noise(rng_member, shape, length=LAND_SMOOTH_CELLS)

    # Valid dates of every (year, start, lead): the seasonal cycle is shared by both experiments.
    leads = np.arange(1, N_LEADS + 1)
    valid_index = init_index[:, :, None] - 1 + leads
    valid_dates = days[yi[:, :, None], valid_index]  # (year, start, lead)
    clim = seasonal_cycle(valid_dates)  # (year, start, lead, lat, lon)
    atm_true = atmosphere[yi[:, :, None], valid_index]  # (year, start, lead, lat, lon)
    drift = MODEL_BIAS + DRIFT_PER_DAY * leads
    rho = atmosphere_correlation(leads)
    kappa = twin_correlation(leads)[:, None, None, None, None, None]

    hindcasts: dict[str, np.ndarray] = {}
    own_realistic = np.zeros(0)
    for name, source_year in (
        ("realistic", np.arange(n_years)),
        ("scrambled", (np.arange(n_years) + SCRAMBLE_SHIFT) % n_years),
    ):
        rng_l, rng_w, rng_c = rng_exp[name]
        s = land0[source_year][:, :, None] + analysis_error + member_pert
        eta = _correlated_noise(rng_l, (N_LEADS, *shape), length=LAND_SMOOTH_CELLS)
        # The member's own atmosphere: independent processes with the observed statistics.
        own = _ar1(
            rng_w, (N_LEADS, *shape), tau=WEATHER_TAU_DAYS, std=WEATHER_STD, length=WEATHER_SMOOTH_CELLS
        ) + _ar1(
            rng_c, (N_LEADS, *shape),
            tau=CIRCULATION_TAU_DAYS, std=CIRCULATION_STD, length=CIRCULATION_SMOOTH_CELLS,
        )
        if name == "realistic":
            own_realistic = own
        else:  # the scrambled twin shares the realistic member's error until the two diverge
            own = kappa * own_realistic + np.sqrt(1.0 - kappa**2) * own
        out = np.empty((n_years, n_starts, N_MEMBERS, N_LEADS, *grid))
        t_land = np.broadcast_to(effect0[:, :, None], shape)
        for d in range(N_LEADS):
            s = phi_land * s + MEMBER_LAND_NOISE * innov_land * eta[d]
            atm = rho[d] * atm_true[:, :, None, d] + math.sqrt(1.0 - rho[d] ** 2) * own[d]
            t_land = (1.0 - alpha) * t_land + alpha * coupling * (dry_response(s) - g_mean)
            out[:, :, :, d] = clim[:, :, None, d] + drift[d] + atm + t_land
        hindcasts[name] = out.reshape(n_years * n_starts, N_MEMBERS, N_LEADS, *grid)

    return Scenario(
        init_dates=init_dates.reshape(-1),
        obs_dates=obs_days.reshape(-1),
        realistic=hindcasts["realistic"],
        scrambled=hindcasts["scrambled"],
        observations=observations,
        land_state=land_state.reshape(-1, *grid),
    )


def _packing(kind: str) -> dict[str, object]:
    scale, offset = _PACK[kind]
    return {
        "dtype": "int16",
        "scale_factor": np.float32(scale),
        "add_offset": np.float32(offset),
        "_FillValue": np.int16(_FILL),
        "zlib": True,
        "complevel": 6,
        "shuffle": True,
    }


def _grid_coords() -> dict[str, xr.DataArray]:
    return {
        "lat": xr.DataArray(
            LAT,
            dims="lat",
            attrs={
                "standard_name": "latitude",
                "long_name": "latitude",
                "units": "degrees_north",
                "axis": "Y",
            },
        ),
        "lon": xr.DataArray(
            LON,
            dims="lon",
            attrs={
                "standard_name": "longitude",
                "long_name": "longitude",
                "units": "degrees_east",
                "axis": "X",
            },
        ),
    }


def _global_attrs(title: str, **extra: str) -> dict[str, str]:
    attrs = {
        "Conventions": "CF-1.8",
        "title": title,
        "source": SOURCE,
        "history": HISTORY,
        "comment": "Invented data on a fictional continent; for demonstration and tests only.",
    }
    attrs.update(extra)
    return attrs


_TIME_ENCODING = {"units": TIME_UNITS, "calendar": "standard", "dtype": "int32"}
_TAS_ATTRS = {
    "standard_name": "air_temperature",
    "long_name": "near-surface air temperature, daily mean",
    "cell_methods": "time: mean",
}


def build_datasets(scenario: Scenario) -> dict[str, tuple[xr.Dataset, dict[str, dict]]]:
    """The four CF datasets with their encodings, keyed by role."""
    grid = _grid_coords()
    frt = xr.DataArray(
        scenario.init_dates.astype("datetime64[ns]"),
        dims="forecast_reference_time",
        attrs={
            "standard_name": "forecast_reference_time",
            "long_name": "initialisation date of the hindcast",
        },
    )
    hindcast_coords = {
        "forecast_reference_time": frt,
        "realization": xr.DataArray(
            np.arange(N_MEMBERS, dtype=np.int32),
            dims="realization",
            attrs={"standard_name": "realization", "long_name": "ensemble member number"},
        ),
        "forecast_period": xr.DataArray(
            np.arange(1, N_LEADS + 1, dtype=np.int32),
            dims="forecast_period",
            attrs={
                "standard_name": "forecast_period",
                "units": "days",
                "long_name": "lead day (valid date = initialisation date + lead day - 1)",
            },
        ),
        **grid,
    }
    dims5 = ("forecast_reference_time", "realization", "forecast_period", "lat", "lon")
    out: dict[str, tuple[xr.Dataset, dict[str, dict]]] = {}
    for role, label in (("realistic", "realistic"), ("scrambled", "scrambled")):
        data = getattr(scenario, role)
        ds = xr.Dataset(
            {"tas": xr.DataArray(data, dims=dims5, attrs={**_TAS_ATTRS, "units": "K"})},
            coords=hindcast_coords,
            attrs=_global_attrs(
                f"landlift sample scenario: hindcasts from {label} land initial states",
                experiment=f"{label} land initial states",
            ),
        )
        enc = {
            "tas": {**_packing("tas_K"), "chunksizes": (1, N_MEMBERS, N_LEADS, LAT.size, LON.size)},
            "forecast_reference_time": dict(_TIME_ENCODING),
            "realization": {"dtype": "int32", "_FillValue": None},
            "forecast_period": {"dtype": "int32", "_FillValue": None},
            "lat": {"_FillValue": None},
            "lon": {"_FillValue": None},
        }
        out[role] = (ds, enc)

    obs = xr.Dataset(
        {
            "tas": xr.DataArray(
                scenario.observations,
                dims=("time", "lat", "lon"),
                attrs={**_TAS_ATTRS, "units": "degC"},
            )
        },
        coords={
            "time": xr.DataArray(
                scenario.obs_dates.astype("datetime64[ns]"),
                dims="time",
                attrs={"standard_name": "time", "long_name": "day of the daily mean", "axis": "T"},
            ),
            **grid,
        },
        attrs=_global_attrs("landlift sample scenario: verifying observations"),
    )
    out["observations"] = (
        obs,
        {
            "tas": _packing("tas_degC"),
            "time": dict(_TIME_ENCODING),
            "lat": {"_FillValue": None},
            "lon": {"_FillValue": None},
        },
    )

    land = xr.Dataset(
        {
            "mrsos": xr.DataArray(
                scenario.land_state,
                dims=("forecast_reference_time", "lat", "lon"),
                attrs={
                    "standard_name": "mass_content_of_water_in_soil_layer",
                    "long_name": "root-zone soil moisture at initialisation",
                    "units": "kg m-2",
                },
            )
        },
        coords={"forecast_reference_time": frt, **grid},
        attrs=_global_attrs("landlift sample scenario: true initial land states"),
    )
    out["land_state"] = (
        land,
        {
            "mrsos": _packing("mrsos"),
            "forecast_reference_time": dict(_TIME_ENCODING),
            "lat": {"_FillValue": None},
            "lon": {"_FillValue": None},
        },
    )
    return out


def write_sample(out_dir: Path) -> dict[str, Path]:
    """Generate the scenario into ``out_dir`` (created if needed); return role -> file path."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    datasets = build_datasets(simulate())
    paths: dict[str, Path] = {}
    for role in ROLES:
        ds, enc = datasets[role]
        path = out_dir / f"{role}.nc"
        tmp = path.with_suffix(".nc.tmp")
        ds.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=enc)
        tmp.replace(path)
        paths[role] = path
    return paths


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Write the landlift sample scenario (synthetic).")
    parser.add_argument(
        "--out",
        type=Path,
        default=Path(__file__).resolve().parent,
        help="output folder (default: the sample_data folder)",
    )
    args = parser.parse_args(argv)
    for role, path in write_sample(args.out).items():
        print(f"{role:13s} {path} ({path.stat().st_size / 1e6:.2f} MB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
