"""Memory figures: autocorrelation functions with e-folding times, and cross-correlation."""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
import xarray as xr
from matplotlib.figure import Figure

from ._common import (
    DATASET_DIM,
    colors_for,
    matching,
    new_figure,
    plain,
    require_dims,
    units_of,
    value_at,
    with_units,
)

__all__ = ["cross_correlation", "memory_functions"]

INDEX_NAMES = {"nao": "NAO", "jet_latitude": "jet latitude", "jet_speed": "jet speed"}


def _band(ax, x, low, high, label, color, **where) -> None:
    """Shade the interval [low, high] of one dataset (and index) where both are given."""
    if low is not None and high is not None:
        where = {DATASET_DIM: label, **where}
        ax.fill_between(
            x,
            np.asarray(low.sel(where).values, dtype=float),
            np.asarray(high.sel(where).values, dtype=float),
            color=color,
            alpha=0.18,
            linewidth=0,
        )


def memory_functions(
    acf: xr.DataArray,
    band_low: xr.DataArray | None = None,
    band_high: xr.DataArray | None = None,
    efolding: xr.DataArray | None = None,
    *,
    colors: Mapping[str, str] | None = None,
    title: str | None = "Index memory",
) -> Figure:
    """Autocorrelation functions of the daily indices: one panel per index, one line per dataset.

    Parameters
    ----------
    acf : DataArray (dataset, index, lag), dimensionless; `index` holds names such as "nao",
        "jet_latitude", "jet_speed"; `lag` in days.
    band_low, band_high : DataArrays like `acf`: the resampling interval, shaded.
    efolding : DataArray (dataset, index), days: e-folding time, marked on the 1/e line and
        given in the legend.
    colors : dataset label -> colour (a run's `dataset_colors`); default a fresh palette.
    title : figure title, or None.

    Returns
    -------
    Figure with one axes per index; a dashed line marks 1/e.
    """
    dims = (DATASET_DIM, "index", "lag")
    acf = require_dims(acf, "acf", dims)
    low = matching(band_low, "band_low", acf, dims)
    high = matching(band_high, "band_high", acf, dims)
    tau = matching(efolding, "efolding", acf.isel(lag=0, drop=True), (DATASET_DIM, "index"))
    labels = list(acf[DATASET_DIM].values)
    indices = list(acf["index"].values)
    palette = colors_for(labels, colors)
    lag = np.asarray(acf["lag"].values, dtype=float)
    lag_units = units_of(acf["lag"], "days")
    fig = new_figure(3.4 * len(indices) + 0.4, 3.6)
    axes = fig.subplots(1, len(indices), squeeze=False, sharey=True)[0]
    for ax, index in zip(axes, indices, strict=True):
        handles, names = [], []
        for label in labels:
            color = palette[label]
            curve = acf.sel({DATASET_DIM: label, "index": index})
            _band(ax, lag, low, high, label, color, index=index)
            (line,) = ax.plot(lag, np.asarray(curve.values, dtype=float), color=color, lw=1.6)
            name = plain(label)
            days = value_at(tau, **{DATASET_DIM: label, "index": index})
            if days is not None:
                ax.plot(
                    [days],
                    [math.exp(-1)],
                    marker="o",
                    color=color,
                    markersize=5,
                    markeredgecolor="white",
                    zorder=5,
                )
                name += f" ({days:.1f} {plain(lag_units)})"
            handles.append(line)
            names.append(name)
        ax.axhline(math.exp(-1), color="0.4", linestyle="--", lw=0.9)
        ax.axhline(0.0, color="0.6", lw=0.6)
        ax.set_title(plain(INDEX_NAMES.get(str(index), index)), fontsize=10)
        ax.set_xlabel(with_units("lag", lag_units))
        ax.legend(
            handles,
            names,
            fontsize=7,
            frameon=False,
            title="e-folding time" if tau is not None else None,
            title_fontsize=7,
        )
    axes[0].set_ylabel(with_units("autocorrelation", units_of(acf, "dimensionless")))
    axes[-1].annotate(
        "1/e",
        (1.0, math.exp(-1)),
        xycoords=("axes fraction", "data"),
        xytext=(-2, 2),
        textcoords="offset points",
        ha="right",
        va="bottom",
        fontsize=7,
        color="0.3",
    )
    if title:
        fig.suptitle(plain(title))
    return fig


def cross_correlation(
    ccf: xr.DataArray,
    band_low: xr.DataArray | None = None,
    band_high: xr.DataArray | None = None,
    *,
    colors: Mapping[str, str] | None = None,
    title: str | None = None,
) -> Figure:
    """Lagged cross-correlation per dataset, e.g. of the NAO with an SST tripole index.

    Parameters
    ----------
    ccf : DataArray (dataset, lag), dimensionless, lag from -L to L in days. The sign
        convention of the lag, ``ccf.attrs["lag_convention"]`` (e.g. "positive lag: NAO leads
        SST"), is written under the axis.
    band_low, band_high : DataArrays like `ccf`: the resampling interval, shaded.
    colors : dataset label -> colour (a run's `dataset_colors`); default a fresh palette.
    title : figure title; default the `long_name` attribute or "Cross-correlation".

    Returns
    -------
    Figure with one axes.
    """
    dims = (DATASET_DIM, "lag")
    ccf = require_dims(ccf, "ccf", dims)
    low = matching(band_low, "band_low", ccf, dims)
    high = matching(band_high, "band_high", ccf, dims)
    labels = list(ccf[DATASET_DIM].values)
    palette = colors_for(labels, colors)
    lag = np.asarray(ccf["lag"].values, dtype=float)
    fig = new_figure(6.0, 4.0)
    ax = fig.subplots()
    handles = []
    for label in labels:
        color = palette[label]
        _band(ax, lag, low, high, label, color)
        (line,) = ax.plot(
            lag, np.asarray(ccf.sel({DATASET_DIM: label}).values, dtype=float), color=color, lw=1.6
        )
        handles.append(line)
    ax.axhline(0.0, color="0.6", lw=0.6)
    ax.axvline(0.0, color="0.6", lw=0.6)
    xlabel = with_units("lag", units_of(ccf["lag"], "days"))
    convention = ccf.attrs.get("lag_convention")
    if convention:
        xlabel += "\n" + plain(convention)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(with_units("cross-correlation", units_of(ccf, "dimensionless")))
    ax.legend(handles, [plain(label) for label in labels], fontsize=8, frameon=False)
    if title is None:
        title = ccf.attrs.get("long_name") or "Cross-correlation"
    if title:
        ax.set_title(plain(title))
    return fig
