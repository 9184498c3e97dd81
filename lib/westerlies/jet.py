"""Eddy-driven jet latitude and speed.

Method: Woollings, Hannachi and Hoskins (2010), Q. J. R. Meteorol. Soc. 136, 856-868.
Defaults follow the paper (from memory): mass-weighted mean zonal wind over 925-700 hPa, zonal
mean over 60W-0, 15-75N, 10-day Lanczos low-pass with 61 weights, then the latitude and speed
of the maximum of each day's profile. The maximum is refined below the grid spacing by a
parabola through the grid maximum and its two neighbours (common practice).

Filter before selecting a season: pass e.g. November-March data, then select DJF from the result
with `westerlies.filters.select_filtered_season`, which warns when season days were lost.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence

import numpy as np
import xarray as xr

from .errors import CoordinateError, GridError, InputError, InputWarning, MissingValueError
from .filters import EdgeTreatment, _check_time, lowpass

__all__ = ["jet_from_profile", "jet_index", "sector_profile"]


def _profile_maximum(profiles: np.ndarray, lat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Latitude and value of each profile's maximum, refined by a parabola. (..., lat) -> (...).

    The parabola goes through the grid maximum and its two neighbours (any spacing). A maximum
    on the first or last latitude is not refined. A profile with any NaN gives NaN.
    """
    y = np.asarray(profiles, dtype=float)
    lat = np.asarray(lat, dtype=float)
    bad = np.isnan(y).any(axis=-1)
    i = np.argmax(np.where(np.isnan(y), -np.inf, y), axis=-1)
    inner = np.clip(i, 1, lat.size - 2)
    x0, x1, x2 = lat[inner - 1], lat[inner], lat[inner + 1]
    y0 = np.take_along_axis(y, (inner - 1)[..., None], -1)[..., 0]
    y1 = np.take_along_axis(y, inner[..., None], -1)[..., 0]
    y2 = np.take_along_axis(y, (inner + 1)[..., None], -1)[..., 0]
    # Vertex of the parabola through three points (Lagrange form, any spacing).
    d01, d12 = (y1 - y0) / (x1 - x0), (y2 - y1) / (x2 - x1)
    curvature = (d12 - d01) / (x2 - x0)  # half the second derivative; < 0 at a maximum
    with np.errstate(invalid="ignore", divide="ignore"):
        vertex = 0.5 * (x0 + x1) - d01 / (2 * curvature)
    refine = (i == inner) & (curvature < 0)
    vertex = np.clip(vertex, x0, x2)
    value = y0 + (vertex - x0) * (d01 + curvature * (vertex - x1))
    edge_lat, edge_val = lat[i], np.take_along_axis(y, i[..., None], -1)[..., 0]
    latitude = np.where(refine, vertex, edge_lat)
    speed = np.where(refine, value, edge_val)
    return np.where(bad, np.nan, latitude), np.where(bad, np.nan, speed)


def _level_weights(plev: np.ndarray) -> np.ndarray:
    """Trapezoidal weights in pressure for a mass-weighted mean; one level gets weight 1."""
    p = np.asarray(plev, dtype=float)
    if p.size == 1:
        return np.ones(1)
    order = np.argsort(p)
    ps = p[order]
    w = np.zeros(p.size)
    w[1:] += 0.5 * np.diff(ps)
    w[:-1] += 0.5 * np.diff(ps)
    out = np.empty(p.size)
    out[order] = w / w.sum()
    return out


def _indexer(mask: np.ndarray) -> slice | np.ndarray:
    """A slice when the selected points are contiguous (cheaper for lazy reads), else indices."""
    where = np.flatnonzero(mask)
    if where.size and where[-1] - where[0] + 1 == where.size:
        return slice(int(where[0]), int(where[-1]) + 1)
    return where


def _covers(coord: np.ndarray, low: float, high: float, what: str, name: str) -> None:
    """Raise GridError unless the coordinate spans [low, high] to within one grid spacing."""
    step = np.max(np.abs(np.diff(coord))) if coord.size > 1 else 0.0
    if coord.size == 0 or coord.min() > low + step or coord.max() < high - step:
        found = f"{coord.min():g} to {coord.max():g}" if coord.size else "no values"
        raise GridError.make(
            f"jet_index: {name}",
            found,
            f"a {what} covering {low:g} to {high:g}",
            f"give data covering the {what} or change the '{name}' keyword",
        )


def _sector_profile(
    u: xr.DataArray, levels: Sequence[float] | None, sector: Sequence[float], lat_range
) -> tuple[xr.DataArray, list[float]]:
    """Mass-weighted mean over the levels, zonal mean over the sector: (member, time, lat)."""
    south, north = sorted(float(v) for v in lat_range)
    west, east = (float(v) for v in sector)
    _covers(u["lat"].values, south, north, "latitude range", "lat_range")
    lon = u["lon"].values
    in_sector = (lon >= west) & (lon <= east) if west <= east else (lon >= west) | (lon <= east)
    if west <= east:
        _covers(lon, west, east, "longitude sector", "sector")
    if not in_sector.any():
        raise GridError.make(
            "jet_index: sector",
            f"no longitude of the data in {west:g} to {east:g}",
            "at least one longitude inside the sector",
            "change 'sector' or give wider data",
        )
    lat = u["lat"].values
    u = u.isel(lon=_indexer(in_sector), lat=_indexer((lat >= south) & (lat <= north)))
    if u.sizes["lat"] < 3:
        raise GridError.make(
            "jet_index: lat_range",
            f"{u.sizes['lat']} latitude(s) inside {south:g} to {north:g}",
            "at least 3 latitudes",
            "widen 'lat_range' or give finer data",
        )
    used: list[float] = []
    if levels is not None:
        bottom, top = sorted(float(v) for v in levels)
        if "plev" not in u.dims:
            raise CoordinateError.make(
                "jet_index: variable 'u'",
                f"dims {tuple(u.dims)} without 'plev'",
                "a 'plev' dimension in hPa",
                "open the data with westerlies.open_dataset, or "
                "pass levels=None for wind already on one level or averaged",
            )
        plev = u["plev"].values
        keep = (plev >= bottom - 1e-6) & (plev <= top + 1e-6)
        if not keep.any():
            raise CoordinateError.make(
                "jet_index: levels",
                f"pressure levels {list(map(float, plev))} hPa",
                f"at least one level between {bottom:g} and {top:g} hPa",
                "give wind on levels inside the bounds or change 'levels'",
            )
        u = u.isel(plev=_indexer(keep))
        used = [float(p) for p in u["plev"].values]
    elif "plev" in u.dims:
        raise CoordinateError.make(
            "jet_index: levels",
            f"None with a 'plev' dimension of size {u.sizes['plev']}",
            "bounds of the levels to average, e.g. (925, 700)",
            "pass levels=(925, 700)",
        )
    # Zonal mean first (the largest reduction), then the mass-weighted mean over levels,
    # renormalized over the levels present where some are missing (e.g. below ground).
    profile = u.mean("lon", skipna=True)
    if levels is not None:
        weights = xr.DataArray(_level_weights(profile["plev"].values), dims="plev")
        total = (profile * weights).sum("plev", skipna=True)
        profile = total / (profile.notnull() * weights).sum("plev")
    return profile.transpose("member", "time", "lat"), used


def jet_index(
    u: xr.DataArray,
    *,
    levels: Sequence[float] | None = (925, 700),
    sector: Sequence[float] = (-60, 0),
    lat_range: Sequence[float] = (15, 75),
    cutoff_days: float | None = 10,
    n_weights: int = 61,
    edge: EdgeTreatment = "nan",
) -> xr.Dataset:
    """Daily eddy-driven jet latitude (degrees_north) and speed (m s-1).

    Parameters
    ----------
    u : DataArray (member, time, plev, lat, lon), zonal wind in m s-1, canonical form (see
        `westerlies.data.open_dataset`), daily, numpy- or dask-backed. Pass a period longer than
        the season of interest (e.g. November-March for DJF): the filter loses
        (n_weights - 1) / 2 days at each edge of each block.
    levels : bounds in hPa of the levels to average, mass-weighted (trapezoidal in pressure);
        every level of the data inside the bounds is used, one level is enough. None: `u` has
        no `plev` dimension (already on one level or averaged).
    sector : west and east longitude bounds in degrees_east (west > east crosses 180).
    lat_range : south and north latitude bounds in degrees_north.
    cutoff_days : Lanczos low-pass cutoff period in days; None skips the filter.
    n_weights : number of Lanczos weights (odd).
    edge : edge treatment of the filter, see `westerlies.filters.lowpass`.

    Returns
    -------
    Dataset with `latitude` and `speed` on (member, time). Days without a full filter window,
    and days whose profile has a missing value, are NaN; their counts are in the attributes.

    Notes
    -----
    The sector is reduced first (zonal mean at each level, then the mass-weighted mean over
    levels; lazily for dask input) and the small (member, time, lat) profile is then computed
    in memory, filtered and searched. Where some values are missing (e.g. below ground) the
    means use the values present.
    """
    profile, used = sector_profile(u, levels=levels, sector=sector, lat_range=lat_range)
    return jet_from_profile(
        profile.compute(),
        used=used,
        sector=sector,
        lat_range=lat_range,
        cutoff_days=cutoff_days,
        n_weights=n_weights,
        edge=edge,
    )


def sector_profile(
    u: xr.DataArray,
    *,
    levels: Sequence[float] | None = (925, 700),
    sector: Sequence[float] = (-60, 0),
    lat_range: Sequence[float] = (15, 75),
) -> tuple[xr.DataArray, list[float]]:
    """The first half of `jet_index`: the (member, time, lat) wind profile of the sector (m
    s-1), lazy for dask input, and the levels used (hPa). Computing several datasets' profiles
    together, then `jet_from_profile`, gives `jet_index` with one pass over the files."""
    if not isinstance(u, xr.DataArray):
        raise InputError.make(
            "jet_index: u",
            type(u).__name__,
            "an xarray DataArray of zonal wind",
            "pass ds['u'] from westerlies.open_dataset",
        )
    missing_dims = {"member", "time", "lat", "lon"} - set(u.dims)
    if missing_dims:
        raise CoordinateError.make(
            "jet_index: variable 'u'",
            f"dims {tuple(u.dims)}",
            "dims member, time, plev, lat, lon (canonical form)",
            "open the data with westerlies.open_dataset",
        )
    _check_time(u, "jet_index")
    return _sector_profile(u, levels, sector, lat_range)


def jet_from_profile(
    profile: xr.DataArray,
    *,
    used: list[float],
    sector: Sequence[float],
    lat_range: Sequence[float],
    cutoff_days: float | None,
    n_weights: int,
    edge: EdgeTreatment = "nan",
) -> xr.Dataset:
    """The second half of `jet_index` on an in-memory `sector_profile`, with the keywords of
    `jet_index` (all but `edge` given explicitly: the defaults are `jet_index`'s)."""
    gaps = profile.isnull().any("lat")
    n_missing = int(gaps.sum())
    if n_missing == gaps.size:
        raise MissingValueError.make(
            "jet_index: variable 'u'",
            "no complete wind profile in the sector on any day",
            "wind values in the sector and latitude range",
            "check the data for missing values",
        )
    if n_missing:
        warnings.warn(
            f"jet_index: {n_missing} (member, time) day(s) have missing wind in the sector "
            f"profile; their jet latitude and speed are NaN"
            + ("" if cutoff_days is None else " and the filter drops the days next to them"),
            InputWarning,
            stacklevel=2,
        )
        profile = profile.where(~gaps)
    attrs_filter: dict = {"filter": "none"}
    if cutoff_days is not None:
        if "season_year" in profile.coords:
            warnings.warn(
                "jet_index: the data are already restricted to a season (coordinate "
                "'season_year'), so the filter loses days at both ends of every season; filter "
                "a longer period (e.g. November-March) and select the season afterwards",
                InputWarning,
                stacklevel=2,
            )
        profile = lowpass(profile, cutoff_days, n_weights, edge=edge)
        attrs_filter = {
            "filter": profile.attrs["method"],
            "filter_cutoff_days": float(cutoff_days),
            "filter_n_weights": int(n_weights),
            "filter_edge": edge,
            "filter_edge_days": profile.attrs["filter_edge_days"],
        }
    lat_values, speed_values = _profile_maximum(profile.values, profile["lat"].values)
    coords = {k: v for k, v in profile.coords.items() if set(v.dims) <= {"member", "time"}}
    latitude = xr.DataArray(lat_values, dims=("member", "time"), coords=coords)
    speed = xr.DataArray(speed_values, dims=("member", "time"), coords=coords)
    lat_grid = profile["lat"].values
    at_edge = int(np.isin(latitude.values, lat_grid[[0, -1]]).sum())
    south, north = sorted(float(v) for v in lat_range)
    west, east = (float(v) for v in sector)
    method = (
        "eddy-driven jet latitude and speed after Woollings, Hannachi and Hoskins (2010): "
        f"mass-weighted mean zonal wind over levels {used if used else 'as given'} hPa, "
        f"zonal mean {west:g} to {east:g} degrees_east, {south:g} to {north:g} degrees_north, "
        + (
            "no time filter"
            if cutoff_days is None
            else f"Lanczos low-pass {cutoff_days:g} days with {n_weights} weights"
        )
        + ", maximum refined by a parabola through the grid maximum and its neighbours"
    )
    attrs = {
        "method": method,
        "levels_hPa": used if used else "as given",
        "sector_degrees_east": [west, east],
        "lat_range_degrees_north": [south, north],
        "days_missing_profile": n_missing,
        "days_at_lat_range_edge": at_edge,
        **attrs_filter,
    }
    latitude.attrs = {"units": "degrees_north", "long_name": "eddy-driven jet latitude", **attrs}
    speed.attrs = {"units": "m s-1", "long_name": "eddy-driven jet speed", **attrs}
    ds = xr.Dataset({"latitude": latitude, "speed": speed})
    ds.attrs = {"method": method}
    return ds
