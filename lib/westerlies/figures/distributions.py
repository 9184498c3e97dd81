"""Distribution figures: daily NAO index histograms, jet latitude densities, latitude vs speed.

Kernel density lines use scipy's `gaussian_kde` with Scott's rule (scipy's default); they are a
visual guide only, the diagnostics' own densities come from `westerlies.density`.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import xarray as xr
from matplotlib.figure import Figure
from scipy.stats import gaussian_kde

from ..errors import InputError
from ._common import (
    DATASET_DIM,
    colors_for,
    matching,
    new_figure,
    plain,
    require_dims,
    units_of,
    with_units,
)

__all__ = ["index_distributions", "jet_densities", "jet_latitude_speed"]


def _finite(values: object, name: str) -> np.ndarray:
    """A flat float array of the finite values of `values`."""
    if isinstance(values, xr.DataArray):
        values = values.values
    try:
        array = np.asarray(values, dtype=float).ravel()
    except (TypeError, ValueError) as err:
        raise InputError.make(
            name,
            f"values that are not numbers ({err})",
            "a numeric 1-D array",
            "pass the daily index as numbers",
        ) from err
    return array[np.isfinite(array)]


def _series(data: Mapping[str, object], name: str) -> dict[str, np.ndarray]:
    if not isinstance(data, Mapping) or not data:
        raise InputError.make(
            name,
            f"{type(data).__name__} {'(empty)' if not data else ''}".strip(),
            "a non-empty dict label -> 1-D array",
            "pass e.g. {'control': index_values}",
        )
    return {str(k): _finite(v, f"{name}[{k!r}]") for k, v in data.items()}


def _kde_line(values: np.ndarray, grid: np.ndarray) -> np.ndarray | None:
    """Gaussian-KDE density on `grid`, or None when the values cannot carry one."""
    if values.size < 3 or np.ptp(values) == 0:
        return None
    try:
        return gaussian_kde(values)(grid)
    except np.linalg.LinAlgError:
        return None


def _legend(ax, handles: list, labels: list[str], **kwargs) -> None:
    # Explicit handles and labels: matplotlib hides automatic labels starting with "_".
    if handles:
        ax.legend(handles, labels, fontsize=8, frameon=False, **kwargs)


def index_distributions(
    indices: Mapping[str, object],
    *,
    xlabel: str | None = None,
    colors: Mapping[str, str] | None = None,
    bins: int = 40,
    title: str | None = "NAO index distributions",
) -> Figure:
    """Histogram (density) and Gaussian-KDE line of a daily index for each dataset.

    Parameters
    ----------
    indices : dict label -> 1-D array-like or DataArray of daily index values (any shape is
        flattened; non-finite values are dropped), in units of the fitting dataset's standard
        deviation for the NAO.
    xlabel : axis label; default from the `long_name`/`units` attributes of the first DataArray
        or "NAO index (standard deviations of the reference)".
    colors : dataset label -> colour (a run's `dataset_colors`); default a fresh palette.
    bins : number of histogram bins shared by all datasets.
    title : figure title, or None.

    Returns
    -------
    Figure with one axes.
    """
    series = _series(indices, "indices")
    palette = colors_for(list(series), colors)
    if xlabel is None:
        first = next((v for v in indices.values() if isinstance(v, xr.DataArray)), None)
        units = units_of(first, "")
        name = (first.attrs.get("long_name") if first is not None else None) or "NAO index"
        xlabel = (
            with_units(plain(name), units)
            if units
            else "NAO index (standard deviations of the reference)"
        )
    fig = new_figure(6.0, 4.0)
    ax = fig.subplots()
    pooled = np.concatenate([v for v in series.values()] + [np.zeros(0)])
    if pooled.size:
        low, high = float(pooled.min()), float(pooled.max())
        if low == high:
            low, high = low - 0.5, high + 0.5
        edges = np.linspace(low, high, bins + 1)
        grid = np.linspace(low - 0.1 * (high - low), high + 0.1 * (high - low), 400)
    handles, names = [], []
    for label, values in series.items():
        if values.size == 0:
            continue
        color = palette[label]
        ax.hist(values, bins=edges, density=True, histtype="step", lw=0.8, alpha=0.7, color=color)
        density = _kde_line(values, grid)
        if density is not None:
            (line,) = ax.plot(grid, density, color=color, lw=1.8)
        else:
            line = ax.axvline(values.mean(), color=color, lw=1.8)
        handles.append(line)
        names.append(f"{plain(label)} (n = {values.size})")
    ax.set_xlabel(plain(xlabel))
    ax.set_ylabel("probability density (per unit index)")
    _legend(ax, handles, names)
    if title:
        ax.set_title(plain(title))
    return fig


def jet_densities(
    density: xr.DataArray,
    band_low: xr.DataArray | None = None,
    band_high: xr.DataArray | None = None,
    modes: Mapping[str, object] | None = None,
    bounds: object | None = None,
    *,
    colors: Mapping[str, str] | None = None,
    title: str | None = "Jet latitude",
) -> Figure:
    """Jet latitude density per dataset, with resampling bands, modes and category bounds.

    Parameters
    ----------
    density : DataArray (dataset, latitude), probability density per degree of latitude; the
        latitude dim may be named `latitude` or `lat` (degrees_north).
    band_low, band_high : DataArrays like `density`: the block-bootstrap interval, shaded.
    modes : dict label -> list of mode latitudes (degrees_north), marked by triangles on the curve.
    bounds : latitudes (degrees_north) of the category bounds from the fitting dataset, drawn as
        dashed vertical lines: usually two (south/central, central/north), one per density
        minimum in general.
    colors : dataset label -> colour (a run's `dataset_colors`); default a fresh palette.
    title : figure title, or None.

    Returns
    -------
    Figure with one axes.
    """
    density = require_dims(density, "density", (DATASET_DIM, ("latitude", "lat")))
    lat_dim = density.dims[1]
    lo = matching(band_low, "band_low", density, (DATASET_DIM, ("latitude", "lat")))
    hi = matching(band_high, "band_high", density, (DATASET_DIM, ("latitude", "lat")))
    labels = list(density[DATASET_DIM].values)
    palette = colors_for(labels, colors)
    lat = np.asarray(density[lat_dim].values, dtype=float)
    fig = new_figure(6.5, 4.0)
    ax = fig.subplots()
    handles, names = [], []
    for label in labels:
        color = palette[label]
        curve = np.asarray(density.sel({DATASET_DIM: label}).values, dtype=float)
        (line,) = ax.plot(lat, curve, color=color, lw=1.8)
        handles.append(line)
        names.append(plain(label))
        if lo is not None and hi is not None:
            ax.fill_between(
                lat,
                np.asarray(lo.sel({DATASET_DIM: label}).values, dtype=float),
                np.asarray(hi.sel({DATASET_DIM: label}).values, dtype=float),
                color=color,
                alpha=0.2,
                linewidth=0,
            )
        if modes and label in modes:
            where = _finite(modes[label], f"modes[{label!r}]")
            if where.size:
                ax.plot(
                    where,
                    np.interp(where, lat, curve),
                    linestyle="none",
                    marker="v",
                    markersize=7,
                    color=color,
                    markeredgecolor="white",
                    zorder=5,
                )
    if bounds is not None:
        edges = _finite(bounds, "bounds")  # two for three preferred positions; any number works
        for k, edge in enumerate(edges):
            line = ax.axvline(edge, color="0.35", linestyle="--", lw=1.0)
            if k == 0:
                handles.append(line)
                names.append("category bounds")
    if modes:
        from matplotlib.lines import Line2D

        handles.append(Line2D([], [], color="0.35", marker="v", linestyle="none"))
        names.append("modes")
    ax.set_xlabel(with_units("jet latitude", units_of(density[lat_dim], "degrees_north")))
    ax.set_ylabel(with_units("probability density", units_of(density, "per degree")))
    ax.set_ylim(bottom=0)
    _legend(ax, handles, names)
    if title:
        ax.set_title(plain(title))
    return fig


def jet_latitude_speed(
    latitude: Mapping[str, object],
    speed: Mapping[str, object],
    *,
    colors: Mapping[str, str] | None = None,
    max_points: int = 4000,
    seed: int = 0,
    title: str | None = "Jet latitude and speed",
) -> Figure:
    """Daily jet latitude against jet speed: faint points and density contours per dataset.

    Parameters
    ----------
    latitude : dict label -> 1-D array-like of daily jet latitude, degrees_north.
    speed : dict label -> 1-D array-like of daily jet speed, m s-1, same lengths as `latitude`.
    colors : dataset label -> colour (a run's `dataset_colors`); default a fresh palette.
    max_points : at most this many points per dataset are drawn and used for the contours
        (a seeded random subset: large ensembles would hide everything under ink).
    seed : seed of that subset.
    title : figure title, or None.

    Returns
    -------
    Figure with one axes; the contours enclose about 50% and 90% of each dataset's days
    (Gaussian-KDE highest-density regions).
    """
    lats = _raw_series(latitude, "latitude")
    speeds = _raw_series(speed, "speed")
    if list(lats) != list(speeds):
        raise InputError.make(
            "speed",
            f"labels {list(speeds)}",
            f"the labels of latitude {list(lats)}",
            "pass both dicts with the same keys in the same order",
        )
    palette = colors_for(list(lats), colors)
    rng = np.random.default_rng(seed)
    fig = new_figure(6.0, 4.5)
    ax = fig.subplots()
    handles, names = [], []
    for label in lats:
        x, y = lats[label], speeds[label]
        if x.shape != y.shape:
            raise InputError.make(
                f"speed[{label!r}]",
                f"{y.size} values",
                f"{x.size} (as latitude)",
                "pass the daily latitude and speed of the same days",
            )
        keep = np.isfinite(x) & np.isfinite(y)
        x, y = x[keep], y[keep]
        if x.size > max_points:
            pick = np.sort(rng.choice(x.size, size=max_points, replace=False))
            x, y = x[pick], y[pick]
        color = palette[label]
        points = ax.scatter(x, y, s=3, alpha=0.25, color=color, linewidths=0, rasterized=True)
        _density_contours(ax, x, y, color)
        handles.append(points)
        names.append(plain(label))
    ax.set_xlabel(with_units("jet latitude", _units_from(latitude, "degrees_north")))
    ax.set_ylabel(with_units("jet speed", _units_from(speed, "m s-1")))
    if handles:
        ax.legend(handles, names, fontsize=8, frameon=False, markerscale=4)
        for handle in ax.get_legend().legend_handles:
            handle.set_alpha(1)
    if title:
        ax.set_title(plain(title))
    return fig


def _raw_series(data: Mapping[str, object], name: str) -> dict[str, np.ndarray]:
    """Like `_series` but keeps non-finite values so latitude and speed stay paired."""
    if not isinstance(data, Mapping) or not data:
        raise InputError.make(
            name,
            type(data).__name__,
            "a non-empty dict label -> 1-D array",
            "pass e.g. {'control': values}",
        )
    out = {}
    for key, values in data.items():
        raw = values.values if isinstance(values, xr.DataArray) else values
        try:
            out[str(key)] = np.asarray(raw, dtype=float).ravel()
        except (TypeError, ValueError) as err:
            raise InputError.make(
                f"{name}[{key!r}]", f"non-numeric values ({err})", "numbers", "pass numbers"
            ) from err
    return out


def _units_from(data: Mapping[str, object], default: str) -> str:
    first = next((v for v in data.values() if isinstance(v, xr.DataArray)), None)
    return units_of(first, default)


def _density_contours(ax, x: np.ndarray, y: np.ndarray, color: str) -> None:
    """Contours of a Gaussian KDE enclosing about 50% and 90% of the points."""
    if x.size < 10 or np.ptp(x) == 0 or np.ptp(y) == 0:
        return
    try:
        kde = gaussian_kde(np.vstack([x, y]))
    except np.linalg.LinAlgError:
        return
    # Highest-density-region levels: the density at the points, at its 50% and 10% quantiles.
    at_points = kde(np.vstack([x, y]))
    levels = np.unique(np.quantile(at_points, [0.1, 0.5]))
    pad_x, pad_y = 0.1 * np.ptp(x), 0.1 * np.ptp(y)
    gx, gy = np.meshgrid(
        np.linspace(x.min() - pad_x, x.max() + pad_x, 60),
        np.linspace(y.min() - pad_y, y.max() + pad_y, 60),
    )
    z = kde(np.vstack([gx.ravel(), gy.ravel()])).reshape(gx.shape)
    if levels.size and z.max() > levels.min():
        ax.contour(gx, gy, z, levels=levels, colors=[color], linewidths=[0.9, 1.4][: levels.size])
