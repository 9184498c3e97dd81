"""The demo scenario: an invented North Atlantic winter with known truth.

Everything here is synthetic. The names are invented: the "Gale reference analysis" (a
reanalysis-like product), the "Brisa-2 AGCM" (an atmosphere model) and its experiments "ctl-slab"
(control, slab ocean) and "ohtx-plus" (an imposed ocean heat-transport anomaly). The data serve
the demo and recovery tests of known truth; they say nothing about the real atmosphere.

The stochastic model
--------------------
One *block* is one member in one winter (November-March). Each block is simulated on its own,
after a 60-day spin-up that is discarded, so blocks are independent and stationary.

1. **Regimes.** A four-state Markov chain (NAO+, NAO-, Scandinavian blocking, Atlantic ridge),
   one step per day, with transition matrix ``P[i, j] = stay[i]`` on the diagonal and
   ``(1 - stay[i]) * w[j] / sum_{k != i} w[k]`` off it (``w`` destination weights). The mean
   episode length of regime i is ``1 / (1 - stay[i])`` days; the occupancies are the stationary
   distribution of ``P``.
2. **Z500** (m) = climatology + pattern of the day's regime + red noise. The climatology has a
   meridional gradient (about 5870 m at 15N to 5250 m at 85N), a stationary wave (trough near
   70W, ridge near 0) and a seasonal cycle (lowest in late January, larger at high latitudes).
   Each regime pattern is a sum of Gaussian highs and lows in great-circle distance:
   NAO+ low -140 m at 65N 20W and high +110 m at 40N 25W; NAO- the exact opposite;
   Scandinavian blocking high +150 m at 62N 10E and low -60 m at 40N 30W; Atlantic ridge high
   +130 m at 52N 25W and low -70 m at 63N 15E (radii 1300-1600 km). The noise is a sum of 117
   Gaussian bumps (radius 900 km) with AR(1) amplitudes (lag-1 0.7), 55 m standard deviation
   at every point. Anomalies against the dataset's own climatology have regime centroids
   ``pattern - sum_j occupancy_j pattern_j`` (``ScenarioTruth.centroids``).
3. **Jet.** The daily jet latitude is the preferred latitude of the day's regime plus AR(1)
   wander (lag-1 0.6, 2 degrees standard deviation), clipped to 20-70N. Preferred latitudes
   (from memory of Woollings et al. 2010, three positions near 37, 46 and 56N; the tie to the
   regimes is our own simplification): NAO- 37N, NAO+ and Scandinavian blocking 46N, Atlantic
   ridge 56N. Zonal wind at 925/850/700 hPa = 3 m s-1 background (uniform in latitude, so it
   does not move the maximum) + a Gaussian jet in latitude (standard deviation 8 degrees; peak
   9, 12 and 14 m s-1, with a seasonal cycle and a daily AR(1) speed factor) over 60W-0,
   tapering to zero by 72.5W and 12.5E + a fixed decoy jet at 30N (peak 8 m s-1 at 700 hPa)
   east of 20E + red noise (1.5 m s-1 at 850 hPa, radius 700 km, lag-1 0.6). In the 60W-0
   sector the latitude of the maximum of the level-mean wind is the jet latitude plus noise.
4. **SST** (K) = climatology (296 K at 15N to 278 K at 85N, coolest in March) + a tripole
   (-0.8 K at 55N 35W, +0.7 K at 38N 65W, -0.6 K at 22N 35W) times an amplitude ``A`` + red
   noise (0.15 K, radius 1000 km, lag-1 0.95). ``A_t = r A_(t-1) + (1 - r) f_t`` with
   ``f = +1`` in NAO+, -1 in NAO-, 0 otherwise and ``r = exp(-1 / 20 days)``: the ocean
   integrates the NAO, so SST lags it (``ScenarioTruth.sst_lag_days``). Land (a crude constant
   mask) is NaN.

Parameters per dataset
----------------------
``reference`` and ``control`` share one parameter set: stay probabilities 0.88, 0.88, 0.88,
0.86 and uniform destination weights (occupancies 0.259, 0.259, 0.259, 0.222). ``perturbed``
carries three planted changes: the NAO more persistent (NAO+ and NAO- stay 0.93, episodes
14.3 instead of 8.3 days), NAO- more frequent (destination weight 2.5: occupancy about 0.42
instead of 0.26, taken from the other regimes; ``ScenarioTruth.occupancy``) and the jet 1
degree further south (every preferred latitude minus 1). The southern (NAO-) jet position
becoming more frequent moves the expected *mean* jet latitude south by more than the 1 degree
of the peaks (``ScenarioTruth.mean_jet_latitude``). The changes are large on purpose: the
demo's small ensembles must show them clearly. With ``changes=False`` the perturbed ensemble
uses the control parameters with its own random stream.

Raw conventions (the data layer normalizes them)
------------------------------------------------
``reference``: variables ``hgt500`` (geopotential_height, m; no vertical coordinate, the level
is in the name and long_name), ``uwnd`` (eastward_wind, m s-1, on ``level`` in hPa: 925, 850,
700), ``sst`` (sea_surface_temperature, K); dims ``time, [level,] lat, lon``; lat ascending,
lon -90..40; standard calendar, 1 November to 31 March of each winter (gaps between winters).
``control``/``perturbed``: variables ``phi`` (geopotential, m2 s-2, i.e. height times
9.80665), ``ua`` (eastward_wind, m s-1, on ``plev`` in Pa: 92500, 85000, 70000), ``tos``
(sea_surface_temperature, K); dims ``realization, time, [plev,] latitude, longitude``; latitude
descending, longitude ascending in 0..360 (0..40 then 270..357.5); 360_day calendar, 1 November
to 30 March (150 days) at 12:00.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from ._files import write_netcdf
from .errors import ConfigError

__all__ = ["REGIME_NAMES", "ScenarioTruth", "scenario", "write_scenario"]

#: Regime names, in the order of the chain's states.
REGIME_NAMES: tuple[str, ...] = ("NAO+", "NAO-", "Scandinavian blocking", "Atlantic ridge")

G0 = 9.80665  # m s-2, standard gravity (CGPM 1901)
EARTH_RADIUS_KM = 6371.0

LAT = np.arange(15.0, 85.0 + 1e-9, 2.5)  # canonical grid, degrees_north, ascending
LON = np.arange(-90.0, 40.0 + 1e-9, 2.5)  # degrees_east, in [-180, 180)
LEVELS_HPA = np.array([925.0, 850.0, 700.0])

_SPIN_DAYS = 60
_MODEL_DAYS = 150  # 1 Nov to 30 Mar on a 360_day calendar
_REFERENCE_FIRST_WINTER = 1991  # a winter is labelled by the year of its January

_Z_NOISE_SD, _Z_NOISE_LAG1, _Z_NOISE_RADIUS = 55.0, 0.7, 900.0  # m, -, km
_U_NOISE_SD, _U_NOISE_LAG1, _U_NOISE_RADIUS = 1.5, 0.6, 700.0  # m s-1 at 850 hPa, -, km
_SST_NOISE_SD, _SST_NOISE_LAG1, _SST_NOISE_RADIUS = 0.15, 0.95, 1000.0  # K, -, km
_JET_WANDER_SD, _JET_WANDER_LAG1, _JET_WIDTH = 2.0, 0.6, 8.0  # degrees, -, degrees
_JET_SPEED = np.array([9.0, 12.0, 14.0])  # m s-1 at 925, 850, 700 hPa
_JET_SPEED_SD, _JET_SPEED_LAG1 = 0.12, 0.8  # relative daily speed factor
_U_BACKGROUND = 3.0  # m s-1, uniform
_SST_MEMORY_DAYS = 20.0

# (lat, lon, amplitude m, radius km) for each regime, in REGIME_NAMES order.
_REGIME_CENTRES: tuple[tuple[tuple[float, float, float, float], ...], ...] = (
    ((65.0, -20.0, -140.0, 1500.0), (40.0, -25.0, 110.0, 1600.0)),
    ((65.0, -20.0, 140.0, 1500.0), (40.0, -25.0, -110.0, 1600.0)),
    ((62.0, 10.0, 150.0, 1400.0), (40.0, -30.0, -60.0, 1500.0)),
    ((52.0, -25.0, 130.0, 1300.0), (63.0, 15.0, -70.0, 1400.0)),
)
_TRIPOLE_CENTRES = (
    (55.0, -35.0, -0.8, 1200.0),
    (38.0, -65.0, 0.7, 1000.0),
    (22.0, -35.0, -0.6, 1200.0),
)  # (lat, lon, K per unit amplitude, km)

_SYNTHETIC_NOTE = (
    "SYNTHETIC DATA for the westerlies demo, drawn from a documented stochastic model with known "
    "truth (westerlies.synthetic). The product, model and experiment names are invented; these "
    "are not the output of any real model, reanalysis or observing system."
)


@dataclass(frozen=True)
class _Parameters:
    """Parameters of one dataset's generator."""

    stay: tuple[float, float, float, float]
    destination_weights: tuple[float, float, float, float]
    jet_latitudes: tuple[float, float, float, float]  # degrees_north, per regime

    @property
    def transition(self) -> np.ndarray:
        return _transition_matrix(np.array(self.stay), np.array(self.destination_weights))


_CONTROL = _Parameters(
    stay=(0.88, 0.88, 0.88, 0.86),
    destination_weights=(1.0, 1.0, 1.0, 1.0),
    jet_latitudes=(46.0, 37.0, 46.0, 56.0),
)
_PERTURBED = _Parameters(
    stay=(0.93, 0.93, 0.88, 0.86),
    destination_weights=(1.0, 2.5, 1.0, 1.0),
    jet_latitudes=(45.0, 36.0, 45.0, 55.0),
)


@dataclass(frozen=True)
class ScenarioTruth:
    """The known truth behind a scenario (canonical grid: lat ascending, lon -90..40).

    Attributes
    ----------
    regime_names : names of the four regimes, in state order.
    patterns : DataArray (regime, lat, lon), m: the Z500 anomaly each regime adds.
    centroids : per dataset, DataArray (regime, lat, lon), m: expected regime centroids of
        anomalies against the dataset's own climatology (pattern minus occupancy-weighted mean).
    nao_pattern : DataArray (lat, lon), m: (NAO+ pattern - NAO- pattern) / 2; positive phase
        low near Iceland, high near the Azores.
    sst_tripole : DataArray (lat, lon), K per unit amplitude A (NaN over land).
    land_mask : DataArray (lat, lon), bool, True over land (SST is NaN there).
    transition : per dataset, (4, 4) array, row = today's regime, column = tomorrow's.
    occupancy : per dataset, (4,) stationary distribution of the chain (fraction of days).
    mean_episode_length : per dataset, (4,) days, 1 / (1 - stay probability).
    jet_latitudes : per dataset, {regime name: preferred jet latitude (degrees_north)}.
    preferred_jet_latitudes : per dataset, the three distinct preferred latitudes, ascending.
    mean_jet_latitude : per dataset, expected mean jet latitude (degrees_north).
    sst_memory_days : e-folding time of the SST amplitude A (days).
    sst_lag_days : per dataset, lag (days, SST after NAO) of the largest correlation between
        the NAO forcing f and A, from the exact stationary covariances of the chain.
    changes : the planted changes in ``perturbed`` (empty when ``changes=False``).
    states : per dataset, DataArray (member, time) int: the realized regime of every day.
    jet_latitude : per dataset, DataArray (member, time), degrees_north: the realized jet
        latitude (before wind noise).
    sst_amplitude : per dataset, DataArray (member, time): the realized tripole amplitude A.
    parameters : noise and model constants (standard deviations, lag-1 correlations, radii).
    """

    regime_names: tuple[str, ...]
    patterns: xr.DataArray = field(repr=False)
    centroids: dict[str, xr.DataArray] = field(repr=False)
    nao_pattern: xr.DataArray = field(repr=False)
    sst_tripole: xr.DataArray = field(repr=False)
    land_mask: xr.DataArray = field(repr=False)
    transition: dict[str, np.ndarray]
    occupancy: dict[str, np.ndarray]
    mean_episode_length: dict[str, np.ndarray]
    jet_latitudes: dict[str, dict[str, float]]
    preferred_jet_latitudes: dict[str, tuple[float, ...]]
    mean_jet_latitude: dict[str, float]
    sst_memory_days: float
    sst_lag_days: dict[str, int]
    changes: dict[str, object]
    states: dict[str, xr.DataArray] = field(repr=False)
    jet_latitude: dict[str, xr.DataArray] = field(repr=False)
    sst_amplitude: dict[str, xr.DataArray] = field(repr=False)
    parameters: dict[str, float] = field(repr=False)


# ------------------------------------------------------------------------------ kernels


def _transition_matrix(stay: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Markov matrix with the given diagonal; leaving mass split by destination weights."""
    n = stay.size
    matrix = np.empty((n, n))
    for i in range(n):
        w = weights.astype(float).copy()
        w[i] = 0.0
        matrix[i] = (1.0 - stay[i]) * w / w.sum()
        matrix[i, i] = stay[i]
    return matrix


def _stationary(matrix: np.ndarray) -> np.ndarray:
    """Stationary distribution pi = pi P of an irreducible Markov matrix."""
    n = matrix.shape[0]
    system = np.vstack([matrix.T - np.eye(n), np.ones(n)])
    rhs = np.zeros(n + 1)
    rhs[-1] = 1.0
    return np.linalg.lstsq(system, rhs, rcond=None)[0]


def _markov_chain(
    matrix: np.ndarray, n_blocks: int, n_days: int, rng: np.random.Generator
) -> np.ndarray:
    """States (n_blocks, n_days) of independent chains started from the stationary law."""
    cumulative = np.cumsum(matrix, axis=1)
    cumulative[:, -1] = 1.0
    start = np.cumsum(_stationary(matrix))
    start[-1] = 1.0
    uniform = rng.random((n_blocks, n_days))
    states = np.empty((n_blocks, n_days), dtype=np.int64)
    states[:, 0] = np.searchsorted(start, uniform[:, 0], side="right")
    for t in range(1, n_days):
        rows = cumulative[states[:, t - 1]]
        states[:, t] = (uniform[:, t, None] >= rows).sum(axis=1)
    return states


def _ar1(rng: np.random.Generator, lag1: float, shape: tuple[int, ...]) -> np.ndarray:
    """Unit-variance stationary AR(1) series along axis 1 of ``shape``."""
    shocks = rng.standard_normal(shape)
    out = np.empty(shape)
    out[:, 0] = shocks[:, 0]
    scale = np.sqrt(1.0 - lag1**2)
    for t in range(1, shape[1]):
        out[:, t] = lag1 * out[:, t - 1] + scale * shocks[:, t]
    return out


def _distance_km(lat0: float, lon0: float, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """Great-circle distance (km) from one point to each (lat, lon) pair (broadcast)."""
    p0, p, dl = np.radians(lat0), np.radians(lat), np.radians(lon - lon0)
    cos_angle = np.sin(p0) * np.sin(p) + np.cos(p0) * np.cos(p) * np.cos(dl)
    return EARTH_RADIUS_KM * np.arccos(np.clip(cos_angle, -1.0, 1.0))


def _bumps(centres, lat: np.ndarray = LAT, lon: np.ndarray = LON) -> np.ndarray:
    """Sum of Gaussian bumps (lat, lon, amplitude, radius km) on a grid (canonical by default)."""
    lat, lon = np.meshgrid(lat, lon, indexing="ij")
    out = np.zeros(lat.shape)
    for lat0, lon0, amplitude, radius in centres:
        out += amplitude * np.exp(-0.5 * (_distance_km(lat0, lon0, lat, lon) / radius) ** 2)
    return out


def _noise_basis(radius_km: float, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """(k, lat*lon) Gaussian bumps on a 10 x 12.5 degree lattice, scaled to unit point variance.

    With independent unit-variance amplitudes the field has unit variance at every point and
    a spatial correlation scale of about ``radius_km``.
    """
    lat, lon = np.meshgrid(lat, lon, indexing="ij")
    centres = [(a, b) for a in np.arange(10.0, 90.1, 10.0) for b in np.arange(-105.0, 55.1, 12.5)]
    basis = np.stack(
        [np.exp(-0.5 * (_distance_km(a, b, lat, lon) / radius_km) ** 2).ravel() for a, b in centres]
    )
    return basis / np.sqrt((basis**2).sum(axis=0))


def _land_mask(lat: np.ndarray = LAT, lon: np.ndarray = LON) -> np.ndarray:
    """A crude, constant land mask (True over land) on a grid (canonical by default)."""
    lat, lon = np.meshgrid(lat, lon, indexing="ij")
    north_america = ((lon <= -80) & (lat >= 30)) | ((lon <= -65) & (lat >= 45) & (lat <= 62))
    north_america |= (lon <= -62) & (lat >= 66)
    greenland = ((lon + 40.0) / 17.0) ** 2 + ((lat - 72.0) / 11.0) ** 2 <= 1.0
    iceland = ((lon + 19.0) / 6.0) ** 2 + ((lat - 65.0) / 2.0) ** 2 <= 1.0
    europe = (lon >= -9) & (lat >= 36) & (lat <= 71)
    europe &= ~((lat < 44) & (lon > 0))  # Mediterranean
    europe &= ~((lat >= 51) & (lat <= 61) & (lon >= -4) & (lon <= 8))  # North Sea
    africa = (lat <= 34) & (lon >= -15)
    return north_america | greenland | iceland | europe | africa


def _sector_weight(lon: np.ndarray, west: float, east: float, taper: float) -> np.ndarray:
    """1 in [west, east], a cosine-squared taper to 0 over ``taper`` degrees outside."""
    outside = np.maximum(west - lon, lon - east).clip(0.0)
    return np.where(outside >= taper, 0.0, np.cos(0.5 * np.pi * outside / taper) ** 2)


# -------------------------------------------------------------------------- climatologies


def _add_z500_climatology(
    z500: np.ndarray, year_fraction: np.ndarray, lat: np.ndarray, lon: np.ndarray
) -> None:
    """Add the Z500 climatology (m) in place; z500 has shape year_fraction.shape + (lat, lon)."""
    lat, lon = np.meshgrid(lat, lon, indexing="ij")
    base = 5560.0 - 330.0 * np.tanh((lat - 50.0) / 18.0)
    base += 70.0 * np.cos(2.0 * np.pi * lon / 140.0) * np.exp(-(((lat - 50.0) / 20.0) ** 2))
    season = -70.0 * np.cos(2.0 * np.pi * (year_fraction - 0.08))
    z500 += base.astype(np.float32)
    z500 += season.astype(np.float32)[..., None, None] * ((lat - 15.0) / 70.0).astype(np.float32)


def _add_sst_climatology(sst: np.ndarray, year_fraction: np.ndarray, lat: np.ndarray) -> None:
    """Add the SST climatology (K) in place; sst has shape year_fraction.shape + (lat, lon)."""
    sst += (296.0 - 18.0 * (lat[:, None] - 15.0) / 70.0).astype(np.float32)
    sst -= np.cos(2.0 * np.pi * (year_fraction - 0.2)).astype(np.float32)[..., None, None]


def _seasonal_speed(year_fraction: np.ndarray) -> np.ndarray:
    """Jet speed factor (1 at the seasonal mean), strongest in mid-January."""
    return 1.0 + 0.15 * np.cos(2.0 * np.pi * (year_fraction - 0.04))


# ----------------------------------------------------------------------------- simulation


def _simulate(
    params: _Parameters,
    n_blocks: int,
    year_fraction: np.ndarray,
    rng: np.random.Generator,
    lat: np.ndarray = LAT,
    lon: np.ndarray = LON,
) -> dict[str, np.ndarray]:
    """Fields for ``n_blocks`` blocks; year_fraction (n_blocks, n_days).

    The fields are drawn on the given grid (any order of the canonical grid's points); the same
    random stream gives the same field whatever the order.
    """
    lon = np.where(lon >= 180.0, lon - 360.0, lon)  # same points, same order, in [-180, 180)
    n_days = year_fraction.shape[1]
    n_all = n_days + _SPIN_DAYS
    keep = slice(_SPIN_DAYS, None)
    states = _markov_chain(params.transition, n_blocks, n_all, rng)
    wander = _JET_WANDER_SD * _ar1(rng, _JET_WANDER_LAG1, (n_blocks, n_all))
    jet_lat = np.clip(np.asarray(params.jet_latitudes)[states] + wander, 20.0, 70.0)
    forcing = (states == 0).astype(float) - (states == 1)
    memory = np.exp(-1.0 / _SST_MEMORY_DAYS)
    amplitude = np.empty((n_blocks, n_all))
    level = np.zeros(n_blocks)
    for t in range(n_all):
        level = memory * level + (1.0 - memory) * forcing[:, t]
        amplitude[:, t] = level
    speed = 1.0 + _JET_SPEED_SD * _ar1(rng, _JET_SPEED_LAG1, (n_blocks, n_all))
    z_basis, u_basis, s_basis = (
        _noise_basis(r, lat, lon) for r in (_Z_NOISE_RADIUS, _U_NOISE_RADIUS, _SST_NOISE_RADIUS)
    )
    shape = (n_blocks, n_days, lat.size, lon.size)

    def red_noise(basis: np.ndarray, lag1: float, sd: float) -> np.ndarray:
        amplitudes = _ar1(rng, lag1, (n_blocks, n_all, basis.shape[0]))[:, keep]
        amplitudes = np.ascontiguousarray(amplitudes, dtype=np.float32).reshape(-1, len(basis))
        return (amplitudes @ (sd * basis).astype(np.float32)).reshape(shape)

    states, jet_lat, amplitude, speed = (a[:, keep] for a in (states, jet_lat, amplitude, speed))

    patterns = _bumps_per_regime(lat, lon).astype(np.float32)
    z500 = red_noise(z_basis, _Z_NOISE_LAG1, _Z_NOISE_SD)
    z500 += patterns[states]
    _add_z500_climatology(z500, year_fraction, lat, lon)

    profile = np.exp(-0.5 * ((lat - jet_lat[..., None]) / _JET_WIDTH) ** 2)  # (b, t, lat)
    profile *= (_seasonal_speed(year_fraction) * speed)[..., None]
    jet = profile.astype(np.float32)[..., None] * _sector_weight(lon, -60.0, 0.0, 12.5).astype(
        np.float32
    )  # (b, t, lat, lon), unit peak speed
    decoy = np.exp(-0.5 * ((lat - 30.0) / 5.0) ** 2)[:, None] * _sector_weight(lon, 20.0, 60.0, 7.5)
    noise = red_noise(u_basis, _U_NOISE_LAG1, _U_NOISE_SD)
    ratio = _JET_SPEED / _JET_SPEED[1]
    u = np.empty((n_blocks, n_days, LEVELS_HPA.size, lat.size, lon.size), dtype=np.float32)
    for k in range(LEVELS_HPA.size):
        level = u[:, :, k]
        np.multiply(jet, np.float32(_JET_SPEED[k]), out=level)
        level += (_U_BACKGROUND * ratio[k] + 8.0 * ratio[k] / ratio[2] * decoy).astype(np.float32)
        level += np.float32(ratio[k]) * noise

    sst = red_noise(s_basis, _SST_NOISE_LAG1, _SST_NOISE_SD)
    _add_sst_climatology(sst, year_fraction, lat)
    sst += amplitude.astype(np.float32)[..., None, None] * _bumps(
        _TRIPOLE_CENTRES, lat, lon
    ).astype(np.float32)
    sst[..., _land_mask(lat, lon)] = np.nan
    return {
        "states": states,
        "jet_latitude": jet_lat,
        "sst_amplitude": amplitude,
        "z500": z500,
        "u": u,
        "sst": sst,
    }


def _bumps_per_regime(lat: np.ndarray = LAT, lon: np.ndarray = LON) -> np.ndarray:
    """(regime, lat, lon) Z500 anomaly patterns, m."""
    return np.stack([_bumps(centres, lat, lon) for centres in _REGIME_CENTRES])


# ---------------------------------------------------------------------------- time axes


def _reference_times(winters: int) -> list[pd.DatetimeIndex]:
    """Daily dates 1 November to 31 March of each winter (labelled by its January's year)."""
    return [
        pd.date_range(f"{year - 1}-11-01", f"{year}-03-31", freq="D")
        for year in range(_REFERENCE_FIRST_WINTER, _REFERENCE_FIRST_WINTER + winters)
    ]


def _model_times() -> xr.CFTimeIndex:
    """1 November to 30 March at 12:00 on a 360_day calendar (150 days)."""
    return xr.date_range(
        "2000-11-01 12:00", periods=_MODEL_DAYS, freq="D", calendar="360_day", use_cftime=True
    )


def _year_fraction_reference(dates: pd.DatetimeIndex) -> np.ndarray:
    length = np.where(dates.is_leap_year, 366.0, 365.0)
    return (dates.day_of_year.to_numpy() - 0.5) / length


def _year_fraction_model(times: xr.CFTimeIndex) -> np.ndarray:
    return np.array([((t.month - 1) * 30 + t.day - 0.5) / 360.0 for t in times])


# ------------------------------------------------------------------------------ datasets


def _raw_model_grid() -> tuple[np.ndarray, np.ndarray]:
    """The model's grid: latitude descending, longitude ascending in 0..360."""
    return LAT[::-1].copy(), np.sort(np.mod(LON, 360.0))


def _coord_attrs(kind: str) -> dict[str, str]:
    return {
        "lat": {
            "standard_name": "latitude",
            "units": "degrees_north",
            "axis": "Y",
            "long_name": "latitude",
        },
        "lon": {
            "standard_name": "longitude",
            "units": "degrees_east",
            "axis": "X",
            "long_name": "longitude",
        },
    }[kind]


def _reference_dataset(sim: dict, dates: list[pd.DatetimeIndex], seed_note: str) -> xr.Dataset:
    """One realization on a standard calendar, CF names, lat ascending, lon -90..40, hPa."""
    lengths = [len(d) for d in dates]
    time = np.concatenate([d.to_numpy() for d in dates])

    def stack(name: str) -> np.ndarray:
        return np.concatenate([sim[name][b, :n] for b, n in enumerate(lengths)])

    coords = {
        "time": ("time", time, {"standard_name": "time", "axis": "T", "long_name": "time"}),
        "level": (
            "level",
            LEVELS_HPA,
            {
                "standard_name": "air_pressure",
                "units": "hPa",
                "long_name": "pressure level",
                "positive": "down",
                "axis": "Z",
            },
        ),
        "lat": ("lat", LAT, _coord_attrs("lat")),
        "lon": ("lon", LON, _coord_attrs("lon")),
    }
    ds = xr.Dataset(
        {
            "hgt500": (
                ("time", "lat", "lon"),
                stack("z500"),
                {
                    "standard_name": "geopotential_height",
                    "units": "m",
                    "long_name": "geopotential height at 500 hPa",
                },
            ),
            "uwnd": (
                ("time", "level", "lat", "lon"),
                stack("u"),
                {"standard_name": "eastward_wind", "units": "m s-1", "long_name": "zonal wind"},
            ),
            "sst": (
                ("time", "lat", "lon"),
                stack("sst"),
                {
                    "standard_name": "sea_surface_temperature",
                    "units": "K",
                    "long_name": "sea surface temperature",
                },
            ),
        },
        coords=coords,
        attrs={
            "title": "Gale reference analysis, daily winter fields (synthetic)",
            "source": "Gale reference analysis (an invented reanalysis-like product)",
            "comment": _SYNTHETIC_NOTE,
            "synthetic": "yes",
            "synthetic_seed": seed_note,
            "Conventions": "CF-1.8",
        },
    )
    ds["time"].encoding = {
        "units": "hours since 1900-01-01 00:00:00",
        "calendar": "standard",
        "dtype": "float64",
        "_FillValue": None,
    }
    return ds


def _ensemble_dataset(
    sim: dict,
    times: xr.CFTimeIndex,
    experiment: str,
    description: str,
    seed_note: str,
    changes_planted: bool,
) -> xr.Dataset:
    """Members along ``realization``, 360_day, lon 0..360, lat descending, Pa, geopotential."""
    raw_lat, raw_lon = _raw_model_grid()

    members = sim["z500"].shape[0]
    coords = {
        "realization": (
            "realization",
            np.arange(members),
            {"standard_name": "realization", "long_name": "ensemble member"},
        ),
        "time": ("time", times, {"standard_name": "time", "axis": "T", "long_name": "time"}),
        "plev": (
            "plev",
            LEVELS_HPA * 100.0,
            {
                "standard_name": "air_pressure",
                "units": "Pa",
                "long_name": "pressure",
                "positive": "down",
                "axis": "Z",
            },
        ),
        "latitude": ("latitude", raw_lat, _coord_attrs("lat")),
        "longitude": ("longitude", raw_lon, _coord_attrs("lon")),
    }
    grid = ("realization", "time", "latitude", "longitude")
    ds = xr.Dataset(
        {
            "phi": (
                grid,
                sim["z500"] * np.float32(G0),
                {
                    "standard_name": "geopotential",
                    "units": "m2 s-2",
                    "long_name": "geopotential at 500 hPa",
                },
            ),
            "ua": (
                ("realization", "time", "plev", "latitude", "longitude"),
                sim["u"],
                {"standard_name": "eastward_wind", "units": "m s-1", "long_name": "eastward wind"},
            ),
            "tos": (
                grid,
                sim["sst"],
                {
                    "standard_name": "sea_surface_temperature",
                    "units": "K",
                    "long_name": "sea surface temperature",
                },
            ),
        },
        coords=coords,
        attrs={
            "title": f"Brisa-2 AGCM, experiment {experiment}, daily winter fields (synthetic)",
            "source": "Brisa-2 AGCM (an invented atmosphere general circulation model)",
            "experiment_id": experiment,
            "experiment": description,
            "comment": _SYNTHETIC_NOTE,
            "synthetic": "yes",
            "synthetic_seed": seed_note,
            "synthetic_changes_planted": "yes" if changes_planted else "no",
            "Conventions": "CF-1.8",
        },
    )
    ds["time"].encoding = {
        "units": "days since 2000-11-01 00:00:00",
        "calendar": "360_day",
        "dtype": "float64",
        "_FillValue": None,
    }
    return ds


# ---------------------------------------------------------------------------------- truth


def _lag_of_largest_response(matrix: np.ndarray, memory_days: float, max_lag: int = 90) -> int:
    """Lag k >= 0 maximizing cov(A_(t+k), f_t) for the stationary chain (exact covariances)."""
    pi = _stationary(matrix)
    f = np.array([1.0, -1.0, 0.0, 0.0])
    mean = pi @ f
    horizon = max_lag + 40 * int(memory_days)
    cov = np.empty(horizon + 1)
    power = np.eye(4)
    for k in range(horizon + 1):
        cov[k] = (pi * f) @ power @ f - mean**2
        power = power @ matrix
    r = np.exp(-1.0 / memory_days)
    lags = np.arange(max_lag + 1)
    j = np.arange(horizon - max_lag)
    response = [(1 - r) * np.sum(r**j * cov[np.abs(k - j)]) for k in lags]
    return int(lags[int(np.argmax(response))])


def _field(values: np.ndarray, name: str, units: str, long_name: str) -> xr.DataArray:
    dims = ("regime", "lat", "lon") if values.ndim == 3 else ("lat", "lon")
    coords = {"lat": LAT, "lon": LON}
    if values.ndim == 3:
        coords["regime"] = list(REGIME_NAMES)
    return xr.DataArray(
        values, dims=dims, coords=coords, name=name, attrs={"units": units, "long_name": long_name}
    )


def _series(values: np.ndarray, time, name: str, units: str) -> xr.DataArray:
    return xr.DataArray(
        values,
        dims=("member", "time"),
        coords={"member": np.arange(values.shape[0]), "time": time},
        name=name,
        attrs={"units": units},
    )


# ------------------------------------------------------------------------------- public API


def _check_count(value: object, name: str) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
        raise ConfigError.make(
            f"option {name!r}", repr(value), "a positive integer", f"give {name}=1 or more"
        )
    return int(value)


def scenario(
    seed: int | np.random.Generator = 0,
    members: int = 20,
    winters: int = 30,
    *,
    changes: bool = True,
) -> dict[str, object]:
    """Build the demo scenario in memory (see the module docstring for the model).

    Parameters
    ----------
    seed : int or numpy Generator; the same seed gives identical data.
    members : members in each of ``control`` and ``perturbed`` (one winter each).
    winters : winters in ``reference`` (one realization).
    changes : plant the documented changes in ``perturbed``; with False it is drawn from the
        control generator (its own random stream), for "no difference" checks.

    Returns
    -------
    dict with ``reference``, ``control``, ``perturbed`` (xarray Datasets in raw, non-canonical
    conventions, float32; open them with ``westerlies.open_dataset``) and ``truth``
    (`ScenarioTruth`).
    """
    members = _check_count(members, "members")
    winters = _check_count(winters, "winters")
    streams = np.random.default_rng(seed).spawn(3)
    seed_note = str(seed) if isinstance(seed, (int, np.integer)) else "a numpy Generator"
    parameters = {
        "reference": _CONTROL,
        "control": _CONTROL,
        "perturbed": _PERTURBED if changes else _CONTROL,
    }

    dates = _reference_times(winters)
    longest = max(len(d) for d in dates)
    fraction = np.zeros((winters, longest))
    for b, d in enumerate(dates):
        fraction[b, : len(d)] = _year_fraction_reference(d)
        fraction[b, len(d) :] = fraction[b, len(d) - 1]  # padding, dropped afterwards
    sims = {"reference": _simulate(parameters["reference"], winters, fraction, streams[0])}
    times = _model_times()
    model_fraction = np.broadcast_to(_year_fraction_model(times), (members, _MODEL_DAYS))
    for name, stream in (("control", streams[1]), ("perturbed", streams[2])):
        sims[name] = _simulate(
            parameters[name], members, model_fraction, stream, *_raw_model_grid()
        )

    datasets = {
        "reference": _reference_dataset(sims["reference"], dates, seed_note),
        "control": _ensemble_dataset(
            sims["control"],
            times,
            "ctl-slab",
            "control run with a slab ocean (invented)",
            seed_note,
            False,
        ),
        "perturbed": _ensemble_dataset(
            sims["perturbed"],
            times,
            "ohtx-plus",
            "slab ocean with an imposed ocean heat-transport anomaly (invented)",
            seed_note,
            changes,
        ),
    }
    truth = _truth(parameters, sims, dates, times, changes)
    return {**datasets, "truth": truth}


def _truth(
    parameters: dict[str, _Parameters], sims: dict, dates, times, changes: bool
) -> ScenarioTruth:
    patterns = _bumps_per_regime()
    tripole = np.where(_land_mask(), np.nan, _bumps(_TRIPOLE_CENTRES))
    transition = {k: p.transition for k, p in parameters.items()}
    occupancy = {k: _stationary(m) for k, m in transition.items()}
    ref_time = np.concatenate([d.to_numpy() for d in dates])
    lengths = [len(d) for d in dates]

    def per_dataset(key: str, units: str) -> dict[str, xr.DataArray]:
        ref = np.concatenate([sims["reference"][key][b, :n] for b, n in enumerate(lengths)])
        out = {"reference": _series(ref[None], ref_time, key, units)}
        for name in ("control", "perturbed"):
            out[name] = _series(sims[name][key], times, key, units)
        return out

    planted: dict[str, object] = {}
    if changes:
        planted = {
            "more_frequent_regime": "NAO-",
            "occupancy_change": float(occupancy["perturbed"][1] - occupancy["control"][1]),
            "more_persistent_regimes": ("NAO+", "NAO-"),
            "stay_probability": {"control": _CONTROL.stay[0], "perturbed": _PERTURBED.stay[0]},
            "jet_shift_degrees": -1.0,
            "description": (
                "perturbed: NAO- occupancy up (destination weight 2.5), NAO+ and NAO- "
                "stay probability 0.88 -> 0.93, every preferred jet latitude 1 degree south"
            ),
        }
    return ScenarioTruth(
        regime_names=REGIME_NAMES,
        patterns=_field(patterns, "regime_pattern", "m", "Z500 anomaly pattern of each regime"),
        centroids={
            k: _field(
                patterns - np.tensordot(pi, patterns, axes=1),
                "regime_centroid",
                "m",
                "expected regime centroid of Z500 anomalies (own climatology)",
            )
            for k, pi in occupancy.items()
        },
        nao_pattern=_field(
            0.5 * (patterns[0] - patterns[1]), "nao_pattern", "m", "NAO pattern: (NAO+ - NAO-) / 2"
        ),
        sst_tripole=_field(tripole, "sst_tripole", "K", "SST tripole per unit amplitude"),
        land_mask=_field(_land_mask(), "land_mask", "1", "land (SST missing)"),
        transition=transition,
        occupancy=occupancy,
        mean_episode_length={k: 1.0 / (1.0 - np.diag(m)) for k, m in transition.items()},
        jet_latitudes={
            k: dict(zip(REGIME_NAMES, p.jet_latitudes, strict=True)) for k, p in parameters.items()
        },
        preferred_jet_latitudes={
            k: tuple(sorted(set(p.jet_latitudes))) for k, p in parameters.items()
        },
        mean_jet_latitude={
            k: float(occupancy[k] @ np.asarray(p.jet_latitudes)) for k, p in parameters.items()
        },
        sst_memory_days=_SST_MEMORY_DAYS,
        sst_lag_days={
            k: _lag_of_largest_response(m, _SST_MEMORY_DAYS) for k, m in transition.items()
        },
        changes=planted,
        states=per_dataset("states", "1"),
        jet_latitude=per_dataset("jet_latitude", "degrees_north"),
        sst_amplitude=per_dataset("sst_amplitude", "1"),
        parameters={
            "z500_noise_sd_m": _Z_NOISE_SD,
            "z500_noise_lag1": _Z_NOISE_LAG1,
            "z500_noise_radius_km": _Z_NOISE_RADIUS,
            "u_noise_sd_850hPa_m_s-1": _U_NOISE_SD,
            "u_noise_lag1": _U_NOISE_LAG1,
            "jet_wander_sd_degrees": _JET_WANDER_SD,
            "jet_wander_lag1": _JET_WANDER_LAG1,
            "jet_width_degrees": _JET_WIDTH,
            "sst_noise_sd_K": _SST_NOISE_SD,
            "sst_noise_lag1": _SST_NOISE_LAG1,
            "spin_up_days": float(_SPIN_DAYS),
        },
    )


def write_scenario(
    out_dir: str | os.PathLike,
    seed: int | np.random.Generator = 0,
    members: int = 20,
    winters: int = 30,
    *,
    changes: bool = True,
) -> dict[str, list[Path]]:
    """Write the demo scenario as netCDF: one file for the reference, one per member.

    Writes ``OUT/reference.nc``, ``OUT/control/member_000.nc ...`` and
    ``OUT/perturbed/member_000.nc ...`` (netCDF4; member files carry no member dimension, their
    index is the global attribute ``realization_index``). Each file is written under a temporary
    name and renamed when complete, so no half-written file is left.

    Raises
    ------
    ConfigError
        If any of the files already exists (nothing is written then).

    Returns
    -------
    dict mapping "reference", "control", "perturbed" to the lists of paths written.
    """
    members = _check_count(members, "members")
    winters = _check_count(winters, "winters")
    out = Path(out_dir)
    targets = {
        "reference": [out / "reference.nc"],
        "control": [out / "control" / f"member_{i:03d}.nc" for i in range(members)],
        "perturbed": [out / "perturbed" / f"member_{i:03d}.nc" for i in range(members)],
    }
    for path in (p for paths in targets.values() for p in paths):
        _refuse_existing(path)
    data = scenario(seed, members, winters, changes=changes)
    _write_atomic(data["reference"], targets["reference"][0])
    for name in ("control", "perturbed"):
        ds = data[name]
        for i, path in enumerate(targets[name]):
            member = ds.isel(realization=i, drop=True)
            member.attrs = {**ds.attrs, "realization_index": i}
            _write_atomic(member, path)
    return targets


def _refuse_existing(path: Path) -> None:
    if path.exists():
        raise ConfigError.make(
            f"output file {str(path)!r}",
            "an existing file",
            "a directory where the demo data can be written without overwriting anything",
            "choose another (new or empty) output directory",
        )


def _write_atomic(ds: xr.Dataset, path: Path) -> None:
    """Write as float32 netCDF under a temporary name in the same directory, then rename."""
    _refuse_existing(path)
    write_netcdf(ds, path)
