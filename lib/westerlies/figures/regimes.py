"""Regime figures: occupancy bars with intervals and significance marks, persistence survival."""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
import xarray as xr
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

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

__all__ = ["occupancy_bars", "persistence_survival"]

SIGNIFICANCE_MARK = "*"


def occupancy_bars(
    occupancy: xr.DataArray,
    ci_low: xr.DataArray | None = None,
    ci_high: xr.DataArray | None = None,
    significant: xr.DataArray | None = None,
    *,
    ylabel: str = "occupancy (percent of days)",
    colors: Mapping[str, str] | None = None,
    title: str | None = None,
) -> Figure:
    """Grouped bars of occupancy per regime (or jet category), one colour per dataset.

    Parameters
    ----------
    occupancy : DataArray (dataset, regime) or (dataset, category), fraction of days (0-1);
        drawn as percent.
    ci_low, ci_high : DataArrays like `occupancy`, fractions: the interval, drawn as error bars.
    significant : bool DataArray like `occupancy`: True where the dataset differs significantly
        from the baseline; marked with an asterisk above the bar. NaN counts as False.
    ylabel : y axis label (with its units).
    colors : dataset label -> colour (a run's `dataset_colors`); default a fresh palette.
    title : figure title; default "Regime occupancy" or "Jet category occupancy".

    Returns
    -------
    Figure with one axes.
    """
    dims = (DATASET_DIM, ("regime", "category"))
    occupancy = require_dims(occupancy, "occupancy", dims)
    group_dim = occupancy.dims[1]
    low = matching(ci_low, "ci_low", occupancy, dims)
    high = matching(ci_high, "ci_high", occupancy, dims)
    flags = matching(significant, "significant", occupancy, dims)
    labels = list(occupancy[DATASET_DIM].values)
    groups = list(occupancy[group_dim].values)
    palette = colors_for(labels, colors)
    n_sets = len(labels)
    width = 0.8 / n_sets
    positions = np.arange(len(groups), dtype=float)
    fig = new_figure(max(5.0, 1.0 + 0.45 * len(groups) * max(n_sets, 2)), 4.0)
    ax = fig.subplots()
    handles = []
    top = 0.0
    for k, label in enumerate(labels):
        x = positions - 0.4 + width * (k + 0.5)
        values = 100 * np.asarray(occupancy.sel({DATASET_DIM: label}).values, dtype=float)
        errors = None
        upper = values
        if low is not None and high is not None:
            lo = 100 * np.asarray(low.sel({DATASET_DIM: label}).values, dtype=float)
            hi = 100 * np.asarray(high.sel({DATASET_DIM: label}).values, dtype=float)
            # Error bars from the interval; absent intervals (NaN) draw no bar.
            errors = np.vstack([np.clip(values - lo, 0, None), np.clip(hi - values, 0, None)])
            upper = np.fmax(values, hi)
        bars = ax.bar(
            x,
            values,
            width=width * 0.95,
            color=palette[label],
            yerr=errors,
            error_kw={"elinewidth": 0.9, "capsize": 2, "ecolor": "0.2"},
        )
        handles.append(bars)
        top = max(top, float(np.nanmax(upper, initial=0.0)))
        if flags is not None:
            marked = np.asarray(flags.sel({DATASET_DIM: label}).fillna(False).values, dtype=bool)
            for xi, yi in zip(x[marked], upper[marked], strict=True):
                ax.text(
                    xi,
                    (yi if math.isfinite(yi) else 0.0),
                    SIGNIFICANCE_MARK,
                    ha="center",
                    va="bottom",
                    fontsize=12,
                    gid="significance",
                )
    ax.set_xticks(positions, [plain(g) for g in groups])
    ax.set_ylabel(plain(ylabel))
    ax.set_ylim(0, top * 1.15 if top > 0 else 1.0)
    names = [plain(label) for label in labels]
    if flags is not None:
        handles.append(Line2D([], [], linestyle="none", marker="$*$", color="black"))
        names.append("significant vs baseline")
    fig.legend(
        handles,
        names,
        loc="outside lower center",
        fontsize=8,
        frameon=False,
        ncols=min(len(names), 4),
    )
    if title is None:
        title = "Regime occupancy" if group_dim == "regime" else "Jet category occupancy"
    if title:
        ax.set_title(plain(title))
    return fig


def persistence_survival(
    survival: xr.DataArray,
    *,
    colors: Mapping[str, str] | None = None,
    title: str | None = "Regime persistence",
) -> Figure:
    """Survival curves of regime episodes: one panel per regime, one line per dataset.

    Parameters
    ----------
    survival : DataArray (dataset, regime, length), fraction (0-1) of episodes lasting at least
        `length` days; `length` in days. Zero fractions are left out (log scale).
    colors : dataset label -> colour (a run's `dataset_colors`); default a fresh palette.
    title : figure title, or None.

    Returns
    -------
    Figure with one axes per regime, log y axes.
    """
    survival = require_dims(survival, "survival", (DATASET_DIM, "regime", "length"))
    labels = list(survival[DATASET_DIM].values)
    regimes = list(survival["regime"].values)
    palette = colors_for(labels, colors)
    length = np.asarray(survival["length"].values, dtype=float)
    n_cols = min(len(regimes), 4)
    n_rows = math.ceil(len(regimes) / n_cols)
    fig = new_figure(3.0 * n_cols + 0.5, 2.6 * n_rows + 0.6)
    grid = fig.subplots(n_rows, n_cols, squeeze=False, sharey=True)
    axes = list(grid.ravel())
    for ax in axes[len(regimes) :]:
        ax.remove()
    handles = []
    for ax, regime in zip(axes, regimes, strict=False):
        handles = []
        for label in labels:
            values = np.asarray(
                survival.sel({DATASET_DIM: label, "regime": regime}).values, dtype=float
            )
            values = np.where(values > 0, values, np.nan)
            (line,) = ax.plot(length, values, color=palette[label], lw=1.6, drawstyle="steps-post")
            handles.append(line)
        ax.set_yscale("log")
        ax.set_title(plain(regime), fontsize=10)
        ax.set_xlabel(with_units("episode length", units_of(survival["length"], "days")))
        ax.grid(True, which="major", lw=0.3, alpha=0.5)
    for row in grid:
        row[0].set_ylabel(with_units("episodes at least that long", units_of(survival, "fraction")))
    fig.legend(
        handles,
        [plain(label) for label in labels],
        loc="outside lower center",
        ncols=min(len(labels), 5),
        fontsize=8,
        frameon=False,
    )
    if title:
        fig.suptitle(plain(title))
    return fig
