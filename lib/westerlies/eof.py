"""Weighted, truncated EOF analysis of pooled ensemble anomalies, and projection onto the EOFs.

Method: principal component analysis of the area-weighted anomaly field, samples pooled over
``member`` and ``time``. Area weights sqrt(cos(latitude)) on the data, so that the covariance is
area-weighted (common practice). Sampling errors of the eigenvalues after North, Bell, Cahalan and
Moeng (1982), Mon. Wea. Rev. 110, 699-706: error = eigenvalue * sqrt(2 / N_eff); neighbouring
modes whose error bars (eigenvalue +- error) overlap are flagged as not separable.

Effective number of samples (documented choice): the lag-1 autocorrelation r1 of each PC is
pooled over blocks (one member in one season; `westerlies.seasons.block_ids`), using only pairs of
consecutive samples inside the same block, and each block counts as
max(1, n_b (1 - r1) / (1 + r1)) independent samples, the AR(1) form for a mean of Bretherton et
al. (1999), J. Climate 12, 1990-2009. N_eff is their sum over blocks, so it is never below the
number of blocks. Negative r1 are taken as 0 (common practice: never more samples than data).

Three solvers give the same result object:

- ``"exact"``: the singular value decomposition of the weighted data by `eofs.standard.Eof`.
- ``"fast"``: one pass over the data (row chunk by row chunk, or dask chunk by chunk) accumulating
  the space x space cross-product matrix, then `scipy.linalg.eigh` for the leading modes only;
  when there are fewer samples than grid points the samples x samples Gram matrix is decomposed
  instead. A second pass projects the data to get the PCs.
- ``"auto"``: exact for small numpy-backed data, fast otherwise.

Normalization: PCs have unit variance (ddof=1) on the fitting data; patterns are covariance
(regression) maps of the unweighted field on those PCs, in the field's units per unit PC. Each
mode's sign makes the largest-magnitude element of its weighted eigenvector positive (the rule of
scikit-learn's ``svd_flip``; common practice); `westerlies.nao` applies named sign conventions.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.linalg
import xarray as xr
from threadpoolctl import threadpool_limits

from .errors import ConfigError, CoordinateError, GridError, InputError, MissingValueError
from .seasons import block_ids

__all__ = ["EOFResult", "fit"]

Method = Literal["auto", "exact", "fast"]
Missing = Literal["raise", "fill"]

#: auto uses the exact SVD while samples x grid points stays below this (about 40 MB of floats).
AUTO_EXACT_MAX_VALUES = 1_000_000
#: decompositions of matrices with fewer elements than this run on one BLAS thread: measured
#: 5-10x faster on a shared 2-core machine (eigh of 1325 x 1325: 0.5 s against 4 s).
SINGLE_THREAD_MAX_ELEMENTS = 4_000_000
#: bytes of float64 per row chunk in the numpy one-pass kernels.
_CHUNK_BYTES = 64 * 2**20

_SPACE = ("lat", "lon")
_SAMPLE = ("member", "time")


# ------------------------------------------------------------------------------ result object


@dataclass(frozen=True)
class EOFResult:
    """A fitted EOF basis; hold it, save it and project any dataset on it.

    Attributes
    ----------
    patterns : DataArray (mode, lat, lon), field units per unit PC. Covariance (regression) maps
        of the fitting anomalies on the unit-variance PCs; NaN where the field is masked.
    pcs : DataArray (member, time, mode), 1. Unit variance (ddof=1) on the fitting data.
    eigenvalues : DataArray (mode,), field units squared. Variance of the weighted field along
        each EOF (ddof=1).
    variance_fraction : DataArray (mode,), 1. Eigenvalue over the total weighted variance.
    eigenvalue_error, variance_fraction_error : DataArray (mode,). North et al. (1982) errors.
    separable : DataArray (mode,), bool. False where the error bar overlaps a neighbour's.
    n_effective : DataArray (mode,), 1. Effective number of independent samples.
    lag1_autocorrelation : DataArray (mode,), 1. Pooled within-block lag-1 autocorrelation r1.
    eofs : DataArray (mode, lat, lon), 1. Unit-norm eigenvectors of the weighted covariance.
    weights : DataArray (lat, lon), 1. Weights applied to the data.
    mean : DataArray (lat, lon), field units. Pooled mean removed before the analysis.
    total_variance : float, field units squared. Total weighted variance (ddof=1).
    n_samples : int. Member x time samples pooled.
    method : str. Solver and parameters, as in the outputs' ``method`` attribute.
    """

    patterns: xr.DataArray
    pcs: xr.DataArray
    eigenvalues: xr.DataArray
    variance_fraction: xr.DataArray
    eigenvalue_error: xr.DataArray
    variance_fraction_error: xr.DataArray
    separable: xr.DataArray
    n_effective: xr.DataArray
    lag1_autocorrelation: xr.DataArray
    eofs: xr.DataArray
    weights: xr.DataArray
    mean: xr.DataArray
    total_variance: float
    n_samples: int
    method: str

    @property
    def n_modes(self) -> int:
        return int(self.eigenvalues.sizes["mode"])

    def project(self, anoms: xr.DataArray, *, missing: Missing = "raise") -> xr.DataArray:
        """PCs of any dataset on these EOFs, in the fitting data's units (same normalization).

        The fitting data's pooled mean is removed (not the dataset's own), so a shift of the mean
        state shows as a shifted PC mean. Projecting the fitting data returns `pcs`.

        Parameters
        ----------
        anoms : DataArray (member, time, lat, lon) covering the fitted grid points; latitude
            order and longitude convention (0..360 or -180..180) do not matter.
        missing : "raise" (default) raises `MissingValueError` when a value is missing at a
            fitted grid point; "fill" takes it as a zero anomaly.

        Returns
        -------
        DataArray (member, time, mode), 1.
        """
        data = _prepare(anoms, "anoms")
        data = _match_grid(data, self.eofs)
        valid = np.isfinite(self.eofs.isel(mode=0).values).ravel()
        vectors = _stack_space(self.eofs, valid)  # (p, k)
        w = self.weights.values.ravel()[valid]
        mean = self.mean.values.ravel()[valid]
        raw, bad = _project_matrix(_sample_matrix(data), valid, mean, vectors * w[:, None])
        if bad.any() and missing != "fill":
            raise _missing_error("anoms", int(bad.sum()), "samples with missing values")
        pcs = raw / np.sqrt(self.eigenvalues.values)[None, :]
        return _pcs_array(pcs, data, self.eigenvalues["mode"], self.method)

    def with_signs(self, signs) -> EOFResult:
        """A copy with each mode multiplied by +1 or -1 (a sign per mode, in mode order)."""
        s = xr.DataArray(
            np.asarray(signs, dtype=float), dims="mode", coords={"mode": self.eigenvalues["mode"]}
        )
        return dataclasses.replace(
            self,
            patterns=_keep_attrs(self.patterns * s, self.patterns),
            pcs=_keep_attrs(self.pcs * s, self.pcs),
            eofs=_keep_attrs(self.eofs * s, self.eofs),
        )


# ------------------------------------------------------------------------------------ fitting


def fit(
    anoms: xr.DataArray,
    *,
    n_modes: int = 10,
    weights: str | xr.DataArray | None = "sqrt_coslat",
    method: Method = "auto",
    missing: Missing = "raise",
) -> EOFResult:
    """Fit the leading EOFs of anomalies pooled over members and time.

    Parameters
    ----------
    anoms : DataArray (member, time, lat, lon), canonical form, anomalies in field units.
        Dask-backed data are reduced chunk by chunk by the fast path.
    n_modes : number of modes returned (one more is computed to judge separability).
    weights : "sqrt_coslat" (default; sqrt(cos(latitude)), common practice), None for no
        weighting, or a DataArray on (lat,) or (lat, lon) of weights applied to the data.
    method : "exact" (SVD through `eofs`; loads the data), "fast" (one-pass cross-product or
        Gram matrix and `scipy.linalg.eigh`; the Gram matrix also loads the data, and is used
        only when there are fewer samples than grid points) or "auto" (exact while
        samples x points <= AUTO_EXACT_MAX_VALUES and the data are in memory, else fast).
    missing : grid points missing at every sample (a land mask) are always left out of the
        analysis (NaN in the patterns). Missing values that vary in time raise
        `MissingValueError` with "raise" (default); "fill" takes them as zero anomalies.

    Returns
    -------
    EOFResult
    """
    data = _prepare(anoms, "anoms")
    if method not in ("auto", "exact", "fast"):
        raise ConfigError.make(
            "method", repr(method), "'auto', 'exact' or 'fast'", "pick one of the three solvers"
        )
    if missing not in ("raise", "fill"):
        raise ConfigError.make(
            "missing",
            repr(missing),
            "'raise' or 'fill'",
            "use missing='fill' to take missing values as zero anomalies",
        )
    w_grid = _weights(data, weights)
    x = _sample_matrix(data)
    n, p = x.shape
    lazy = _is_dask(x)
    if method == "auto":
        method = "exact" if (not lazy and n * p <= AUTO_EXACT_MAX_VALUES) else "fast"

    # One pass: sums, missing counts and (when the space is the small side) the cross-products.
    # The Gram matrix serves when there are fewer samples than grid points (before masking).
    use_gram = method == "fast" and p > n
    total, xtx, n_missing = _moments(x, cross=(method == "fast" and not use_gram))
    valid = n_missing < n
    varying = int(((n_missing > 0) & valid).sum())
    if varying and missing != "fill":
        raise _missing_error("anoms", varying, "grid points with missing values that vary in time")
    p_valid = int(valid.sum())
    max_modes = min(n - 1, p_valid)
    if not isinstance(n_modes, (int, np.integer)) or not 1 <= n_modes <= max_modes:
        raise ConfigError.make(
            "n_modes",
            repr(n_modes),
            f"an integer from 1 to {max_modes} (samples - 1 or points)",
            "ask for fewer modes",
        )
    k = min(n_modes + 1, max_modes)
    mean = total[valid] / n
    w = w_grid.values.ravel()[valid]

    if method == "exact":
        vectors, eigenvalues, pcs, patterns, total_var = _solve_exact(x, valid, mean, w, k)
        solver = "singular value decomposition of the weighted data (eofs.standard.Eof)"
    elif use_gram:
        vectors, eigenvalues, pcs, patterns, total_var = _solve_gram(x, valid, mean, w, k)
        solver = "eigen-decomposition of the samples x samples Gram matrix (scipy.linalg.eigh)"
    else:
        cov = (xtx[np.ix_(valid, valid)] - n * np.outer(mean, mean)) / (n - 1)
        vectors, eigenvalues, total_var = _eig_covariance(cov, w, k)
        raw, _ = _project_matrix(x, valid, mean, vectors * w[:, None])
        pcs = raw / np.sqrt(eigenvalues)[None, :]
        patterns = cov @ (vectors * w[:, None]) / np.sqrt(eigenvalues)[None, :]
        solver = (
            "one-pass space x space covariance, chunk by chunk, and its leading "
            "eigenvectors (scipy.linalg.eigh)"
        )

    # Sign: largest-magnitude element of each eigenvector positive (common practice).
    signs = np.sign(vectors[np.abs(vectors).argmax(axis=0), np.arange(vectors.shape[1])])
    signs[signs == 0] = 1.0
    vectors, pcs, patterns = vectors * signs, pcs * signs, patterns * signs

    r1, n_eff = _effective_samples(pcs, block_ids(data).values)
    error = eigenvalues * np.sqrt(2.0 / n_eff)
    separable = _separable(eigenvalues, error)

    weight_text = (
        "none"
        if weights is None
        else ("sqrt(cos(latitude))" if isinstance(weights, str) else "user-given")
    )
    method_text = (
        f"EOF analysis, {n} samples pooled over member and time, area weights {weight_text}, "
        f"{solver}; PCs unit variance (ddof=1); North et al. (1982) errors with N_eff from the "
        f"within-block lag-1 autocorrelation (Bretherton et al. 1999)"
    )
    units = data.attrs.get("units", "unknown")
    return _build_result(
        data,
        valid,
        w_grid,
        mean,
        vectors[:, :n_modes],
        eigenvalues,
        pcs[:, :n_modes],
        patterns[:, :n_modes],
        error,
        separable,
        r1,
        n_eff,
        total_var,
        n_modes,
        method_text,
        units,
    )


# ---------------------------------------------------------------------------- numpy kernels


def _is_dask(x) -> bool:
    return type(x).__module__.startswith("dask")


def _row_chunks(n: int, p: int):
    step = max(1, _CHUNK_BYTES // (8 * max(p, 1)))
    for start in range(0, n, step):
        yield slice(start, min(n, start + step))


def _moments(x, *, cross: bool) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
    """Column sums, cross-product matrix X^T X (if `cross`) and missing counts, in one pass.

    Missing values count as zero in the sums and products. (n, p) -> (p,), (p, p), (p,).
    """
    n, p = x.shape
    if _is_dask(x):
        import dask

        # one task per row chunk running this function on it, then a tree of sums
        return dask.compute(_tree_sum(_per_row_chunk(x, _moments, cross=cross)))[0]
    total = np.zeros(p)
    count = np.zeros(p, dtype=np.int64)
    xtx = np.zeros((p, p)) if cross else None
    for rows in _row_chunks(n, p):
        block = np.asarray(x[rows], dtype=np.float64)
        nan = np.isnan(block)
        if nan.any():
            count += nan.sum(axis=0)
            block = np.where(nan, 0.0, block)
        total += block.sum(axis=0)
        if cross:
            xtx += block.T @ block  # numpy calls BLAS syrk for a.T @ a
    return total, xtx, count


def _project_matrix(
    x, valid: np.ndarray, mean: np.ndarray, vectors: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """(x[:, valid] - mean) @ vectors with missing values taken as 0, and which rows had any.

    x (n, p), valid (p,) bool, mean (q,), vectors (q, k) with q valid columns -> (n, k), (n,).
    Row chunk by row chunk (or dask chunk by chunk): the data are never copied whole.
    """
    if _is_dask(x):
        import dask

        # one task per row chunk running this function on it
        parts = dask.compute(*_per_row_chunk(x, _project_matrix, valid, mean, vectors))
        return np.concatenate([o for o, _ in parts]), np.concatenate([b for _, b in parts])
    offset = mean @ vectors
    n = x.shape[0]
    out = np.empty((n, vectors.shape[1]))
    bad = np.zeros(n, dtype=bool)
    every = bool(valid.all())
    for rows in _row_chunks(n, x.shape[1]):
        block = np.asarray(x[rows] if every else x[rows][:, valid], dtype=np.float64)
        nan = np.isnan(block)
        if nan.any():
            bad[rows] = nan.any(axis=1)
            block = np.where(nan, 0.0, block)
        out[rows] = block @ vectors - offset
    return out, bad


def _per_row_chunk(x, func, *args, **kwargs) -> list:
    """``func(chunk, *args, **kwargs)`` as one dask task per row chunk of the dask array x,
    all columns in each chunk: the numpy kernel above runs in each task, rather than a graph
    of several tasks per chunk (isnan, where, astype, matmul, ...), whose per-task overhead
    on a cluster measured as much as the arithmetic."""
    import dask

    blocks = x.rechunk({1: -1}).to_delayed().ravel()
    return [dask.delayed(func, pure=True)(b, *args, **kwargs) for b in blocks]


def _tree_sum(parts: list, split_every: int = 4):
    """Elementwise sum of delayed tuples of arrays (None entries stay None), as a tree."""
    import dask

    def add(*terms):
        return tuple(None if t[0] is None else sum(t[1:], t[0]) for t in zip(*terms, strict=True))

    while len(parts) > 1:
        parts = [
            dask.delayed(add, pure=True)(*parts[i : i + split_every])
            for i in range(0, len(parts), split_every)
        ]
    return parts[0]


def _dense_centred(x, valid: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """The valid columns in memory, float64, centred, time-varying gaps as zero anomalies."""
    dense = np.asarray(x[:, valid] if not _is_dask(x) else x[:, valid].compute(), dtype=np.float64)
    return np.where(np.isnan(dense), 0.0, dense) - mean[None, :]


def _threads(size: int):
    """One BLAS thread for small decompositions (see SINGLE_THREAD_MAX_ELEMENTS)."""
    return threadpool_limits(1 if size < SINGLE_THREAD_MAX_ELEMENTS else None)


def _eig_covariance(cov: np.ndarray, w: np.ndarray, k: int):
    """Leading k eigenpairs of the weighted covariance w cov w, largest first, and its trace."""
    cov_w = cov * w[:, None] * w[None, :]
    p = cov_w.shape[0]
    with _threads(cov_w.size):
        values, vectors = scipy.linalg.eigh(cov_w, subset_by_index=[p - k, p - 1])
    order = np.argsort(values)[::-1]
    return vectors[:, order], values[order], float(np.trace(cov_w))


def _solve_gram(x, valid, mean, w, k):
    """Fewer samples than points: eigen-decomposition of the Gram matrix (n, n)."""
    centred = _dense_centred(x, valid, mean)
    weighted = centred * w[None, :]
    n = weighted.shape[0]
    gram = weighted @ weighted.T / (n - 1)
    with _threads(gram.size):
        values, u = scipy.linalg.eigh(gram, subset_by_index=[n - k, n - 1])
    order = np.argsort(values)[::-1]
    values, u = values[order], u[:, order]
    pcs = u * np.sqrt(n - 1)  # unit variance, ddof=1
    vectors = weighted.T @ u / np.sqrt(values * (n - 1))[None, :]
    patterns = centred.T @ pcs / (n - 1)
    return vectors, values, pcs, patterns, float(np.trace(gram))


def _solve_exact(x, valid, mean, w, k):
    """SVD of the weighted data through eofs (its default centring, ddof=1)."""
    from eofs.standard import Eof

    centred = _dense_centred(x, valid, mean)
    n = centred.shape[0]
    with _threads(centred.size):
        solver = Eof(centred * w[None, :], center=True, ddof=1)
    vectors = solver.eofs(eofscaling=0, neofs=k).T
    values = solver.eigenvalues(neigs=k)
    pcs = solver.pcs(pcscaling=1, npcs=k)
    patterns = centred.T @ pcs / (n - 1)
    return vectors, values, pcs, patterns, float(solver.totalAnomalyVariance())


def _effective_samples(pcs: np.ndarray, blocks: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pooled within-block lag-1 autocorrelation and N_eff per mode (see module docstring).

    pcs (member * time, k) in member-major order; blocks (member, time) ints.
    """
    n_member, n_time = blocks.shape
    series = pcs.reshape(n_member, n_time, -1)
    same = blocks[:, 1:] == blocks[:, :-1]  # consecutive samples inside one block
    lagged = (series[:, 1:] * series[:, :-1] * same[..., None]).sum(axis=(0, 1))
    r1 = lagged / (series**2).sum(axis=(0, 1)) if same.any() else np.zeros(pcs.shape[1])
    r1 = np.clip(r1, 0.0, 0.999)
    sizes = np.bincount(blocks.ravel())
    sizes = sizes[sizes > 0]
    per_block = sizes[:, None] * ((1 - r1) / (1 + r1))[None, :]
    return r1, np.maximum(per_block, 1.0).sum(axis=0)


def _separable(values: np.ndarray, error: np.ndarray) -> np.ndarray:
    """North et al. (1982) rule: error bars of neighbouring eigenvalues must not overlap."""
    low, high = values - error, values + error
    ok = np.ones(values.size, dtype=bool)
    ok[:-1] &= low[:-1] > high[1:]
    ok[1:] &= low[:-1] > high[1:]
    return ok


# ------------------------------------------------------------------------------ xarray layer


def _prepare(anoms: xr.DataArray, what: str) -> xr.DataArray:
    """Check dims, order them (member, time, lat, lon), lat ascending, lon in [-180, 180)."""
    if not isinstance(anoms, xr.DataArray):
        raise InputError.make(
            what, type(anoms).__name__, "an xarray DataArray", "pass one variable, e.g. ds['z500']"
        )
    missing = [d for d in ("time", *_SPACE) if d not in anoms.dims]
    if missing:
        raise CoordinateError.make(
            f"{what} dims",
            str(tuple(anoms.dims)),
            "dims (member, time, lat, lon)",
            "open the data with westerlies.data.open_dataset",
        )
    da = anoms if "member" in anoms.dims else anoms.expand_dims(member=[0])
    extra = [d for d in da.dims if d not in (*_SAMPLE, *_SPACE)]
    too_big = [d for d in extra if da.sizes[d] > 1]
    if too_big:
        raise CoordinateError.make(
            f"{what} dims",
            f"extra dims {too_big}",
            "only member, time, lat and lon",
            "select one level or variable first, e.g. .sel(plev=500)",
        )
    da = da.squeeze(extra, drop=True).transpose(*_SAMPLE, *_SPACE)
    lon = da["lon"].values
    wrapped = (lon + 180.0) % 360.0 - 180.0
    if not np.array_equal(wrapped, lon):
        da = da.assign_coords(lon=wrapped)
    if np.any(np.diff(da["lon"].values) <= 0):
        da = da.sortby("lon")
    if np.any(np.diff(da["lat"].values) <= 0):
        da = da.sortby("lat")
    return da


def _weights(data: xr.DataArray, weights) -> xr.DataArray:
    lat = data["lat"]
    grid = xr.ones_like(lat * data["lon"], dtype=float)
    if weights is None:
        out = grid
    elif isinstance(weights, str) and weights == "sqrt_coslat":
        out = np.sqrt(np.cos(np.deg2rad(lat)).clip(0.0, None)) * grid
    elif (
        isinstance(weights, xr.DataArray)
        and set(weights.dims) <= set(_SPACE)
        and all(d in weights.coords for d in weights.dims)
    ):
        given = _prepare_weights(weights)
        given = given.reindex(
            {d: data[d].values for d in given.dims}, method="nearest", tolerance=1e-3
        )
        out = given.assign_coords({d: data[d] for d in given.dims}) * grid
        if not np.all(np.isfinite(out.values)) or (out.values < 0).any():
            raise ConfigError.make(
                "weights",
                "negative or missing values",
                "finite weights >= 0",
                "fix the weights array",
            )
    else:
        raise ConfigError.make(
            "weights",
            repr(weights)[:60],
            "'sqrt_coslat', None or a DataArray on (lat,) or (lat, lon) with coordinates",
            "pass one of those",
        )
    out = out.transpose(*_SPACE).astype(float)
    out.attrs = {
        "units": "1",
        "long_name": "weights applied to the data",
        "method": "sqrt(cos(latitude))" if isinstance(weights, str) else "given",
    }
    return out


def _prepare_weights(weights: xr.DataArray) -> xr.DataArray:
    if "lon" in weights.dims:
        weights = weights.assign_coords(lon=(weights["lon"] + 180.0) % 360.0 - 180.0)
    return weights


def _sample_matrix(data: xr.DataArray):
    """(member, time, lat, lon) -> (member * time, lat * lon), numpy or dask, not loaded."""
    n = data.sizes["member"] * data.sizes["time"]
    p = data.sizes["lat"] * data.sizes["lon"]
    return data.data.reshape(n, p)


def _stack_space(da: xr.DataArray, valid: np.ndarray) -> np.ndarray:
    """(mode, lat, lon) -> (valid points, mode)."""
    return da.values.reshape(da.sizes["mode"], -1)[:, valid].T


def _match_grid(data: xr.DataArray, template: xr.DataArray) -> xr.DataArray:
    """The template's grid points taken from `data` by coordinate value."""
    out = data
    for dim in _SPACE:
        want = template[dim].values
        have = data[dim].values
        if have.size == want.size and np.allclose(have, want, atol=1e-4):
            out = out.assign_coords({dim: want})
            continue
        spacing = np.median(np.abs(np.diff(want))) if want.size > 1 else 1.0
        try:
            out = out.sel({dim: want}, method="nearest", tolerance=spacing * 1e-3)
        except KeyError:
            raise GridError.make(
                f"anoms {dim}",
                f"{have.size} points from {have.min():g} to {have.max():g}",
                f"every fitted {dim} point ({want.size} from {want.min():g} to {want.max():g})",
                "regrid the data to the grid the EOFs were fitted on",
            ) from None
        out = out.assign_coords({dim: want})
    return out


def _missing_error(what: str, count: int, kind: str) -> MissingValueError:
    return MissingValueError.make(
        what,
        f"{count} {kind}",
        "no missing values, or missing values constant in time (a land mask)",
        "fill the gaps, or pass missing='fill' to take them as zero anomalies",
    )


def _keep_attrs(new: xr.DataArray, old: xr.DataArray) -> xr.DataArray:
    new.attrs = dict(old.attrs)
    return new


def _sample_coords(data: xr.DataArray) -> dict:
    return {name: coord for name, coord in data.coords.items() if set(coord.dims) <= set(_SAMPLE)}


def _pcs_array(pcs: np.ndarray, data: xr.DataArray, mode, method: str) -> xr.DataArray:
    out = xr.DataArray(
        pcs.reshape(data.sizes["member"], data.sizes["time"], -1),
        dims=(*_SAMPLE, "mode"),
        coords={**_sample_coords(data), "mode": mode},
        name="pc",
    )
    out.attrs = {
        "units": "1",
        "long_name": "principal component (unit variance on fitting data)",
        "method": method,
    }
    return out


def _build_result(
    data,
    valid,
    w_grid,
    mean,
    vectors,
    eigenvalues,
    pcs,
    patterns,
    error,
    separable,
    r1,
    n_eff,
    total_var,
    n_modes,
    method,
    units,
) -> EOFResult:
    n_lat, n_lon = data.sizes["lat"], data.sizes["lon"]
    space = {"lat": data["lat"], "lon": data["lon"]}
    mode = xr.DataArray(
        np.arange(1, n_modes + 1),
        dims="mode",
        name="mode",
        attrs={"long_name": "EOF mode number (1 = leading)", "units": "1"},
    )

    def grid(columns: np.ndarray, name: str, unit: str, long_name: str) -> xr.DataArray:
        full = np.full((columns.shape[1], n_lat * n_lon), np.nan)
        full[:, valid] = columns.T
        return xr.DataArray(
            full.reshape(-1, n_lat, n_lon),
            dims=("mode", *_SPACE),
            coords={"mode": mode[: columns.shape[1]], **space},
            name=name,
            attrs={"units": unit, "long_name": long_name, "method": method},
        )

    def per_mode(values, name: str, unit: str, long_name: str) -> xr.DataArray:
        return xr.DataArray(
            np.asarray(values)[:n_modes],
            dims="mode",
            coords={"mode": mode},
            name=name,
            attrs={"units": unit, "long_name": long_name, "method": method},
        )

    mean_grid = grid(mean[:, None], "mean", units, "pooled mean removed").isel(mode=0, drop=True)
    squared = f"({units})2" if units not in ("1", "") else "1"
    return EOFResult(
        patterns=grid(
            patterns,
            "eof_pattern",
            units,
            "EOF as covariance map of the field on the unit-variance PC",
        ),
        pcs=_pcs_array(pcs, data, mode, method),
        eigenvalues=per_mode(
            eigenvalues, "eigenvalue", squared, "variance of the weighted field along the EOF"
        ),
        variance_fraction=per_mode(
            eigenvalues / total_var, "variance_fraction", "1", "fraction of total weighted variance"
        ),
        eigenvalue_error=per_mode(
            error,
            "eigenvalue_error",
            squared,
            "North et al. (1982) sampling error of the eigenvalue",
        ),
        variance_fraction_error=per_mode(
            error / total_var,
            "variance_fraction_error",
            "1",
            "North et al. (1982) sampling error of the fraction",
        ),
        separable=per_mode(
            separable, "separable", "1", "error bar clear of both neighbours (North et al. 1982)"
        ),
        n_effective=per_mode(n_eff, "n_effective", "1", "effective number of samples"),
        lag1_autocorrelation=per_mode(
            r1, "lag1_autocorrelation", "1", "pooled within-block lag-1 autocorrelation of the PC"
        ),
        eofs=grid(vectors, "eof", "1", "unit-norm eigenvector of the weighted covariance"),
        weights=w_grid,
        mean=mean_grid,
        total_variance=float(total_var),
        n_samples=int(pcs.shape[0]),
        method=method,
    )
