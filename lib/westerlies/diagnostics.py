"""Every diagnostic of a comparison, fitted once on the fitting dataset and applied to all.

Called by `westerlies.compare`; each step works on the prepared (season-selected) data of every
dataset and returns labelled results that the summary table and the figures read.
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
import xarray as xr

from . import resampling
from .config import resampling_keywords
from .errors import InputWarning
from .timeseries import Autocorrelation, acf, ccf_interval

MEMORY_INDICES = ("nao", "jet_latitude", "jet_speed")
_FDR_TEXT = {True: "alpha_FDR = 2 alpha (Wilks 2016)", False: "plain Benjamini-Hochberg"}


def stack(values: dict[str, xr.DataArray], dim: str = "dataset") -> xr.DataArray:
    """One array per dataset label, stacked along `dim` (outer join of the other coordinates)."""
    labels = list(values)
    out = xr.concat(
        [values[k] for k in labels], dim=dim, coords="minimal", compat="override", join="outer"
    )
    return out.assign_coords({dim: labels})


def run_diagnostics(prepared, labels, fit_on, baseline, ref_label, opts, steps) -> dict[str, Any]:
    """Fit the common basis and apply it to every dataset; see `westerlies.compare`."""
    out: dict[str, Any] = {"fit_on": fit_on}
    daily_fit = fit_on if prepared[fit_on].daily else baseline
    out["daily_fit_on"] = daily_fit
    with steps.timed("NAO"):
        _nao(prepared, labels, fit_on, opts, out)
    with steps.timed("eddy-driven jet"):
        _jet(prepared, labels, daily_fit, opts, out)
    with steps.timed("weather regimes"):
        _regimes(prepared, labels, daily_fit, opts, out)
    with steps.timed("SST index and index memory"):
        _sst(prepared, labels, fit_on, opts, out)
        _memory(prepared, labels, opts, out)
    with steps.timed("Z500 maps"):
        out["maps"] = _maps(prepared, labels, baseline, ref_label, opts)
    out["indices"] = _indices(labels, out)
    return out


# --------------------------------------------------------------------------------- NAO


def _nao(prepared, labels, fit_on, opts, out) -> None:
    from .nao import NAO

    domain = tuple(opts["nao"]["domain"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        nao = NAO.fit(prepared[fit_on].z_anoms, domain=domain)
        out["nao"] = nao
        out["nao_index"] = {k: nao.index(prepared[k].z_anoms) for k in labels}
        out["nao_compare"] = {k: nao.compare_pattern(prepared[k].z_anoms) for k in labels}


# --------------------------------------------------------------------------------- jet


def _jet(prepared, labels, fit_on, opts, out) -> None:
    from .density import jet_modes

    out["jet_modes"] = None
    have = [k for k in labels if prepared[k].jet is not None]
    out["jet_labels"] = have
    if fit_on not in have:
        return
    res = resampling_keywords(opts)
    own = {}
    for k in have:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", InputWarning)
            own[k] = jet_modes(prepared[k].jet["latitude"], **res)
    out["jet_modes"] = own[fit_on]
    out["jet_own"] = own
    out["jet_category"] = {k: own[fit_on].categorize(prepared[k].jet["latitude"]) for k in have}


# --------------------------------------------------------------------------------- regimes


def _regimes(prepared, labels, fit_on, opts, out) -> None:
    from .regimes import Regimes

    out["regimes"] = None
    have = [k for k in labels if prepared[k].daily]
    out["regime_dataset_labels"] = have
    if fit_on not in have:
        return
    r = opts["regimes"]
    seed = opts["resampling"]["seed"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        fitted = Regimes.fit(
            prepared[fit_on].z_anoms,
            n_regimes=r["n_regimes"],
            n_pcs=r["n_pcs"],
            domain=tuple(r["domain"]),
            n_init=r["n_init"],
            seed=seed,
        )
        out["regimes"] = fitted
        out["regime_labels"] = {
            k: fitted.labels if k == fit_on else fitted.assign(prepared[k].z_anoms) for k in have
        }
        out["regime_own"] = {k: fitted.own_regimes(prepared[k].z_anoms) for k in have}


# --------------------------------------------------------------------------------- SST


def _sst(prepared, labels, fit_on, opts, out) -> None:
    from .nao import EOFIndex

    out["sst_index"] = None
    if prepared[fit_on].sst_anoms is None:
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        index = EOFIndex.fit(
            prepared[fit_on].sst_anoms,
            domain=tuple(opts["sst"]["domain"]),
            mode=1,
            sign=tuple(opts["sst"]["positive_at"]),
            name="sst_tripole",
            long_name="North Atlantic SST tripole index (leading EOF of SST anomalies)",
            missing="raise",
        )
        out["sst_index"] = index
        out["sst_series"] = {
            k: index.index(prepared[k].sst_anoms)
            for k in labels
            if prepared[k].sst_anoms is not None
        }


# --------------------------------------------------------------------------------- memory


def _series(out, label: str, name: str) -> xr.DataArray | None:
    if name == "nao":
        return out["nao_index"].get(label)
    jet = out.get("jet_own", {})
    if label not in jet:
        return None
    return out["_jet_series"][label][name.removeprefix("jet_")]


def _memory(prepared, labels, opts, out) -> None:
    out["_jet_series"] = {k: prepared[k].jet for k in labels if prepared[k].jet is not None}
    max_lag = opts["memory"]["max_lag"]
    res = resampling_keywords(opts)
    curves, lows, highs = {}, {}, {}
    for k in labels:
        if not prepared[k].daily:
            continue
        rows, rlow, rhigh = [], [], []
        for name in MEMORY_INDICES:
            x = _series(out, k, name)
            if x is None:
                nan = xr.DataArray(np.full(max_lag + 1, np.nan), dims="lag")
                rows.append(nan)
                rlow.append(nan)
                rhigh.append(nan)
                continue
            rows.append(acf(x, max_lag).drop_vars("lag"))
            band = resampling.bootstrap_ci(
                x, Autocorrelation(lags=tuple(range(max_lag + 1))), **res
            )
            rlow.append(band["low"].drop_vars("lag", errors="ignore"))
            rhigh.append(band["high"].drop_vars("lag", errors="ignore"))
        index = {"index": list(MEMORY_INDICES)}
        curves[k] = xr.concat(rows, dim="index").assign_coords(index)
        lows[k] = xr.concat(rlow, dim="index").assign_coords(index)
        highs[k] = xr.concat(rhigh, dim="index").assign_coords(index)
    if curves:
        lag = {"lag": np.arange(max_lag + 1)}
        attrs = {"units": "1", "long_name": "autocorrelation"}
        out["acf"] = stack(curves).assign_coords(lag).assign_attrs(attrs)
        out["acf_low"] = stack(lows).assign_coords(lag).assign_attrs(attrs)
        out["acf_high"] = stack(highs).assign_coords(lag).assign_attrs(attrs)
        out["acf"]["lag"].attrs = {"units": "days", "long_name": "lag"}
    out["ccf"] = _ccf(out, labels, max_lag, res)


def _ccf(out, labels, max_lag, res) -> dict[str, xr.DataArray] | None:
    """CCF of the NAO with the SST index, with a block-bootstrap band."""
    series = out.get("sst_series")
    if not series:
        return None
    curves, lows, highs = {}, {}, {}
    for k, sst in series.items():
        if sst.sizes.get("time", 0) < 2 * max_lag:
            continue
        band = ccf_interval(out["nao_index"][k], sst, max_lag, **res)
        curves[k], lows[k], highs[k] = band["ccf"], band["low"], band["high"]
    if not curves:
        return None
    conv = "positive lag: NAO leads the SST index"
    return {
        "ccf": stack(curves).assign_attrs(lag_convention=conv, units="1"),
        "low": stack(lows),
        "high": stack(highs),
    }


# --------------------------------------------------------------------------------- maps


def _maps(prepared, labels, baseline, ref_label, opts) -> xr.Dataset:
    """Season-mean Z500 of each dataset, its bias and its response, with FDR masks.

    Each dataset's field is reduced once to per-block sums at every grid point (on the first
    dataset's grid); the season means and every map test are built from those sums.
    """
    alpha = opts["resampling"]["alpha"]
    wilks = opts["resampling"]["fdr"] == "wilks"
    res = resampling_keywords(opts)
    base = prepared[labels[0]].z_season
    sums = {}
    for k in labels:
        z = prepared[k].z_season
        same = all(np.array_equal(z[d].values, base[d].values) for d in ("lat", "lon"))
        on_base = z if same else z.interp(lat=base["lat"], lon=base["lon"])  # grid only
        sums[k] = resampling.field_block_sums(on_base)
    grid = sums[labels[0]].template

    def mean(f: resampling.FieldBlockSums) -> xr.DataArray:
        with np.errstate(invalid="ignore", divide="ignore"):
            values = f.sums.sum(0) / f.counts.sum(0)
        return f.template.copy(data=values.reshape(f.template.shape))

    ds = xr.Dataset({"z500_mean": stack({k: mean(sums[k]) for k in labels})})
    ds["z500_mean"].attrs = {
        "units": "m",
        "long_name": "season-mean geopotential height at 500 hPa",
    }

    def tested(kind: str, versus: str, skip: tuple = ()) -> None:
        diff, pval, mask = {}, {}, {}
        for k in labels:
            if k == versus or k in skip:
                continue
            test = resampling.map_difference_test(sums[versus], sums[k], **res)
            diff[k] = test["difference"]
            pval[k] = test["p_value"]
            mask[k] = resampling.fdr_mask(test["p_value"], alpha=alpha, wilks=wilks)
        if not diff:
            return
        ds[f"{kind}"] = (
            stack(diff)
            .reindex_like(grid)
            .assign_attrs(
                units="m", long_name=f"Z500 {kind} (dataset minus {versus})", versus=versus
            )
        )
        ds[f"{kind}_p_value"] = stack(pval).reindex_like(grid).assign_attrs(units="1")
        ds[f"{kind}_significant"] = stack(mask).reindex_like(grid).astype(bool)
        ds[f"{kind}_significant"].attrs = {
            "long_name": "significant after Benjamini-Hochberg FDR control",
            "method": f"alpha_global={alpha}, " + _FDR_TEXT[wilks],
        }

    if ref_label is not None:
        tested("bias", ref_label)
    tested("response", baseline, skip=(ref_label,))  # the reference's difference is its bias
    return ds


# --------------------------------------------------------------------------------- indices


def _indices(labels, out) -> dict[str, xr.Dataset]:
    """Daily indices of every dataset: nao, jet_latitude, jet_speed, regime."""
    result = {}
    for k in labels:
        data = {"nao": out["nao_index"][k]}
        jet = out.get("_jet_series", {}).get(k)
        if jet is not None:
            data["jet_latitude"] = jet["latitude"]
            data["jet_speed"] = jet["speed"]
        labels_k = (out.get("regime_labels") or {}).get(k)
        if labels_k is not None:
            data["regime"] = labels_k
        ds = xr.Dataset(data)
        for name in ds.data_vars:
            ds[name].attrs = {**data[name].attrs}
        ds["nao"].attrs.setdefault("units", "1")
        result[k] = ds
    return result
