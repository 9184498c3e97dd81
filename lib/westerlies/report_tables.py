"""Tables, methods text and provenance of a comparison, for `westerlies.report`."""

from __future__ import annotations

import platform
import sys
from datetime import UTC, datetime
from importlib import metadata
from typing import Any

import pandas as pd

_PACKAGES = (
    "westerlies",
    "numpy",
    "scipy",
    "pandas",
    "xarray",
    "scikit-learn",
    "eofs",
    "cartopy",
    "netCDF4",
    "dask",
    "matplotlib",
    "cftime",
)


_FDR = {"wilks": "alpha_FDR = 2 alpha (Wilks 2016)", "bh": "plain, at alpha"}


def tables(comparison) -> dict[str, pd.DataFrame]:
    """summary, nao_patterns, jet_modes, regime_transitions and z500 field tables as DataFrames."""
    out = {"summary": comparison.summary}
    rows = []
    for label, cmp in comparison.details["nao_compare"].items():
        for pattern in ("fitted", "own"):
            sel = cmp.sel(pattern=pattern)
            rows.append(
                {
                    "dataset": label,
                    "pattern": pattern,
                    "variance_fraction": float(sel["variance_fraction"]),
                    "variance_fraction_error": float(sel["variance_fraction_error"]),
                    "positive_centre_lat": float(sel["centre_lat"].sel(centre="positive")),
                    "positive_centre_lon": float(sel["centre_lon"].sel(centre="positive")),
                    "negative_centre_lat": float(sel["centre_lat"].sel(centre="negative")),
                    "negative_centre_lon": float(sel["centre_lon"].sel(centre="negative")),
                    "pattern_correlation_centred": float(cmp["pattern_correlation_centred"]),
                    "pattern_correlation_uncentred": float(cmp["pattern_correlation_uncentred"]),
                }
            )
    out["nao_patterns"] = pd.DataFrame(rows)
    own = comparison.details.get("jet_own") or {}
    rows = []
    for label, modes in own.items():
        for i, lat in enumerate(modes.modes.values):
            rows.append(
                {
                    "dataset": label,
                    "mode": i + 1,
                    "latitude_degrees_north": float(lat),
                    "density_per_degree": float(modes.mode_density.values[i]),
                    "interval_low": float(modes.mode_interval.values[i, 0]),
                    "interval_high": float(modes.mode_interval.values[i, 1]),
                    "support": float(modes.mode_support.values[i]),
                }
            )
    if rows:
        out["jet_modes"] = pd.DataFrame(rows)
    labels = comparison.details.get("regime_labels") or {}
    if labels:
        from .regime_stats import transitions

        rows = []
        for label, lab in labels.items():
            matrix = transitions(lab, names=list(comparison.regimes.names))
            frame = matrix.to_dataframe().reset_index()
            frame.insert(0, "dataset", label)
            rows.append(frame)
        out["regime_transitions"] = pd.concat(rows, ignore_index=True)
    return out


def methods(comparison) -> list[tuple[str, str]]:
    """(name, text) of every method and its parameters, with references."""
    o = comparison.options
    items = [
        (
            "Data",
            "Opened and normalized to one canonical form (member, time, plev, lat, lon; "
            "lat ascending; lon in [-180, 180); plev in hPa; geopotential height in m via "
            "g0 = 9.80665 m s-2). Season " + comparison.season + "; a block is one member in "
            "one season, the unit of independence for every test.",
        ),
        (
            "Anomalies",
            f"Against {o['anomalies']['against']} climatologies; daily: local "
            f"quadratic smoothing of day-of-year means, Gaussian kernel sd "
            f"{o['anomalies']['smoothing_days']:g} days.",
        ),
        (
            "NAO",
            str(comparison.nao.method) + " Hurrell (1995), Science 269, 676-679; "
            "sampling errors after North et al. (1982), Mon. Wea. Rev. 110, 699-706.",
        ),
    ]
    if comparison.jet_modes is not None:
        j = o["jet"]
        items.append(
            (
                "Eddy-driven jet",
                f"Woollings, Hannachi and Hoskins (2010), Q. J. R. "
                f"Meteorol. Soc. 136, 856-868: mass-weighted {j['levels']} hPa, sector "
                f"{j['sector']} degrees_east, latitudes {j['lat_range']}, Lanczos low-pass "
                f"(Duchon 1979) {j['cutoff_days']:g} days with {j['n_weights']} weights; "
                "density by Gaussian kernel (Silverman 1986 bandwidth), multimodality "
                "test after Silverman (1981) with Hall and York (2001) calibration.",
            )
        )
    if comparison.regimes is not None:
        r = o["regimes"]
        items.append(
            (
                "Weather regimes",
                f"k-means (k={r['n_regimes']}, {r['n_init']} "
                f"restarts) on {r['n_pcs']} leading PCs of daily Z500 anomalies over "
                f"{r['domain']} (Vautard 1990; Michelangeli et al. 1995; Cassou 2008); "
                "own regimes matched by the Hungarian method (Kuhn 1955).",
            )
        )
    items.append(
        (
            "Significance",
            f"Block bootstrap percentile intervals and block permutation "
            f"tests with {o['resampling']['n_resamples']} resamples, seed "
            f"{o['resampling']['seed']}, p = (b + 1) / (B + 1) (Phipson and Smyth 2010); "
            f"alpha = {o['resampling']['alpha']}; maps: Benjamini and Hochberg (1995) "
            f"FDR, {_FDR[o['resampling']['fdr']]}.",
        )
    )
    return items


def provenance(comparison) -> dict[str, Any]:
    """Configuration, seed, versions, input files and sizes, timings."""
    versions = {}
    for name in _PACKAGES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = None
    return {
        "created": datetime.now(UTC).isoformat(timespec="seconds"),
        "labels": comparison.labels,
        "reference": comparison.reference,
        "baseline": comparison.baseline,
        "fit_on": comparison.fit_on,
        "season": comparison.season,
        "options": comparison.options,
        "inputs": comparison.sources,
        "timings_seconds": comparison.timings,
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "versions": versions,
    }
