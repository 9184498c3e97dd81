"""Map figures: NAO patterns, Z500 bias and response maps with FDR stippling, regime centroids.

Maps use cartopy's PlateCarree over the extent of the data with coastlines read from disk
(`westerlies.maps.coastlines`); nothing is ever downloaded. Anomaly fields share one diverging
colour scale per figure, symmetric about zero.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import xarray as xr
from matplotlib.collections import QuadMesh
from matplotlib.figure import Figure

from ._common import (
    DATASET_DIM,
    DIVERGING_CMAP,
    matching,
    new_figure,
    plain,
    require_dims,
    symmetric_limit,
    units_of,
    value_at,
    with_units,
)

__all__ = ["difference_maps", "nao_patterns", "regime_maps"]

_STIPPLE_MAX = 60  # at most about this many dots along each axis; denser grids are thinned


def _layout(n: int, max_cols: int = 3) -> tuple[int, int]:
    n_cols = min(n, max_cols)
    return math.ceil(n / n_cols), n_cols


def _map_axes(fig: Figure, n_rows: int, n_cols: int, n_used: int, lat, lon) -> list:
    """A grid of PlateCarree axes over the data extent, with offline coastlines and gridlines."""
    import cartopy.crs as ccrs

    grid = fig.subplots(
        n_rows, n_cols, squeeze=False, subplot_kw={"projection": ccrs.PlateCarree()}
    )
    extent = (float(lon.min()), float(lon.max()), float(lat.min()), float(lat.max()))
    feature = _clipped_coastlines(extent)
    used = []
    for k, ax in enumerate(grid.ravel()):
        if k >= n_used:
            ax.remove()
            continue
        col = k % n_cols
        ax.set_extent(extent, crs=ccrs.PlateCarree())
        if feature is not None:
            ax.add_feature(feature)
        _degree_ticks(ax, extent, left=col == 0, bottom=k + n_cols >= n_used)
        used.append(ax)
    return used


def _tick_values(low: float, high: float) -> np.ndarray:
    span = high - low
    step = next((s for s in (10.0, 20.0, 30.0) if span / s <= 6), 60.0)
    return np.arange(math.ceil(low / step) * step, high + 1e-9, step)


def _degree_ticks(ax, extent, *, left: bool, bottom: bool) -> None:
    """Longitude and latitude ticks as plain axis ticks (cheap on a PlateCarree map).

    Cartopy's gridline labeller costs about a second per panel; PlateCarree needs none of it.
    Labels show on the left column and the lowest panel of each column only.
    """
    import cartopy.crs as ccrs
    from cartopy.mpl.ticker import LatitudeFormatter, LongitudeFormatter

    west, east, south, north = extent
    ax.set_xticks(_tick_values(west, east), crs=ccrs.PlateCarree())
    ax.set_yticks(_tick_values(south, north), crs=ccrs.PlateCarree())
    ax.xaxis.set_major_formatter(LongitudeFormatter())
    ax.yaxis.set_major_formatter(LatitudeFormatter())
    ax.tick_params(labelsize=7, length=2, labelleft=left, labelbottom=bottom)


@functools.lru_cache(maxsize=8)
def _clipped_coastlines(extent: tuple[float, float, float, float]):
    """The offline coastlines cut to the map extent (plus a margin), or None.

    Cutting once per extent saves cartopy from projecting the whole globe for every panel.
    """
    from cartopy.feature import ShapelyFeature
    from shapely.geometry import box

    from ..maps import coastlines

    feature = coastlines()
    if feature is None:
        return None
    west, east, south, north = extent
    frame = box(west - 5.0, max(south - 5.0, -90.0), east + 5.0, min(north + 5.0, 90.0))
    pieces = [g.intersection(frame) for g in feature.geometries() if g.intersects(frame)]
    return ShapelyFeature([p for p in pieces if not p.is_empty], feature.crs, **feature.kwargs)


def _field(ax, da: xr.DataArray, vmax: float) -> QuadMesh:
    import cartopy.crs as ccrs

    values = np.ma.masked_invalid(np.asarray(da.values, dtype=float))
    return ax.pcolormesh(
        da["lon"].values,
        da["lat"].values,
        values,
        transform=ccrs.PlateCarree(),
        cmap=DIVERGING_CMAP,
        vmin=-vmax,
        vmax=vmax,
        shading="nearest",
        rasterized=True,
    )


def _colorbar(fig: Figure, mesh: QuadMesh, axes: list, label: str) -> None:
    fig.colorbar(
        mesh, ax=axes, orientation="horizontal", shrink=0.6, aspect=40, pad=0.02, label=label
    )


def _check_grid(da: xr.DataArray, name: str) -> None:
    from ..errors import GridError

    for dim in ("lat", "lon"):
        values = np.asarray(da[dim].values, dtype=float)
        if values.size < 2 or not np.all(np.diff(values) > 0):
            raise GridError.make(
                f"{name} coordinate '{dim}'",
                f"{values.size} values, not strictly ascending",
                "at least two ascending values",
                "pass data in canonical form (open_dataset)",
            )


def nao_patterns(
    patterns: xr.DataArray,
    pattern_correlation: xr.DataArray | None = None,
    variance_fraction: xr.DataArray | None = None,
    *,
    title: str | None = "NAO patterns",
) -> Figure:
    """Each dataset's own NAO pattern on one shared, zero-centred colour scale.

    Parameters
    ----------
    patterns : DataArray (dataset, lat, lon), m per unit index (the `units` attribute is shown
        on the colour bar): each dataset's leading EOF as a regression map.
    pattern_correlation : DataArray (dataset), dimensionless: correlation of each dataset's
        pattern with the fitting dataset's; shown in the panel titles where given.
    variance_fraction : DataArray (dataset), fraction (0-1) of variance explained by the leading
        EOF; shown as percent in the panel titles where given.
    title : figure title, or None for none.

    Returns
    -------
    Figure with one map panel per dataset and one colour bar.
    """
    patterns = require_dims(patterns, "patterns", (DATASET_DIM, "lat", "lon"))
    _check_grid(patterns, "patterns")
    labels = list(patterns[DATASET_DIM].values)
    n_rows, n_cols = _layout(len(labels))
    fig = new_figure(3.6 * n_cols + 0.3, 2.3 * n_rows + 1.0)
    axes = _map_axes(fig, n_rows, n_cols, len(labels), patterns["lat"], patterns["lon"])
    vmax = symmetric_limit(patterns.values)
    mesh = None
    for ax, label in zip(axes, labels, strict=True):
        mesh = _field(ax, patterns.sel({DATASET_DIM: label}), vmax)
        details = []
        r = value_at(pattern_correlation, **{DATASET_DIM: label})
        if r is not None:
            details.append(f"pattern corr. {r:.2f}")
        fraction = value_at(variance_fraction, **{DATASET_DIM: label})
        if fraction is not None:
            details.append(f"{100 * fraction:.1f}% of variance")
        heading = plain(label) + ("\n" + ", ".join(details) if details else "")
        ax.set_title(heading, fontsize=9)
    name = patterns.attrs.get("long_name", "NAO pattern")
    _colorbar(fig, mesh, axes, with_units(plain(name), units_of(patterns, "m per unit index")))
    if title:
        fig.suptitle(plain(title))
    return fig


def difference_maps(
    difference: xr.DataArray,
    significant: xr.DataArray | None = None,
    *,
    kind: str = "bias",
    title: str | None = None,
) -> Figure:
    """Z500 differences per dataset, with significant points (after FDR control) stippled.

    Parameters
    ----------
    difference : DataArray (dataset, lat, lon), m: each dataset minus the reference ("bias")
        or minus the baseline ("response"). ``difference.attrs["versus"]`` names the dataset
        subtracted (used in the panel titles).
    significant : bool DataArray (dataset, lat, lon): True where the difference is significant
        after false-discovery-rate control; those points get a small dot. NaN counts as False.
    kind : "bias" or "response": sets the titles.
    title : figure title; default "Z500 bias" or "Z500 response".

    Returns
    -------
    Figure with one map panel per dataset and one colour bar.
    """
    from ..errors import ConfigError

    if kind not in ("bias", "response"):
        raise ConfigError.make("kind", repr(kind), "'bias' or 'response'", "pass one of those")
    difference = require_dims(difference, "difference", (DATASET_DIM, "lat", "lon"))
    _check_grid(difference, "difference")
    significant = matching(significant, "significant", difference, (DATASET_DIM, "lat", "lon"))
    versus = difference.attrs.get("versus") or ("reference" if kind == "bias" else "baseline")
    labels = list(difference[DATASET_DIM].values)
    n_rows, n_cols = _layout(len(labels))
    fig = new_figure(3.6 * n_cols + 0.3, 2.3 * n_rows + 1.0)
    axes = _map_axes(fig, n_rows, n_cols, len(labels), difference["lat"], difference["lon"])
    vmax = symmetric_limit(difference.values)
    mesh = None
    for ax, label in zip(axes, labels, strict=True):
        mesh = _field(ax, difference.sel({DATASET_DIM: label}), vmax)
        if significant is not None:
            _stipple(ax, significant.sel({DATASET_DIM: label}))
        ax.set_title(f"{plain(label)} minus {plain(versus)}", fontsize=9)
    name = difference.attrs.get("long_name", f"Z500 {kind}")
    label = with_units(plain(name), units_of(difference, "m"))
    if significant is not None:
        label += "; dots: significant after FDR control"
    _colorbar(fig, mesh, axes, label)
    if title is None:
        title = f"Z500 {kind}"
    if title:
        fig.suptitle(plain(title))
    return fig


def _stipple(ax, significant: xr.DataArray) -> None:
    """A small dot at each significant grid point (thinned on dense grids)."""
    import cartopy.crs as ccrs

    flags = np.asarray(significant.fillna(False).values, dtype=bool)
    lat = significant["lat"].values
    lon = significant["lon"].values
    lat_step = max(1, math.ceil(lat.size / _STIPPLE_MAX))
    lon_step = max(1, math.ceil(lon.size / _STIPPLE_MAX))
    flags = flags[::lat_step, ::lon_step]
    if not flags.any():
        return
    lon2, lat2 = np.meshgrid(lon[::lon_step], lat[::lat_step])
    ax.scatter(
        lon2[flags],
        lat2[flags],
        s=2.5,
        c="black",
        marker=".",
        linewidths=0,
        transform=ccrs.PlateCarree(),
        label="significant",
    )


def regime_maps(
    centroids: xr.DataArray,
    occupancy: xr.DataArray | None = None,
    *,
    title: str | None = "Weather regimes",
) -> Figure:
    """Regime centroids: one row per dataset, one column per regime, one shared colour scale.

    Parameters
    ----------
    centroids : DataArray (dataset, regime, lat, lon), m: mean Z500 anomaly of each regime; the
        `regime` coordinate holds the names (e.g. "NAO+", "Scandinavian blocking").
    occupancy : DataArray (dataset, regime), fraction of days (0-1) in each regime; shown as
        percent in the panel titles where given.
    title : figure title, or None for none.

    Returns
    -------
    Figure with datasets x regimes map panels and one colour bar.
    """
    centroids = require_dims(centroids, "centroids", (DATASET_DIM, "regime", "lat", "lon"))
    _check_grid(centroids, "centroids")
    occupancy = matching(
        occupancy, "occupancy", centroids.isel(lat=0, lon=0, drop=True), (DATASET_DIM, "regime")
    )
    labels = list(centroids[DATASET_DIM].values)
    regimes = list(centroids["regime"].values)
    n_rows, n_cols = len(labels), len(regimes)
    fig = new_figure(3.0 * n_cols + 0.6, 1.9 * n_rows + 1.0)
    axes = _map_axes(fig, n_rows, n_cols, n_rows * n_cols, centroids["lat"], centroids["lon"])
    vmax = symmetric_limit(centroids.values)
    mesh = None
    for k, ax in enumerate(axes):
        row, col = divmod(k, n_cols)
        label, regime = labels[row], regimes[col]
        mesh = _field(ax, centroids.sel({DATASET_DIM: label, "regime": regime}), vmax)
        heading = plain(regime)
        fraction = value_at(occupancy, **{DATASET_DIM: label, "regime": regime})
        if fraction is not None:
            heading += f" ({100 * fraction:.1f}%)"
        ax.set_title(heading, fontsize=9)
        if col == 0:
            ax.text(
                -0.2,
                0.5,
                plain(label),
                transform=ax.transAxes,
                rotation=90,
                ha="right",
                va="center",
                fontsize=9,
            )
    name = centroids.attrs.get("long_name", "Z500 anomaly")
    _colorbar(fig, mesh, axes, with_units(plain(name), units_of(centroids, "m")))
    if title:
        fig.suptitle(plain(title))
    return fig
