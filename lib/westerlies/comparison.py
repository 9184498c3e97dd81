"""The main job: every diagnostic for a set of datasets, on one common basis, with significance.

`compare` opens each dataset, selects the season, computes anomalies, fits the NAO, the weather
regimes and the jet categories once on the fitting dataset (the reference, or the baseline when
there is no reference), applies them to every dataset, and tests every difference by resampling
blocks (one member in one season). The result, a `Comparison`, holds a tidy summary table, the
daily indices, the maps and the fitted objects, and writes the figure set with `write`.

Anomalies are taken against each dataset's own climatology by default (``anomalies.against =
"own"``): mean-state differences then show in the Z500 maps and do not leak into the modes.
``"baseline"`` takes the baseline's climatology for every model dataset (same calendar needed),
so a mean response projects onto the indices and regime occupancies too.
"""

from __future__ import annotations

import time
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from dask import compute as dask_compute
from dask import is_dask_collection
from dask import persist as dask_persist

from . import seasons, timeaxis
from .anomalies import anomalies, climatology
from .config import validate_options
from .data import open_dataset
from .errors import ConfigError, InputError, InputWarning, TimeStepError
from .resampling import FieldBlockSums, lazy_field_block_sums
from .summary import SummaryBuilder

__all__ = ["Comparison", "compare"]


@dataclass
class Prepared:
    """One dataset, opened and reduced to what the diagnostics need (season already selected)."""

    label: str
    z_anoms: xr.DataArray | None  # daily (or coarser) Z500 anomalies, m
    z_sums: FieldBlockSums | None  # per-block sums of season Z500 on the common grid (maps)
    jet: xr.Dataset | None  # latitude, speed on (member, time)
    sst_anoms: xr.DataArray | None
    daily: bool
    sources: list[dict]


@dataclass
class Comparison:
    """Every diagnostic for every dataset, on a common basis, with its significance.

    Attributes
    ----------
    labels : dataset labels in order; `reference` and `baseline` are among them.
    fit_on : label of the dataset the NAO, regimes and jet categories were fitted on.
    summary : tidy table, one row per (diagnostic, quantity, dataset, versus): columns
        diagnostic, quantity, dataset, value, ci_low, ci_high, versus, p_value, significant.
    indices : label -> Dataset of daily `nao`, `jet_latitude`, `jet_speed`, `regime`.
    maps : Dataset of Z500 season means, biases and responses with p-values and FDR masks.
    nao, regimes, jet_modes : the fitted objects (common basis).
    details : other labelled results used by the figures (densities, ACFs, centroids, ...).
    """

    labels: list[str]
    reference: str | None
    baseline: str
    fit_on: str
    season: str
    summary: pd.DataFrame
    indices: dict[str, xr.Dataset]
    maps: xr.Dataset
    nao: Any
    regimes: Any
    jet_modes: Any
    details: dict[str, Any]
    options: dict[str, Any]
    sources: dict[str, list[dict]]
    timings: dict[str, float] = field(default_factory=dict)

    # ------------------------------------------------------------------ outputs
    def write(self, out_dir: str | Path, overwrite: bool = False, *, progress=None) -> Path:
        """Write the figure set (see `westerlies.report`); refuses an existing directory."""
        from .report import write_report

        out = self.options["output"]
        return write_report(
            self,
            out_dir,
            overwrite=overwrite,
            formats=out["formats"],
            dpi=out["dpi"],
            progress=progress,
        )

    def tables(self) -> dict[str, pd.DataFrame]:
        """The summary and the per-topic tables written as CSV."""
        from .report_tables import tables

        return tables(self)

    def figures(self):
        """(name, caption, Figure) for every figure of the set, made one at a time."""
        from .report_figures import figure_set

        return figure_set(self)

    def methods(self) -> list[tuple[str, str]]:
        from .report_tables import methods

        return methods(self)

    def provenance(self) -> dict[str, Any]:
        from .report_tables import provenance

        return provenance(self)


# ------------------------------------------------------------------------------ progress


class _Steps:
    """Console progress for the long steps; silent when `enabled` is False."""

    def __init__(self, enabled: bool | Callable[[str], None]):
        self.say = enabled if callable(enabled) else (print if enabled else None)
        self.start = time.perf_counter()
        self.timings: dict[str, float] = {}

    def __call__(self, text: str) -> None:
        if self.say is not None:
            self.say(f"[{time.perf_counter() - self.start:7.1f} s] {text}")

    def timed(self, name: str):
        steps = self

        class _Timer:
            def __enter__(self):
                steps(f"{name} ...")
                self.t0 = time.perf_counter()

            def __exit__(self, *exc):
                steps.timings[name] = time.perf_counter() - self.t0

        return _Timer()


# ------------------------------------------------------------------------------ opening


def _open(label: str, spec: Any) -> tuple[xr.Dataset, list[dict]]:
    """Open one dataset given as a Dataset, a path or glob, a list of paths, or a dict."""
    kwargs: dict[str, Any] = {}
    if isinstance(spec, Mapping) and not isinstance(spec, xr.Dataset):
        kwargs = {k: v for k, v in spec.items() if k != "path"}
        if "path" not in spec:
            raise ConfigError.make(
                f"dataset {label!r}",
                f"keys {sorted(spec)}",
                "a 'path' key",
                "give {'path': ...}",
            )
        spec = spec["path"]
    ds = open_dataset(spec, **kwargs)
    return ds, _source_info(spec)


def _source_info(spec: Any) -> list[dict]:
    if isinstance(spec, xr.Dataset):
        return [{"path": "(in-memory dataset)", "bytes": int(spec.nbytes)}]
    import glob

    paths = (
        sorted(glob.glob(str(spec))) if isinstance(spec, (str, Path)) else [str(p) for p in spec]
    )
    return [{"path": str(p), "bytes": Path(p).stat().st_size} for p in paths if Path(p).exists()]


def _prepare_all(
    opened: dict[str, tuple[xr.Dataset, list[dict]]],
    baseline: str,
    ref_label: str | None,
    season: str,
    opts: dict,
) -> dict[str, Prepared]:
    """Anomalies, season selection, map sums and the jet index of every dataset.

    Two passes over the files: the climatologies and the jet's sector wind profiles (small)
    for every dataset at once, so the scheduler can work on all datasets and chunks in
    parallel; then, one dataset at a time (peak memory), one graph for the Z500 anomalies kept
    in memory and the per-block map sums, so each Z500 chunk is read once for both.
    """
    from .filters import select_filtered_season
    from .jet import jet_from_profile, sector_profile

    kinds = {}
    for label, (ds, _) in opened.items():
        kinds[label] = timeaxis.time_kind(ds["time"])
        if kinds[label] == "subdaily":
            raise TimeStepError.make(
                f"dataset {label!r}: time axis",
                f"sub-daily data (typical step {timeaxis.median_step_days(ds['time']):g} days)",
                "daily, monthly or seasonal data",
                "open it with daily='mean' (configuration: daily = \"mean\" under its dataset)",
            )

    # pass 1: every climatology and every jet sector profile (small: days of the year x grid,
    # and member x day x latitude), for all datasets together
    smoothing = opts["anomalies"]["smoothing_days"]
    j = opts["jet"]
    lazy_small: dict[tuple[str, str], Any] = {}
    used_levels = {}
    for label, (ds, _) in opened.items():
        kw = {"smoothing_days": smoothing} if kinds[label] == "daily" else {}
        for name in ("z500", "sst"):
            if name in ds:
                lazy_small[label, name] = climatology(ds[name], **kw)
        if "u" in ds and kinds[label] == "daily":
            lazy_small[label, "u"], used_levels[label] = sector_profile(
                ds["u"],
                levels=tuple(j["levels"]),
                sector=tuple(j["sector"]),
                lat_range=tuple(j["lat_range"]),
            )
    small = dict(zip(lazy_small, dask_compute(*lazy_small.values()), strict=True))
    clim = {key: v for key, v in small.items() if key[1] != "u"}

    def anoms_of(label: str, name: str) -> xr.DataArray | None:
        ds = opened[label][0]
        if name not in ds:
            return None
        against_baseline = opts["anomalies"]["against"] == "baseline" and label not in (
            baseline,
            ref_label,
        )
        base = clim.get((baseline, name)) if against_baseline else None
        a = anomalies(ds[name], climatology=base if base is not None else clim[label, name])
        return _quiet_season(a, season)

    # pass 2: the Z500 anomalies and the per-block map sums; the anomalies kept under the
    # budget are computed once and stay in memory (or in the workers' memory on a cluster).
    # The jet index comes from the profiles of pass 1.
    budget = opts["anomalies"]["persist_mb"] * 1e6
    grid = opened[next(iter(opened))][0]["z500"]
    pending: dict[str, dict[str, Any]] = {}
    for label, (ds, _) in opened.items():
        parts: dict[str, Any] = {
            "z_anoms": _single(
                _crop(anoms_of(label, "z500"), opts["nao"]["domain"], opts["regimes"]["domain"])
            ),
            "sst_anoms": _single(_crop(anoms_of(label, "sst"), opts["sst"]["domain"])),
            "z_sums": lazy_field_block_sums(_on_grid(_quiet_season(ds["z500"], season), grid)),
        }
        if (label, "u") in small:
            index = jet_from_profile(
                small[label, "u"],
                used=used_levels[label],
                sector=tuple(j["sector"]),
                lat_range=tuple(j["lat_range"]),
                cutoff_days=j["cutoff_days"],
                n_weights=j["n_weights"],
            )
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", InputWarning)
                parts["jet"] = select_filtered_season(index, season)
        pending[label] = parts

    def kept(obj: Any) -> bool:
        return is_dask_collection(obj) and obj.nbytes <= budget

    # One dataset at a time here: one graph holding every dataset's chunks lets dask read far
    # ahead (measured: 4.3 GB against 2.1 GB at the peak for 2 x 1000 members); a dataset's
    # own chunks keep the workers busy.
    prepared = {}
    for label, parts in pending.items():
        names = [n for n in ("z_anoms", "sst_anoms") if kept(parts[n])]
        pending_sums = parts["z_sums"]
        *done, sums, counts = dask_persist(
            *[parts[n] for n in names], pending_sums.sums, pending_sums.counts
        )
        parts.update(zip(names, done, strict=True))
        prepared[label] = Prepared(
            label,
            parts["z_anoms"],
            replace(pending_sums, sums=sums, counts=counts).result(),
            parts.get("jet"),  # in memory already (from the computed sector profile)
            parts["sst_anoms"],
            kinds[label] == "daily",
            opened[label][1],
        )
    return prepared


def _on_grid(z: xr.DataArray, grid: xr.DataArray) -> xr.DataArray:
    """`z` on the horizontal grid of `grid` (interpolating the grid only, never time)."""
    same = all(np.array_equal(z[d].values, grid[d].values) for d in ("lat", "lon"))
    return z if same else z.interp(lat=grid["lat"], lon=grid["lon"])


def _crop(da: xr.DataArray | None, *domains) -> xr.DataArray | None:
    """The smallest lat-lon box holding every domain (lat_min, lat_max, lon_min, lon_max)."""
    if da is None:
        return None
    lat_min, lat_max = min(d[0] for d in domains), max(d[1] for d in domains)
    lon_min, lon_max = min(d[2] for d in domains), max(d[3] for d in domains)
    if any(d[2] > d[3] for d in domains):  # a domain across the date line: keep every longitude
        return da.sel(lat=slice(lat_min, lat_max))
    return da.sel(lat=slice(lat_min, lat_max), lon=slice(lon_min, lon_max))


def _single(da: xr.DataArray | None) -> xr.DataArray | None:
    """Season anomalies in single precision, in memory and on dask alike: they are the largest
    arrays a comparison holds, and the EOF, projection and regime kernels accumulate in double
    precision (anomalies of tens of metres keep ~1e-5 m resolution)."""
    if da is None:
        return None
    out = da.astype("float32")
    out.attrs = da.attrs
    return out


def _quiet_season(da: xr.DataArray, season: str) -> xr.DataArray:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        return seasons.select_season(da, season)


# ------------------------------------------------------------------------------ the job


def compare(
    datasets: Mapping[str, Any],
    reference: Any = None,
    baseline: str | None = None,
    season: str = "DJF",
    n_resamples: int = 1000,
    seed: int = 0,
    *,
    progress: bool | Callable[[str], None] = False,
    **options: Any,
) -> Comparison:
    """Run every diagnostic for `datasets` on a common basis and test every difference.

    Parameters
    ----------
    datasets : label -> a Dataset, a path or glob, a list of member files, or a dict of
        `open_dataset` keywords with a ``path``. Everything goes through `open_dataset`.
    reference : a label in `datasets`, or a dataset (or path) added under the label
        "reference": the reanalysis-like dataset the patterns are fitted on and every dataset
        is validated against. None: the baseline is the fitting dataset.
    baseline : the label the others are compared with (default: the first model dataset).
    season : the season, e.g. "DJF" (initials of consecutive months).
    n_resamples : bootstrap and permutation replicates.
    seed : seed of every random step (k-means, bootstrap, permutation).
    progress : print progress of the long steps (or a callable taking a line of text).
    **options : option groups as in the configuration file (README, "Configuration"), e.g.
        ``jet={"cutoff_days": 10}``, ``regimes={"n_init": 50}``, ``resampling={"alpha": 0.1}``.

    Returns
    -------
    Comparison.
    """
    groups = dict(options)
    groups.setdefault("resampling", {})
    groups["resampling"] = {**groups["resampling"], "n_resamples": n_resamples, "seed": seed}
    opts = validate_options(groups)
    steps = _Steps(progress)
    specs = dict(datasets)
    if not specs:
        raise ConfigError.make("datasets", "an empty mapping", "at least one dataset", "give one")
    ref_label = None
    if reference is not None:
        if isinstance(reference, str) and reference in specs:
            ref_label = reference
        else:
            ref_label = "reference"
            if ref_label in specs:
                raise ConfigError.make(
                    "reference",
                    "a dataset while a dataset is already labelled 'reference'",
                    "the label of the reference among datasets, or a new dataset",
                    "pass reference='reference'",
                )
            specs = {ref_label: reference, **specs}
    models = [k for k in specs if k != ref_label]
    if baseline is None:
        baseline = models[0] if models else ref_label
    if baseline not in specs:
        raise ConfigError.make(
            "baseline",
            repr(baseline),
            f"one of the dataset labels {list(specs)}",
            "name one of the datasets",
        )
    fit_on = ref_label or baseline
    labels = list(specs)

    opened: dict[str, tuple[xr.Dataset, list[dict]]] = {}
    with steps.timed("opening and normalizing"):
        for label in labels:
            opened[label] = _open(label, specs[label])
            if "z500" not in opened[label][0]:
                raise InputError.make(
                    f"dataset {label!r}",
                    f"variables {sorted(opened[label][0].data_vars)}",
                    "geopotential height (z500) in every dataset",
                    "add Z500 or name it with variables={'z500': ...}",
                )

    with steps.timed("anomalies, season and jet index"):
        prepared = _prepare_all(opened, baseline, ref_label, season, opts)

    from .diagnostics import run_diagnostics

    results = run_diagnostics(prepared, labels, fit_on, baseline, ref_label, opts, steps)
    with steps.timed("summary table"):
        builder = SummaryBuilder(prepared, results, labels, baseline, ref_label, opts)
        summary = builder.build()
    steps(f"done: {len(summary)} summary rows")
    return Comparison(
        labels=labels,
        reference=ref_label,
        baseline=baseline,
        fit_on=fit_on,
        season=str(season),
        summary=summary,
        indices=results["indices"],
        maps=results["maps"],
        nao=results["nao"],
        regimes=results["regimes"],
        jet_modes=results["jet_modes"],
        details=results,
        options=opts,
        sources={k: v.sources for k, v in prepared.items()},
        timings=steps.timings,
    )
