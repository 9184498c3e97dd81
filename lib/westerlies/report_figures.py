"""The figure set of a comparison: which figure functions are called with which results."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from functools import partial
from typing import Any

import numpy as np
import xarray as xr

from .diagnostics import stack


def _summary_values(summary, diagnostic: str, prefix: str, labels, names, versus=None):
    """(dataset, regime) arrays of value, ci_low, ci_high, significant from the summary."""
    shape = (len(labels), len(names))
    arrays = {c: np.full(shape, np.nan) for c in ("value", "ci_low", "ci_high", "p_value")}
    for i, label in enumerate(labels):
        for j, name in enumerate(names):
            rows = summary[
                (summary["diagnostic"] == diagnostic)
                & (summary["dataset"] == label)
                & (summary["versus"].isna() if versus is None else summary["versus"] == versus)
                & (summary["quantity"].str.startswith(f"{name} {prefix}"))
            ]
            if len(rows):
                for c in arrays:
                    arrays[c][i, j] = rows.iloc[0][c]
    return arrays


def figure_set(comparison) -> Iterator[tuple[str, str, Any]]:
    """Yield (file name, caption, Figure) for every figure, one at a time (memory stays low)."""
    for name, caption, make in figure_recipes(comparison):
        yield name, caption, make()


def figure_recipes(comparison) -> Iterator[tuple[str, str, Callable[[], Any]]]:
    """Yield (file name, caption, make) for every figure: ``make()`` draws it from data already
    gathered, so figures can be drawn anywhere (e.g. on a cluster's workers), one at a time."""
    from . import figures

    d = comparison.details
    labels = comparison.labels
    summary = comparison.summary
    colors = figures.dataset_colors(labels)
    alpha = comparison.options["resampling"]["alpha"]

    # NAO patterns, each dataset's own leading EOF
    own = {
        k: c["regression_map"].sel(pattern="own", drop=True) for k, c in d["nao_compare"].items()
    }
    corr = xr.DataArray(
        [float(d["nao_compare"][k]["pattern_correlation_centred"]) for k in own],
        dims="dataset",
        coords={"dataset": list(own)},
    )
    frac = xr.DataArray(
        [float(d["nao_compare"][k]["variance_fraction"].sel(pattern="own")) for k in own],
        dims="dataset",
        coords={"dataset": list(own)},
    )
    patterns = stack(own).assign_attrs(units="m per unit index")
    yield (
        "nao_patterns",
        "NAO patterns: each dataset's own leading EOF as a regression map, "
        "with its pattern correlation with the fitted NAO and its variance fraction",
        partial(figures.nao_patterns, patterns, pattern_correlation=corr, variance_fraction=frac),
    )

    maps = comparison.maps
    for kind in ("bias", "response"):
        if kind in maps:
            diff = maps[kind].dropna("dataset", how="all")
            sig = maps[f"{kind}_significant"].sel(dataset=diff["dataset"])
            versus = maps[kind].attrs.get("versus", "")
            yield (
                f"z500_{kind}",
                f"Season-mean Z500 {kind}: dataset minus {versus}; stippling "
                "where significant after FDR control",
                partial(
                    figures.difference_maps, diff.assign_attrs(maps[kind].attrs), sig, kind=kind
                ),
            )

    yield (
        "nao_index_distributions",
        "Distributions of the daily NAO index (units of the fitting dataset's standard deviation)",
        partial(figures.index_distributions, dict(d["nao_index"]), colors=colors),
    )

    if comparison.jet_modes is not None:
        own_modes = d["jet_own"]
        density = stack({k: m.density for k, m in own_modes.items()})
        low = stack({k: m.density_band.sel(bound="lower", drop=True) for k, m in own_modes.items()})
        high = stack(
            {k: m.density_band.sel(bound="upper", drop=True) for k, m in own_modes.items()}
        )
        modes = {k: list(map(float, m.modes.values)) for k, m in own_modes.items()}
        yield (
            "jet_latitude_densities",
            "Kernel densities of daily jet latitude with "
            "block-bootstrap bands, modes and the category bounds of the fitting dataset",
            partial(
                figures.jet_densities,
                density,
                low,
                high,
                modes=modes,
                bounds=list(map(float, comparison.jet_modes.bounds)),
                colors=colors,
            ),
        )
        jet = d["_jet_series"]
        yield (
            "jet_latitude_speed",
            "Daily jet latitude against jet speed",
            partial(
                figures.jet_latitude_speed,
                {k: v["latitude"].values.ravel() for k, v in jet.items()},
                {k: v["speed"].values.ravel() for k, v in jet.items()},
                colors=colors,
            ),
        )
        names = list(comparison.jet_modes.categories)
        yield (
            "jet_category_occupancy",
            "Occupancy of the jet position categories",
            partial(
                _occupancy_figure,
                figures,
                summary,
                "jet",
                labels,
                names,
                comparison.baseline,
                alpha,
                colors,
            ),
        )

    if comparison.regimes is not None:
        names = list(comparison.regimes.names)
        own_c = {k: m.centroids for k, m in d["regime_own"].items()}
        centroids = stack(own_c)  # the fitting dataset's own regimes are the fitted ones
        occ = _summary_values(summary, "regimes", "(fraction", list(own_c), names)["value"]
        occ_da = xr.DataArray(
            occ,
            dims=("dataset", "regime"),
            coords={"dataset": centroids["dataset"].values, "regime": names},
        )
        yield (
            "regime_patterns",
            "Weather regime centroids: the fitted regimes and each "
            "dataset's own regimes matched to them, with occupancies",
            partial(figures.regime_maps, centroids.assign_attrs(units="m"), occ_da),
        )
        yield (
            "regime_occupancy",
            "Regime occupancy with 95% block-bootstrap intervals; "
            "asterisks mark significant differences from the baseline",
            partial(
                _occupancy_figure,
                figures,
                summary,
                "regimes",
                labels,
                names,
                comparison.baseline,
                alpha,
                colors,
            ),
        )
        from .regime_stats import episodes

        surv = stack(
            {k: episodes(v, names=names)["survival"] for k, v in d["regime_labels"].items()}
        )
        yield (
            "regime_persistence",
            "Survival curves of regime episode lengths",
            partial(figures.persistence_survival, surv, colors=colors),
        )

    if "acf" in d:
        eff = _efolding_from_summary(summary, [str(v) for v in d["acf"]["dataset"].values])
        yield (
            "index_memory",
            "Autocorrelation functions of the daily indices with 95% "
            "block-bootstrap bands and e-folding times",
            partial(
                figures.memory_functions,
                d["acf"],
                d["acf_low"],
                d["acf_high"],
                efolding=eff,
                colors=colors,
            ),
        )
    if d.get("ccf"):
        c = d["ccf"]
        yield (
            "nao_sst_cross_correlation",
            "Cross-correlation of the NAO with the SST tripole index",
            partial(
                figures.cross_correlation,
                c["ccf"],
                c["low"],
                c["high"],
                title="NAO and SST tripole index",
                colors=colors,
            ),
        )
    yield (
        "scorecard",
        "Scorecard: every quantity for each dataset; shaded where significantly "
        "different from the baseline or the reference",
        partial(figures.scorecard, summary),
    )


def _occupancy_figure(figures, summary, diagnostic, labels, names, baseline, alpha, colors):
    est = _summary_values(summary, diagnostic, "(fraction", labels, names)
    test = _summary_values(summary, diagnostic, "(fraction", labels, names, versus=baseline)
    coords = {"dataset": labels, "regime": names}
    dims = ("dataset", "regime")

    def da(values):
        return xr.DataArray(values, dims=dims, coords=coords, attrs={"units": "1"})

    significant = xr.DataArray(test["p_value"] <= alpha, dims=dims, coords=coords)
    return figures.occupancy_bars(
        da(est["value"]), da(est["ci_low"]), da(est["ci_high"]), significant, colors=colors
    )


def _efolding_from_summary(summary, labels) -> xr.DataArray:
    names = {
        "nao": ("NAO", "e-folding time (days)"),
        "jet_latitude": ("jet", "latitude e-folding time (days)"),
        "jet_speed": ("jet", "speed e-folding time (days)"),
    }
    values = np.full((len(labels), len(names)), np.nan)
    for i, label in enumerate(labels):
        for j, (diag, quantity) in enumerate(names.values()):
            rows = summary[
                (summary["diagnostic"] == diag)
                & (summary["quantity"] == quantity)
                & (summary["dataset"] == label)
                & summary["versus"].isna()
            ]
            if len(rows):
                values[i, j] = rows.iloc[0]["value"]
    return xr.DataArray(
        values,
        dims=("dataset", "index"),
        coords={"dataset": labels, "index": list(names)},
        attrs={"units": "days"},
    )
