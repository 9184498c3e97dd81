"""Every diagnostic of a comparison, fitted once on the fitting dataset and applied to all.

Called by `westerlies.compare`; each step works on the prepared (season-selected) data of every
dataset and returns labelled results that the summary table and the figures read.
"""

from __future__ import annotations

import warnings
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numpy as np
import xarray as xr
from dask import is_dask_collection
from threadpoolctl import threadpool_limits

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
    jet_labels = [k for k in labels if prepared[k].jet is not None]
    regime_labels = [k for k in labels if prepared[k].daily]
    out["jet_labels"], out["regime_dataset_labels"] = jet_labels, regime_labels
    res = resampling_keywords(opts)
    with steps.timed("fitting the NAO, weather regimes and jet modes"):
        calls: dict[str, tuple] = {"nao": (_fit_nao, prepared[fit_on].z_anoms, opts)}
        if daily_fit in regime_labels:
            calls["regimes"] = (_fit_regimes, prepared[daily_fit].z_anoms, opts)
        if daily_fit in jet_labels:
            calls["jet"] = (_fit_jet, prepared[daily_fit].jet["latitude"], res)
        fitted = run_each(calls)
    out["nao"] = fitted["nao"]
    out["regimes"] = fitted.get("regimes")
    out["jet_modes"] = fitted.get("jet")
    with steps.timed("applying them to every dataset"):
        # the field work and the jet work of a dataset are separate calls: the jet's inputs
        # are small, so its densities and tests run as tasks even beside a large field's
        # chunked passes
        calls = {
            (k, "field"): (
                _apply_field,
                prepared[k].z_anoms,
                out["nao"],
                out["regimes"] if k in regime_labels else None,
                k == daily_fit,
            )
            for k in labels
        }
        if out["jet_modes"] is not None:
            for k in jet_labels:
                latitude = prepared[k].jet["latitude"]
                calls[k, "jet"] = (_apply_jet, latitude, out["jet_modes"], k == daily_fit, res)
        applied = run_each(calls)
    out["nao_index"] = {k: applied[k, "field"]["nao_index"] for k in labels}
    out["nao_compare"] = {k: applied[k, "field"]["nao_compare"] for k in labels}
    if out["regimes"] is not None:
        out["regime_labels"] = {k: applied[k, "field"]["regime_labels"] for k in regime_labels}
        out["regime_own"] = {k: applied[k, "field"]["regime_own"] for k in regime_labels}
    if out["jet_modes"] is not None:
        out["jet_own"] = {k: applied[k, "jet"]["jet_own"] for k in jet_labels}
        out["jet_category"] = {k: applied[k, "jet"]["jet_category"] for k in jet_labels}
    with steps.timed("SST index and index memory"):
        _sst(prepared, labels, fit_on, opts, out)
        _memory(prepared, labels, opts, out)
    with steps.timed("Z500 maps"):
        out["maps"] = _maps(prepared, labels, baseline, ref_label, opts)
    out["indices"] = _indices(labels, out)
    return out


# ------------------------------------------------------------------ running per-dataset work

#: per-dataset work whose dask-backed inputs are at most this large runs as one task with the
#: data computed in it (datasets in parallel); larger fields stay chunked (peak memory bounded)
WHOLE_TASK_BYTES = 256e6


def run_each(calls: dict[Any, tuple]) -> dict[Any, Any]:
    """``func(*args)`` for every ``key: (func, *args)``, independent calls run side by side.

    Calls whose dask-backed arguments are all small (`WHOLE_TASK_BYTES`) become one dask
    computation: the active scheduler runs them in parallel (dask's threads, or the workers of
    a dask.distributed cluster, each call on one worker with its data gathered there), and the
    functions see in-memory data, so the numbers do not depend on the scheduler. Calls with a
    larger dask-backed argument run here in turn, on the chunked data (peak memory bounded).
    """
    import dask

    lazy, direct = {}, {}
    for key, (func, *args) in calls.items():
        large = any(is_dask_collection(a) and a.nbytes > WHOLE_TASK_BYTES for a in args)
        if large:
            direct[key] = (func, args)
        else:
            lazy[key] = dask.delayed(func, pure=False)(*args)
    # One BLAS/OpenMP thread per call: the calls themselves run in parallel, and a library's
    # threads split sums differently when calls overlap, which would make the last digits
    # depend on timing (and small decompositions are faster single-threaded on 2 cores).
    with warnings.catch_warnings(), threadpool_limits(limits=1):
        # one filter for every task (threads share it; catch_warnings inside tasks would race)
        warnings.simplefilter("ignore", InputWarning)
        # the small calls run (in a helper thread waiting on the scheduler) while the large
        # ones run here in turn: side by side, the large ones' chunked passes raised the peak
        # memory of 2 x 1000 members from 2.2 to 3.3 GB with dask's threads, and on a 2-worker
        # cluster from 2.6-2.7 to 2.9-3.2 GB for no measurable gain in time
        with ThreadPoolExecutor(max_workers=1) as pool:
            small = pool.submit(dask.compute, *lazy.values())
            results = {key: func(*args) for key, (func, args) in direct.items()}
            results.update(zip(lazy, small.result(), strict=True))
    return {k: results[k] for k in calls}


# --------------------------------------------------------------------------------- fits


def _fit_nao(z_anoms: xr.DataArray, opts: dict):
    from .nao import NAO

    return NAO.fit(z_anoms, domain=tuple(opts["nao"]["domain"]))


def _fit_regimes(z_anoms: xr.DataArray, opts: dict):
    from .regimes import Regimes

    r = opts["regimes"]
    return Regimes.fit(
        z_anoms,
        n_regimes=r["n_regimes"],
        n_pcs=r["n_pcs"],
        domain=tuple(r["domain"]),
        n_init=r["n_init"],
        seed=opts["resampling"]["seed"],
    )


def _fit_jet(latitude: xr.DataArray, res: dict):
    from .density import jet_modes

    return jet_modes(latitude, **res)


def _apply_field(z_anoms, nao, regimes, is_daily_fit: bool) -> dict:
    """What one dataset's Z500 anomalies need from the fitted basis: NAO index and own
    pattern, regime labels and own regimes."""
    out: dict[str, Any] = {
        "nao_index": nao.index(z_anoms),
        "nao_compare": nao.compare_pattern(z_anoms),
    }
    if regimes is not None:
        out["regime_labels"] = regimes.labels if is_daily_fit else regimes.assign(z_anoms)
        out["regime_own"] = regimes.own_regimes(z_anoms)
    return out


def _apply_jet(latitude, jet_fit, is_daily_fit: bool, res) -> dict:
    """One dataset's own jet modes and its jet categories on the fitted bounds."""
    return {
        "jet_own": jet_fit if is_daily_fit else _fit_jet(latitude, res),
        "jet_category": jet_fit.categorize(latitude),
    }


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

    Each dataset's field was reduced once to per-block sums at every grid point (on the first
    dataset's grid, see `westerlies.comparison`); the season means and every map test are built
    from those sums.
    """
    alpha = opts["resampling"]["alpha"]
    wilks = opts["resampling"]["fdr"] == "wilks"
    res = resampling_keywords(opts)
    sums = {k: prepared[k].z_sums for k in labels}
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
