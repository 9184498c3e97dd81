"""The tidy summary table of a comparison: every quantity, every dataset, every test.

Three kinds of row, told apart by ``versus``:

- ``versus`` missing (None): the dataset's own estimate, with a 95% block-bootstrap percentile
  interval (or, for EOF variance fractions, +-1.96 North et al. 1982 errors).
- ``versus`` = the baseline label: the difference (dataset minus baseline), with a two-sided
  block-permutation p-value.
- ``versus`` = the reference label: the reference's value, with the dataset's 2.5-97.5
  percentile range for samples as long as the reference (ci_low, ci_high), and the two-sided
  p-value of the reference's percentile in that distribution ("is the reference inside the
  model's spread?").
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from . import resampling
from .config import resampling_keywords
from .errors import InputError, InputWarning
from .timeseries import EfoldingTime

COLUMNS = (
    "diagnostic",
    "quantity",
    "dataset",
    "value",
    "ci_low",
    "ci_high",
    "versus",
    "p_value",
    "significant",
)


@dataclass(frozen=True)
class Quantity:
    """A resampled quantity: where its daily series comes from and its block statistic."""

    diagnostic: str
    name: str  # with units, e.g. "latitude mean (degrees_north)"
    series: Callable[[str], xr.DataArray | None]
    statistic: Any
    components: Sequence[str] | None = None  # names of a vector statistic's entries


class SummaryBuilder:
    """Builds the summary rows from the prepared data and the diagnostics' results."""

    def __init__(self, prepared, results, labels, baseline, reference, opts):
        self.prepared, self.results = prepared, results
        self.labels, self.baseline, self.reference = list(labels), baseline, reference
        self.alpha = opts["resampling"]["alpha"]
        self.res = resampling_keywords(opts)
        self.max_lag = opts["memory"]["max_lag"]
        self.rows: list[dict] = []

    # ------------------------------------------------------------------ rows
    def _row(
        self, diagnostic, quantity, dataset, value, low=np.nan, high=np.nan, versus=None, p=np.nan
    ) -> None:
        self.rows.append(
            {
                "diagnostic": diagnostic,
                "quantity": quantity,
                "dataset": dataset,
                "value": float(value),
                "ci_low": float(low),
                "ci_high": float(high),
                "versus": versus,
                "p_value": float(p),
                "significant": bool(np.isfinite(p) and p <= self.alpha)
                if np.isfinite(p)
                else np.nan,
            }
        )

    def build(self) -> pd.DataFrame:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", InputWarning)
            warnings.simplefilter("ignore", RuntimeWarning)
            self._nao_patterns()
            for q in self._quantities():
                self._resampled(q)
            self._jet_modes()
            self._jet_distribution()
            self._regime_patterns()
        frame = pd.DataFrame(self.rows, columns=list(COLUMNS))
        frame["significant"] = frame["significant"].astype(object)
        return frame

    # ------------------------------------------------------------------ quantities
    def _quantities(self) -> list[Quantity]:
        r = self.results
        jet = r.get("_jet_series", {})
        out = [
            Quantity("NAO", "index mean (1)", lambda k: r["nao_index"].get(k), "mean"),
            Quantity("NAO", "index standard deviation (1)", lambda k: r["nao_index"].get(k), "std"),
            Quantity(
                "NAO",
                "e-folding time (days)",
                lambda k: r["nao_index"].get(k) if self.prepared[k].daily else None,
                EfoldingTime(max_lag=self.max_lag),
            ),
        ]
        if r.get("jet_modes") is not None:
            categories = list(r["jet_modes"].categories)
            out += [
                Quantity(
                    "jet",
                    "latitude mean (degrees_north)",
                    lambda k: _get(jet, k, "latitude"),
                    "mean",
                ),
                Quantity(
                    "jet",
                    "latitude standard deviation (degrees)",
                    lambda k: _get(jet, k, "latitude"),
                    "std",
                ),
                Quantity("jet", "speed mean (m s-1)", lambda k: _get(jet, k, "speed"), "mean"),
                Quantity(
                    "jet",
                    "latitude e-folding time (days)",
                    lambda k: _get(jet, k, "latitude"),
                    EfoldingTime(max_lag=self.max_lag),
                ),
                Quantity(
                    "jet",
                    "speed e-folding time (days)",
                    lambda k: _get(jet, k, "speed"),
                    EfoldingTime(max_lag=self.max_lag),
                ),
                Quantity(
                    "jet",
                    "occupancy",
                    lambda k: r["jet_category"].get(k),
                    resampling.CategoryOccupancy(categories=tuple(range(len(categories)))),
                    [f"{c} (fraction of days)" for c in categories],
                ),
            ]
        if r.get("regimes") is not None:
            names = list(r["regimes"].names)
            cats = tuple(range(len(names)))
            out += [
                Quantity(
                    "regimes",
                    "occupancy",
                    lambda k: r["regime_labels"].get(k),
                    resampling.CategoryOccupancy(categories=cats),
                    [f"{n} (fraction of days)" for n in names],
                ),
                Quantity(
                    "regimes",
                    "persistence",
                    lambda k: r["regime_labels"].get(k),
                    resampling.CategoryPersistence(categories=cats),
                    [f"{n} mean episode length (days)" for n in names],
                ),
            ]
        return out

    def _names(self, q: Quantity, value) -> list[str]:
        if np.ndim(value) == 0:
            return [q.name]
        return list(q.components) if q.components else [f"{q.name} {i}" for i in range(len(value))]

    def _resampled(self, q: Quantity) -> None:
        series = {k: q.series(k) for k in self.labels}
        series = {k: v for k, v in series.items() if v is not None}
        for k, x in series.items():
            try:
                ci = resampling.bootstrap_ci(x, q.statistic, **self.res)
            except InputError:
                continue
            value = np.atleast_1d(ci["statistic"].values)
            for i, name in enumerate(self._names(q, ci["statistic"].values)):
                self._row(
                    q.diagnostic,
                    name,
                    k,
                    value[i],
                    np.atleast_1d(ci["low"].values)[i],
                    np.atleast_1d(ci["high"].values)[i],
                )
        if self.baseline in series:
            for k, y in series.items():
                if k in (self.baseline, self.reference):  # the reference has its own rows
                    continue
                try:
                    test = resampling.permutation_test(
                        series[self.baseline], y, q.statistic, **self.res
                    )
                except InputError:
                    continue
                diff = np.atleast_1d(test["statistic"].values)
                p = np.atleast_1d(test["p_value"].values)
                for i, name in enumerate(self._names(q, test["statistic"].values)):
                    self._row(q.diagnostic, name, k, diff[i], versus=self.baseline, p=p[i])
        if self.reference in series:
            ref = series[self.reference]
            for k, x in series.items():
                if k == self.reference:
                    continue
                n_model = int(resampling.block_array(x).shape[0])
                n_ref = int(resampling.block_array(ref).shape[0])
                try:
                    rp = resampling.reference_percentile(
                        x, ref, q.statistic, replace=n_model < n_ref, **self.res
                    )
                except InputError:
                    continue
                vals = [
                    np.atleast_1d(rp[v].values) for v in ("statistic", "low", "high", "p_value")
                ]
                for i, name in enumerate(self._names(q, rp["statistic"].values)):
                    self._row(
                        q.diagnostic,
                        name,
                        k,
                        vals[0][i],
                        vals[1][i],
                        vals[2][i],
                        versus=self.reference,
                        p=vals[3][i],
                    )

    # ------------------------------------------------------------------ fitted patterns
    def _nao_patterns(self) -> None:
        for k, cmp in self.results["nao_compare"].items():
            vf = cmp["variance_fraction"].sel(pattern="own")
            err = cmp["variance_fraction_error"].sel(pattern="own")
            self._row(
                "NAO", "variance fraction of own EOF 1 (1)", k, vf, vf - 1.96 * err, vf + 1.96 * err
            )
            self._row(
                "NAO",
                "pattern correlation of own EOF 1 with the fitted NAO (1)",
                k,
                cmp["pattern_correlation_centred"],
            )

    def _jet_modes(self) -> None:
        own = self.results.get("jet_own") or {}
        for k, modes in own.items():
            self._row("jet", "number of modes (1)", k, modes.modes.size)
            for i, lat in enumerate(modes.modes.values):
                interval = modes.mode_interval.isel(mode=i).values
                self._row(
                    "jet",
                    f"mode {i + 1} latitude (degrees_north)",
                    k,
                    lat,
                    interval[0],
                    interval[1],
                )
            for m in (1, 2):
                test = modes.test.sel(max_modes=m)
                self._row(
                    "jet",
                    f"critical bandwidth, at most {m} mode(s) (degrees)",
                    k,
                    test["critical_bandwidth"],
                    p=float(test["p_value"]),
                )
        # Shift of each mode from the baseline, in the fitting dataset's basins (block permutation)
        fitted, jet = self.results.get("jet_modes"), self.results.get("_jet_series") or {}
        if fitted is None or self.baseline not in jet:
            return
        stat = fitted.mode_statistic()
        for k, ds in jet.items():
            if k in (self.baseline, self.reference):
                continue
            try:
                test = resampling.permutation_test(
                    jet[self.baseline]["latitude"], ds["latitude"], stat, **self.res
                )
            except InputError:
                continue
            for i, (diff, p) in enumerate(
                zip(test["statistic"].values, test["p_value"].values, strict=True)
            ):
                self._row(
                    "jet",
                    f"mode {i + 1} latitude (degrees_north)",
                    k,
                    diff,
                    versus=self.baseline,
                    p=p,
                )

    def _jet_distribution(self) -> None:
        jet = self.results.get("_jet_series") or {}
        if self.baseline not in jet:
            return
        for k, ds in jet.items():
            if k in (self.baseline, self.reference):
                continue
            test = resampling.ks_test(jet[self.baseline]["latitude"], ds["latitude"], **self.res)
            self._row(
                "jet",
                "latitude distribution, KS statistic (1)",
                k,
                test["statistic"],
                versus=self.baseline,
                p=float(test["p_value"]),
            )

    def _regime_patterns(self) -> None:
        own = self.results.get("regime_own") or {}
        for k, match in own.items():
            for name, corr in zip(
                match.correlation["regime"].values, match.correlation.values, strict=True
            ):
                self._row("regimes", f"{name}: pattern correlation of own regime (1)", k, corr)


def _get(jet: dict, label: str, name: str) -> xr.DataArray | None:
    ds = jet.get(label)
    return None if ds is None else ds[name]
