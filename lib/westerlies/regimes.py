"""Weather regimes: k-means on the leading PCs of daily Z500 anomalies, on a common basis.

Method: Vautard (1990), Mon. Wea. Rev. 118, 2056-2081; Michelangeli, Vautard and Legras (1995),
J. Atmos. Sci. 52, 1237-1256; Cassou (2008), Nature 455, 523-527. Defaults (from memory): four
winter regimes, 20-80N, 90W-30E, 14 leading PCs of sqrt(cos(lat))-weighted anomalies.

k-means runs on the PCs scaled back to their variance (un-normalized PCs, x_w . e_j). In that
space the Euclidean distance between two days equals the sqrt(cos(lat))-weighted distance of
their maps (truncated to the leading PCs), so clusters are those of the maps, with the leading
modes weighing more. Unit-variance PCs would give every retained mode the same weight.

Naming (rules of this package, centres of action from common practice). Each centroid map is
averaged (cos(lat) weights) over four boxes and divided by its area-weighted RMS over the domain:
Iceland I (60-70N, 30-10W), Azores A (35-45N, 35-15W), Scandinavia S (55-65N, 0-20E) and the
mid-Atlantic R (45-55N, 35-15W). Candidate names and scores:

- NAO+: I < 0 and A > 0, score (A - I) / 2;  NAO-: I > 0 and A < 0, score (I - A) / 2;
- Scandinavian blocking: S > 0 and S the largest of I, A, S, R, score S;
- Atlantic ridge: R > 0 and R the largest of I, A, S, R, score R.

A name needs a score of at least 0.5. Names go to centroids by Hungarian assignment on the
scores (each name at most once); the rest are "regime k". Order: NAO+, NAO-, Scandinavian
blocking, Atlantic ridge, then unnamed regimes by decreasing occupancy, k being the position.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import xarray as xr
from scipy.optimize import linear_sum_assignment
from sklearn.cluster import KMeans
from threadpoolctl import threadpool_limits

from . import eof as _eof
from . import timeaxis
from .errors import ConfigError, CoordinateError, GridError, InputError, InputWarning
from .regime_stats import (
    NO_REGIME,
    NO_REGIME_NAME,
    OccupancyStatistic,
    PersistenceStatistic,
    apply_min_length,
    episodes,
    label_attrs,
    occupancy,
    persistence,
    transitions,
)
from .seasons import block_ids

__all__ = [
    "NO_REGIME",
    "NO_REGIME_NAME",
    "OccupancyStatistic",
    "PersistenceStatistic",
    "RegimeMatch",
    "Regimes",
    "apply_min_length",
    "classifiability",
    "episodes",
    "occupancy",
    "persistence",
    "transitions",
]

TRADE_NAMES = ("NAO+", "NAO-", "Scandinavian blocking", "Atlantic ridge")
#: (lat_min, lat_max, lon_min, lon_max) of each centre of action (common practice).
CENTRES = {
    "Iceland": (60.0, 70.0, -30.0, -10.0),
    "Azores": (35.0, 45.0, -35.0, -15.0),
    "Scandinavia": (55.0, 65.0, 0.0, 20.0),
    "mid-Atlantic": (45.0, 55.0, -35.0, -15.0),
}
MIN_NAME_SCORE = 0.5
METHOD = "k-means on leading PCs of sqrt(cos(lat))-weighted Z500 anomalies (Vautard 1990; "


# ---------------------------------------------------------------------------------------------
# numpy kernels


def _box_means(maps: np.ndarray, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """cos(lat)-weighted box means at the four centres of action, (k, 4); NaN if off the grid."""
    out = np.full((maps.shape[0], len(CENTRES)), np.nan)
    for c, (la0, la1, lo0, lo1) in enumerate(CENTRES.values()):
        ilat = (lat >= la0) & (lat <= la1)
        ilon = (lon >= lo0) & (lon <= lo1)
        if ilat.any() and ilon.any():
            w = np.cos(np.deg2rad(lat[ilat]))[:, None] * np.ones(ilon.sum())
            out[:, c] = (maps[:, ilat][:, :, ilon] * w).sum((1, 2)) / w.sum()
    return out


def _name_scores(maps: np.ndarray, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """Score of each centroid (rows) for each trade name (columns); -inf where a rule fails."""
    w = np.cos(np.deg2rad(lat))[:, None] * np.ones(lon.size)
    rms = np.sqrt((maps**2 * w).sum((1, 2)) / w.sum())
    i, a, s, r = (_box_means(maps, lat, lon) / rms[:, None]).T
    top = np.nanmax(np.stack([i, a, s, r]), axis=0)
    with np.errstate(invalid="ignore"):
        rules = [
            ((i < 0) & (a > 0), (a - i) / 2),
            ((i > 0) & (a < 0), (i - a) / 2),
            ((s > 0) & (s >= top), s),
            ((r > 0) & (r >= top), r),
        ]
        scores = np.stack([np.where(ok & (sc >= MIN_NAME_SCORE), sc, -np.inf) for ok, sc in rules])
    return scores.T


def _name_and_order(
    maps: np.ndarray, lat: np.ndarray, lon: np.ndarray, occupancy_: np.ndarray
) -> tuple[list[int], list[str]]:
    """Order of the centroids (indices into maps) and their names, by the module's rules."""
    scores = _name_scores(maps, lat, lon)
    finite = np.where(np.isfinite(scores), scores, -1e6)
    rows, cols = linear_sum_assignment(finite, maximize=True)
    named = {int(c): int(r) for r, c in zip(rows, cols, strict=True) if np.isfinite(scores[r, c])}
    order = [named[c] for c in sorted(named)]
    names = [TRADE_NAMES[c] for c in sorted(named)]
    rest = [j for j in np.argsort(-occupancy_, kind="stable") if int(j) not in order]
    for j in rest:
        order.append(int(j))
        names.append(f"regime {len(order)}")
    return order, names


def _pattern_correlation(a: np.ndarray, b: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Centred cos(lat)-weighted pattern correlation between map sets a (m, ...) and b (n, ...)."""
    w = np.broadcast_to(np.cos(np.deg2rad(lat))[:, None], a.shape[1:]).ravel()
    w = w / w.sum()
    x = a.reshape(a.shape[0], -1)
    y = b.reshape(b.shape[0], -1)
    x = x - (x @ w)[:, None]
    y = y - (y @ w)[:, None]
    num = (x * w) @ y.T
    return num / np.sqrt(np.outer((x**2) @ w, (y**2) @ w))


def _nearest(x: np.ndarray, centres: np.ndarray) -> np.ndarray:
    """Index of the nearest centre (Euclidean) for each row of x."""
    d2 = (x**2).sum(1)[:, None] - 2 * x @ centres.T + (centres**2).sum(1)[None, :]
    return np.argmin(d2, axis=1)


# ---------------------------------------------------------------------------------------------
# input handling


def _field(anoms: xr.DataArray, domain: tuple[float, float, float, float], what: str):
    """Check daily (member, time, lat, lon) anomalies and cut out the regime domain."""
    if not isinstance(anoms, xr.DataArray):
        raise InputError.make(
            what,
            type(anoms).__name__,
            "a DataArray of daily Z500 anomalies",
            "pass e.g. ds['z500'] after westerlies.anomalies",
        )
    if "plev" in anoms.dims:
        if anoms.sizes["plev"] != 1:
            raise CoordinateError.make(
                f"{what} dim 'plev'",
                f"{anoms.sizes['plev']} levels",
                "one level (500 hPa)",
                "select it first, e.g. anoms.sel(plev=500)",
            )
        anoms = anoms.isel(plev=0, drop=True)
    if "member" not in anoms.dims:
        anoms = anoms.expand_dims(member=[0])
    if set(anoms.dims) != {"member", "time", "lat", "lon"}:
        raise CoordinateError.make(
            f"{what} dims",
            repr(tuple(anoms.dims)),
            "(member, time, lat, lon)",
            "open the data with westerlies.open_dataset and select one variable and level",
        )
    timeaxis.require_daily(anoms["time"], what)
    lat0, lat1, lon0, lon1 = domain
    if not (lat0 < lat1 and lon0 < lon1):
        raise ConfigError.make(
            "domain",
            repr(domain),
            "(lat_min, lat_max, lon_min, lon_max) with min < max",
            "give e.g. (20, 80, -90, 30)",
        )
    lat, lon = anoms["lat"].values, anoms["lon"].values
    ilat = (lat >= lat0) & (lat <= lat1)
    ilon = (lon >= lon0) & (lon <= lon1)
    if ilat.sum() < 2 or ilon.sum() < 2:
        raise GridError.make(
            f"{what} grid",
            f"lat {lat.min():g}..{lat.max():g}, lon {lon.min():g}..{lon.max():g}",
            f"at least 2 x 2 points inside the domain {domain}",
            "give data covering the domain",
        )
    sub = anoms.isel(lat=np.flatnonzero(ilat), lon=np.flatnonzero(ilon))
    covered = (lat[ilat].min(), lat[ilat].max(), lon[ilon].min(), lon[ilon].max())
    spacing = max(
        np.median(np.diff(lat)) if lat.size > 1 else 0.0,
        np.median(np.diff(lon)) if lon.size > 1 else 0.0,
    )
    if any(abs(c - d) > spacing + 1e-6 for c, d in zip(covered, domain, strict=True)):
        warnings.warn(
            f"{what}: the data cover only {tuple(float(c) for c in covered)} of the regime domain "
            f"{domain}; the overlap is used",
            InputWarning,
            stacklevel=3,
        )
    return sub.transpose("member", "time", "lat", "lon")


def _labels_like(values: np.ndarray, sub: xr.DataArray, attrs: dict) -> xr.DataArray:
    coords = {"member": sub["member"], "time": sub["time"]}
    for name, coord in sub.coords.items():
        if name not in coords and set(coord.dims) <= {"member", "time"}:
            coords[name] = coord
    return xr.DataArray(values, dims=("member", "time"), coords=coords, name="regime", attrs=attrs)


def _rng(seed) -> np.random.Generator:
    return seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)


def _int_seed(seed) -> int:
    """An int for scikit-learn's random_state from an int or a Generator (deterministic)."""
    if isinstance(seed, np.random.Generator):
        return int(seed.integers(2**31 - 1))
    return int(seed)


# ---------------------------------------------------------------------------------------------
# the fitted object


@dataclass(frozen=True)
class Regimes:
    """Weather regimes fitted once (on a reference), then applied to any dataset.

    Attributes
    ----------
    labels : int DataArray (member, time) of the fitting data; 0..k-1 in the order of `names`,
        names attached as CF flag attributes.
    centroids : DataArray (regime, lat, lon), m: the cluster centres as anomaly maps (in the
        space of the retained PCs), `regime` carrying the names.
    names : regime names in label order.
    pcs_used : number of leading PCs kept.
    variance_fraction : DataArray (mode): fraction of the domain's weighted variance of each
        retained PC; `variance_explained` is their sum.
    eof : the EOF basis (patterns, pcs, eigenvalues, `project`).
    """

    labels: xr.DataArray
    centroids: xr.DataArray
    names: tuple[str, ...]
    pcs_used: int
    variance_fraction: xr.DataArray
    variance_explained: float
    eof: _eof.EOFResult = field(repr=False)
    domain: tuple[float, float, float, float] = (20.0, 80.0, -90.0, 30.0)
    n_init: int = 50
    seed: int = 0
    inertia: float = float("nan")
    _centres: np.ndarray = field(default=None, repr=False)  # (k, pcs_used), scaled PC space

    @classmethod
    def fit(
        cls,
        anoms: xr.DataArray,
        n_regimes: int = 4,
        n_pcs: int | None = 14,
        domain: tuple[float, float, float, float] = (20, 80, -90, 30),
        *,
        n_init: int = 50,
        seed: int | np.random.Generator = 0,
        variance_fraction: float | None = None,
    ) -> Regimes:
        """Fit k-means regimes to daily Z500 anomalies.

        Parameters
        ----------
        anoms : DataArray (member, time, lat, lon) of daily Z500 anomalies in m (canonical
            form, season already selected); members and days are pooled.
        n_regimes : number of regimes k (default 4, from memory).
        n_pcs : number of leading PCs kept (default 14, from memory).
        domain : (lat_min, lat_max, lon_min, lon_max) in degrees (default 20-80N, 90W-30E, from
            memory).
        n_init : k-means restarts (scikit-learn `n_init`); the best of them is kept.
        seed : int or numpy Generator for k-means.
        variance_fraction : instead of `n_pcs`, keep the fewest leading PCs whose variance
            fractions add up to at least this (0 < f <= 1).
        """
        k, n_pcs = _check_fit_options(n_regimes, n_pcs, n_init, variance_fraction)
        sub = _field(anoms, tuple(float(d) for d in domain), "Regimes.fit anoms")
        basis = _fit_basis(sub, n_pcs, variance_fraction)
        n_used = basis.n_modes
        x = basis.scaled_pcs()
        km = KMeans(n_clusters=k, n_init=n_init, random_state=_int_seed(seed)).fit(x)
        counts = np.bincount(km.labels_, minlength=k) / km.labels_.size
        maps = basis.maps(km.cluster_centers_)
        lat, lon = sub["lat"].values, sub["lon"].values
        order, names = _name_and_order(maps, lat, lon, counts)
        relabel = np.empty(k, dtype=np.int64)
        relabel[order] = np.arange(k)
        values = relabel[km.labels_].reshape(sub.sizes["member"], sub.sizes["time"])
        labels = _labels_like(values, sub, label_attrs(names))
        method = METHOD + f"Michelangeli et al. 1995): k={k}, {n_used} PCs, domain {domain}"
        labels.attrs["method"] = method
        centroids = _centroid_array(maps[order], sub, names, method)
        vf = basis.variance_fraction()
        return cls(
            labels=labels,
            centroids=centroids,
            names=tuple(names),
            pcs_used=n_used,
            variance_fraction=vf,
            variance_explained=float(vf.sum()),
            eof=basis.eof,
            domain=tuple(float(d) for d in domain),
            n_init=n_init,
            seed=seed,
            inertia=float(km.inertia_),
            _centres=km.cluster_centers_[order],
        )

    # -----------------------------------------------------------------------------------------

    def _basis(self) -> _Basis:
        return _Basis(self.eof, self.pcs_used)

    def _scaled(self, anoms: xr.DataArray, what: str):
        sub = _field(anoms, self.domain, what)
        fit_grid = (self.centroids["lat"].values, self.centroids["lon"].values)
        if (
            sub.sizes["lat"] != fit_grid[0].size
            or sub.sizes["lon"] != fit_grid[1].size
            or not (
                np.allclose(sub["lat"].values, fit_grid[0])
                and np.allclose(sub["lon"].values, fit_grid[1])
            )
        ):
            raise GridError.make(
                f"{what} grid",
                f"{sub.sizes['lat']} x {sub.sizes['lon']} points in the domain",
                f"the fitting grid ({fit_grid[0].size} x {fit_grid[1].size} points)",
                "regrid the data to the grid the regimes were fitted on",
            )
        return sub, self._basis().project(sub)

    def assign(self, anoms: xr.DataArray, min_correlation: float | None = None) -> xr.DataArray:
        """Nearest fitted centroid for each day of any dataset (projected on the fitted EOFs).

        Parameters
        ----------
        anoms : DataArray (member, time, lat, lon) of daily Z500 anomalies, m, on the fitting
            grid (anomalies against the same kind of climatology as the fitting data).
        min_correlation : if given, days whose pattern correlation with their centroid (see
            `correlations`) is below it get label -1, named "no regime".

        Returns
        -------
        int DataArray (member, time) with CF flag attributes naming the regimes.
        """
        sub, x = self._scaled(anoms, "Regimes.assign anoms")
        values = _nearest(x, self._centres)
        no_regime = min_correlation is not None
        if no_regime:
            corr = self.correlations(anoms).transpose("member", "time", "regime").values
            corr = corr.reshape(-1, len(self.names))[np.arange(values.size), values]
            values = np.where(corr >= float(min_correlation), values, NO_REGIME)
        values = values.reshape(sub.sizes["member"], sub.sizes["time"])
        labels = _labels_like(values, sub, label_attrs(self.names, no_regime=no_regime))
        labels.attrs["method"] = self.labels.attrs["method"] + (
            f"; days with pattern correlation < {min_correlation} set to no regime"
            if no_regime
            else ""
        )
        return labels

    def correlations(self, anoms: xr.DataArray) -> xr.DataArray:
        """Centred cos(lat)-weighted pattern correlation of each day's map with each centroid.

        Computed on the full anomaly map in the regime domain (not the truncated one), as a
        reduction over lat and lon (dask-friendly). Returns a DataArray (member, time, regime).
        """
        sub, _ = self._scaled(anoms, "Regimes.correlations anoms")
        w = np.cos(np.deg2rad(sub["lat"])) * xr.ones_like(sub["lon"], dtype=float)
        w = w / w.sum()
        c = self.centroids - (self.centroids * w).sum(("lat", "lon"))
        c = c.drop_vars([v for v in c.coords if v not in ("regime", "lat", "lon")])
        x_mean = (sub * w).sum(("lat", "lon"))
        num = xr.dot(sub * w, c, dim=("lat", "lon"))  # mean of x is removed by c's zero mean
        var_x = (sub**2 * w).sum(("lat", "lon")) - x_mean**2
        var_c = (c**2 * w).sum(("lat", "lon"))
        out = (num / np.sqrt(var_x * var_c)).transpose("member", "time", "regime")
        out.attrs = {
            "units": "1",
            "long_name": "pattern correlation with regime centroid",
            "method": "centred, cos(lat)-weighted, over the regime domain",
        }
        return out.compute()

    def own_regimes(self, anoms: xr.DataArray) -> RegimeMatch:
        """The dataset's own regimes (same settings), matched to the fitted ones.

        Matching is the Hungarian assignment (Kuhn 1955; scipy.optimize.linear_sum_assignment)
        maximising the summed pattern correlation between own and fitted centroids.
        """
        own = Regimes.fit(
            anoms,
            len(self.names),
            self.pcs_used,
            self.domain,
            n_init=self.n_init,
            seed=self.seed,
        )
        corr = _pattern_correlation(
            self.centroids.values, own.centroids.values, self.centroids["lat"].values
        )
        rows, cols = linear_sum_assignment(corr, maximize=True)
        order = cols[np.argsort(rows)]
        regime = {"regime": list(self.names)}
        matched = xr.DataArray(
            corr[np.arange(len(order)), order],
            dims="regime",
            coords=regime,
            name="correlation",
            attrs={"units": "1", "long_name": "pattern correlation of the matched own regime"},
        )
        matrix = xr.DataArray(
            corr,
            dims=("regime", "own_regime"),
            coords={**regime, "own_regime": list(own.names)},
            name="correlation_matrix",
            attrs={"units": "1"},
        )
        centroids = own.centroids.isel(regime=order).assign_coords(regime=list(self.names))
        centroids = centroids.assign_coords(own_name=("regime", [own.names[j] for j in order]))
        inverse = np.empty(len(order), dtype=np.int64)
        inverse[order] = np.arange(len(order))
        labels = own.labels.copy(data=inverse[own.labels.values])
        labels.attrs.update(label_attrs(self.names))
        return RegimeMatch(own, tuple(int(j) for j in order), matched, matrix, centroids, labels)


@dataclass(frozen=True)
class RegimeMatch:
    """A dataset's own regimes matched to fitted ones.

    Attributes
    ----------
    own : the dataset's own `Regimes` fit.
    order : for each fitted regime, the index of the matched own regime.
    correlation : DataArray (regime): pattern correlation of each matched pair.
    correlation_matrix : DataArray (regime, own_regime): all pattern correlations.
    centroids : own centroids (regime, lat, lon) in the fitted order, named as the fitted ones
        (`own_name` keeps the own names).
    labels : own labels renumbered to the fitted regimes.
    """

    own: Regimes
    order: tuple[int, ...]
    correlation: xr.DataArray
    correlation_matrix: xr.DataArray
    centroids: xr.DataArray
    labels: xr.DataArray


def _check_fit_options(n_regimes, n_pcs, n_init, variance_fraction) -> tuple[int, int | None]:
    if not isinstance(n_regimes, (int, np.integer)) or n_regimes < 2:
        raise ConfigError.make("n_regimes", repr(n_regimes), "an integer >= 2", "give e.g. 4")
    if not isinstance(n_init, (int, np.integer)) or n_init < 1:
        raise ConfigError.make("n_init", repr(n_init), "an integer >= 1", "give e.g. 50")
    if variance_fraction is not None:
        if not 0 < float(variance_fraction) <= 1:
            raise ConfigError.make(
                "variance_fraction",
                repr(variance_fraction),
                "a number in (0, 1]",
                "give e.g. 0.8, or leave it None and set n_pcs",
            )
        return int(n_regimes), None
    if not isinstance(n_pcs, (int, np.integer)) or n_pcs < 1:
        raise ConfigError.make("n_pcs", repr(n_pcs), "an integer >= 1", "give e.g. 14")
    return int(n_regimes), int(n_pcs)


def _centroid_array(maps: np.ndarray, sub: xr.DataArray, names, method: str) -> xr.DataArray:
    return xr.DataArray(
        maps,
        dims=("regime", "lat", "lon"),
        coords={
            "regime": list(names),
            "regime_label": ("regime", np.arange(len(names))),
            "lat": sub["lat"],
            "lon": sub["lon"],
        },
        name="centroid",
        attrs={"units": "m", "long_name": "regime centroid (Z500 anomaly)", "method": method},
    )


# ---------------------------------------------------------------------------------------------
# the EOF basis


def _fit_basis(sub: xr.DataArray, n_pcs: int | None, variance_fraction: float | None) -> _Basis:
    """sqrt(cos(lat))-weighted EOFs of the domain field (`westerlies.eof.fit`), truncated."""
    n_max = min(sub.sizes["member"] * sub.sizes["time"] - 1, sub.sizes["lat"] * sub.sizes["lon"])
    if n_pcs is not None:
        if n_pcs > n_max:
            raise ConfigError.make(
                "n_pcs",
                str(n_pcs),
                f"at most {n_max} (samples - 1 and grid points)",
                "keep fewer PCs",
            )
        return _Basis(_eof.fit(sub, n_modes=n_pcs, weights="sqrt_coslat"), n_pcs)
    n_try = min(n_max, 50)
    while True:  # enough modes to reach the variance fraction asked for
        basis = _eof.fit(sub, n_modes=n_try, weights="sqrt_coslat")
        cum = np.cumsum(np.asarray(basis.variance_fraction.values))
        if cum[-1] >= variance_fraction - 1e-12 or n_try >= n_max:
            break
        n_try = min(n_max, 4 * n_try)
    return _Basis(basis, int(min(np.searchsorted(cum, variance_fraction - 1e-12) + 1, cum.size)))


class _Basis:
    """The leading `n_modes` of an EOF result, in the scaled PC space used by k-means.

    Scaled PCs are the unit-variance PCs times sqrt(eigenvalue): the projections
    (x - mean)_w . e_j of the weighted maps, where Euclidean distance equals the weighted
    distance of the maps (k-means does not depend on the mean removed by the solver).
    """

    def __init__(self, eof, n_modes: int) -> None:
        self.eof = eof
        self.n_modes = int(n_modes)
        self.scale = np.sqrt(np.asarray(eof.eigenvalues.values[:n_modes], dtype=float))

    def _flat(self, pcs: xr.DataArray) -> np.ndarray:
        pcs = pcs.transpose("member", "time", "mode").isel(mode=slice(0, self.n_modes))
        return np.asarray(pcs.values).reshape(-1, self.n_modes) * self.scale

    def scaled_pcs(self) -> np.ndarray:
        return self._flat(self.eof.pcs)

    def project(self, sub: xr.DataArray) -> np.ndarray:
        return self._flat(self.eof.project(sub))

    def maps(self, points: np.ndarray) -> np.ndarray:
        """Anomaly maps (k, lat, lon) in m of points (k, n_modes) in scaled PC space."""
        patterns = np.asarray(self.eof.patterns.values[: self.n_modes])
        unit = points / np.where(self.scale > 0, self.scale, 1.0)
        # The solver removes the pooled mean of the fitting data; add it back to the maps.
        return np.asarray(self.eof.mean.values) + np.tensordot(unit, patterns, axes=(1, 0))

    def variance_fraction(self) -> xr.DataArray:
        vf = self.eof.variance_fraction.isel(mode=slice(0, self.n_modes)).copy()
        vf.attrs = {"units": "1", "long_name": "fraction of weighted variance of each PC kept"}
        return vf


# ---------------------------------------------------------------------------------------------
# classifiability (Michelangeli, Vautard and Legras 1995)


def _partition_centres(x: np.ndarray, k: int, n_partitions: int, rng) -> np.ndarray:
    """Centroids of independent single-start k-means partitions, (n_partitions, k, dims)."""
    out = np.empty((n_partitions, k, x.shape[1]))
    # Many small single-start fits: one thread each is much faster than a shared thread pool.
    with threadpool_limits(1):
        for p in range(n_partitions):
            seed = int(rng.integers(2**31 - 1))
            out[p] = KMeans(n_clusters=k, n_init=1, random_state=seed).fit(x).cluster_centers_
    return out


def _classifiability_index(centres: np.ndarray) -> float:
    """Mean over ordered pairs P != Q of min_i max_j corr(c_i^P, c_j^Q) (uncentred)."""
    unit = centres / np.linalg.norm(centres, axis=2, keepdims=True)
    sim = np.einsum("pid,qjd->pqij", unit, unit)  # (P, Q, k, k)
    a = sim.max(axis=3).min(axis=2)
    n = a.shape[0]
    return float((a.sum() - np.trace(a)) / (n * (n - 1)))


def _red_noise(x: np.ndarray, blocks: np.ndarray, rng) -> np.ndarray:
    """AR(1) surrogate of each column, with the column's mean, variance and lag-1 correlation
    (estimated from pairs of days inside one block), generated block by block."""
    mean, sd = x.mean(0), x.std(0)
    xc = x - mean
    same = blocks[1:] == blocks[:-1]
    r1 = (xc[:-1][same] * xc[1:][same]).sum(0) / np.maximum((xc**2).sum(0), 1e-300)
    r1 = np.clip(r1, -0.999, 0.999)
    start = np.r_[True, ~same]
    pos = np.arange(blocks.size) - np.maximum.accumulate(np.where(start, np.arange(blocks.size), 0))
    y = rng.standard_normal(x.shape)
    for p in range(1, int(pos.max()) + 1 if pos.size else 1):
        i = np.flatnonzero(pos == p)
        y[i] = r1 * y[i - 1] + np.sqrt(1 - r1**2) * y[i]
    return mean + sd * y


def classifiability(
    anoms: xr.DataArray,
    n_regimes=(2, 3, 4, 5, 6),
    *,
    n_pcs: int | None = 14,
    variance_fraction: float | None = None,
    domain: tuple[float, float, float, float] = (20, 80, -90, 30),
    n_partitions: int = 20,
    n_surrogates: int = 20,
    confidence: float = 0.9,
    seed: int | np.random.Generator = 0,
) -> xr.Dataset:
    """Classifiability index for a range of k against AR(1) red-noise surrogates.

    Michelangeli, Vautard and Legras (1995): `n_partitions` k-means runs, each from one random
    start (drawn by k-means++, Arthur and Vassilvitskii 2007, rather than uniformly: uniform
    starts often stop in poor local minima even for well separated regimes);
    for two partitions P, Q the similarity is min_i max_j of the (uncentred) correlation between
    their centroids; the index is its mean over all pairs (1 = every run finds the same
    regimes). Surrogates: each retained PC replaced by an AR(1) series with its mean, variance
    and lag-1 autocorrelation, block by block. The paper used 50 partitions and 100 surrogates
    (from memory); the defaults here are smaller to stay quick.

    Returns
    -------
    Dataset on `n_regimes`: `classifiability`, `surrogate` (n_regimes, surrogate),
    `surrogate_quantile` (the `confidence` quantile of the surrogates), `p_value`
    ((b + 1) / (B + 1), b surrogates at least as classifiable) and `significant`.
    """
    ks = [int(k) for k in np.atleast_1d(n_regimes)]
    if min(ks) < 2 or n_partitions < 2 or n_surrogates < 1 or not 0 < confidence < 1:
        raise ConfigError.make(
            "classifiability options",
            f"n_regimes={ks}, n_partitions={n_partitions}, "
            f"n_surrogates={n_surrogates}, confidence={confidence}",
            "k >= 2, n_partitions >= 2, n_surrogates >= 1, 0 < confidence < 1",
            "use e.g. n_regimes=(2, 3, 4, 5, 6), n_partitions=20, n_surrogates=20",
        )
    rng = _rng(seed)
    sub = _field(anoms, tuple(float(d) for d in domain), "classifiability anoms")
    _check_fit_options(max(ks), n_pcs, 1, variance_fraction)
    x = _fit_basis(sub, n_pcs, variance_fraction).scaled_pcs()
    blocks = np.asarray(block_ids(sub).transpose("member", "time").values).ravel()
    data = np.array(
        [_classifiability_index(_partition_centres(x, k, n_partitions, rng)) for k in ks]
    )
    surr = np.empty((len(ks), n_surrogates))
    for s in range(n_surrogates):
        y = _red_noise(x, blocks, rng)
        for i, k in enumerate(ks):
            surr[i, s] = _classifiability_index(_partition_centres(y, k, n_partitions, rng))
    quantile = np.quantile(surr, confidence, axis=1)
    p_value = ((surr >= data[:, None]).sum(1) + 1) / (n_surrogates + 1)
    method = (
        f"classifiability index (Michelangeli, Vautard and Legras 1995), {n_partitions} "
        f"partitions, {n_surrogates} AR(1) surrogates, {x.shape[1]} PCs"
    )
    attrs = {"units": "1", "method": method}
    return xr.Dataset(
        {
            "classifiability": ("n_regimes", data, {**attrs, "long_name": "classifiability"}),
            "surrogate": (
                ("n_regimes", "surrogate"),
                surr,
                {**attrs, "long_name": "classifiability of red-noise surrogates"},
            ),
            "surrogate_quantile": (
                "n_regimes",
                quantile,
                {**attrs, "long_name": f"{confidence} quantile of surrogates"},
            ),
            "p_value": ("n_regimes", p_value, {**attrs, "long_name": "Monte Carlo p-value"}),
            "significant": (
                "n_regimes",
                data > quantile,
                {"long_name": f"above the surrogates' {confidence} quantile"},
            ),
        },
        coords={"n_regimes": ks},
        attrs={"method": method},
    )
