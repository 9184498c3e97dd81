"""Index memory: autocorrelation and cross-correlation functions, e-folding times.

Lagged pairs are formed inside one block only (one member in one season, DESIGN.md principle
2): a pair (t, t + k) needs both days valid, in the same block, and k time steps apart in time,
so missing days and block edges never create false pairs. Sums over pairs are pooled over all
blocks.

Estimator (common practice; statsmodels `acf` uses the same forms on one series):

    r(k) = [C(k) / P(k)] / [C(0) / N]      (adjusted=True, default)
    r(k) = C(k) / C(0)                     (adjusted=False)

with C(k) the sum over the P(k) lagged pairs of (x_t - m)(x_{t+k} - m), N the number of valid
days and m the mean over all days of all blocks (demean="global", default) or each block's own
mean (demean="block"). The adjusted form is the default because blocks are short (about 90
days for a winter): dividing by N would shrink r(30) by a third through the pair count alone.
Removing each block's mean instead takes out interannual and inter-member variability and
biases r(k) low by about 1/n for n-day blocks.

Lags are in time steps of the data: days for daily data (and for data without dates, which are
taken to be daily).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np
import xarray as xr

from . import timeaxis
from .errors import ConfigError, InputError, InputWarning
from .resampling import _as_member_time, _pooled_values, _ratio, block_array

__all__ = ["Autocorrelation", "EfoldingTime", "acf", "ccf", "ccf_interval", "efolding_time"]

Demean = Literal["global", "block"]


def _check_lag(max_lag: int) -> int:
    if int(max_lag) != max_lag or max_lag < 0:
        raise ConfigError.make("max_lag", repr(max_lag), "a non-negative integer", "use 30")
    return int(max_lag)


def _check_demean(demean: str) -> None:
    if demean not in ("global", "block"):
        raise ConfigError.make(
            "demean", repr(demean), "'global' or 'block'", "use demean='global' (default)"
        )


def _lagged_sums(a: np.ndarray, b: np.ndarray, lag: int) -> np.ndarray:
    """Per-row sums over pairs (a_t, b_{t+lag}), both valid: [pairs, sum a, sum b, sum ab].

    a, b : (n_blocks, n_steps) block layouts with NaN for missing days; lag may be negative.
    """
    n = a.shape[1]
    if abs(lag) >= n:
        return np.zeros((a.shape[0], 4))
    if lag >= 0:
        left, right = a[:, : n - lag], b[:, lag:]
    else:
        left, right = a[:, -lag:], b[:, : n + lag]
    ok = np.isfinite(left) & np.isfinite(right)
    left, right = np.where(ok, left, 0.0), np.where(ok, right, 0.0)
    return np.stack([ok.sum(1), left.sum(1), right.sum(1), (left * right).sum(1)], axis=1)


def _centre_blocks(a: np.ndarray) -> np.ndarray:
    """Remove each block's (row's) own mean over valid days."""
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        means = np.nanmean(a, axis=1, keepdims=True)
    return a - np.nan_to_num(means)


def _correlation(pairs: np.ndarray, ma, mb, c0a, c0b, na, nb, adjusted: bool) -> np.ndarray:
    """r(k) from pair sums (..., L, 4) and the zero-lag moments (broadcast over L)."""
    count, sa, sb, sab = (pairs[..., i] for i in range(4))
    ck = sab - mb * sa - ma * sb + ma * mb * count
    if adjusted:
        return _ratio(_ratio(ck, count), np.sqrt(_ratio(c0a, na) * _ratio(c0b, nb)))
    return _ratio(ck, np.sqrt(c0a * c0b))


@dataclass(frozen=True)
class Autocorrelation:
    """Block statistic: the pooled ACF at given lags (see the module docstring for the form).

    Sums per block, demean="global": [N, sum x, sum x^2] then, for each lag, [pairs, sum x_t,
    sum x_{t+k}, sum x_t x_{t+k}] (x shifted by the pooled mean for precision). demean="block":
    each block's own centred sums [N, C(0)] then [pairs, C(k)] per lag. Both are additive, so a
    resampled dataset's mean is removed correctly.
    """

    lags: tuple[int, ...] = (1,)
    demean: Demean = "global"
    adjusted: bool = True
    shift: float = 0.0
    name: str = "acf"
    long_name: str = "autocorrelation"
    units: str = "1"

    @property
    def dim(self) -> str | None:
        return "lag" if len(self.lags) > 1 else None

    @property
    def coords(self) -> tuple[int, ...]:
        return self.lags

    def prepare(self, *datasets: xr.DataArray) -> Autocorrelation:
        pooled = _pooled_values(*datasets)
        return replace(self, shift=float(pooled.mean()) if pooled.size else 0.0)

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        a = block_array(x) - self.shift
        if self.demean == "block":
            a = _centre_blocks(a)
        ok = np.isfinite(a)
        a0 = np.where(ok, a, 0.0)
        head = np.stack([ok.sum(1), a0.sum(1), (a0 * a0).sum(1)], axis=1)
        pairs = np.stack([_lagged_sums(a, a, k) for k in self.lags], axis=1)  # (blocks, L, 4)
        if self.demean == "block":
            # Already centred per block: C(0) = sum x^2, C(k) = sum x_t x_{t+k}.
            return np.concatenate([head[:, [0, 2]], pairs[..., [0, 3]].reshape(len(a), -1)], 1)
        return np.concatenate([head, pairs.reshape(len(a), -1)], axis=1)

    def finish(self, sums: np.ndarray) -> np.ndarray:
        n_lags = len(self.lags)
        if self.demean == "block":
            n, c0 = sums[..., 0:1], sums[..., 1:2]
            rest = sums[..., 2:].reshape(*sums.shape[:-1], n_lags, 2)
            pairs = np.stack(
                [
                    rest[..., 0],
                    np.zeros_like(rest[..., 0]),
                    np.zeros_like(rest[..., 0]),
                    rest[..., 1],
                ],
                axis=-1,
            )
            mean = 0.0
        else:
            n, s1, s2 = sums[..., 0:1], sums[..., 1:2], sums[..., 2:3]
            pairs = sums[..., 3:].reshape(*sums.shape[:-1], n_lags, 4)
            mean = _ratio(s1, n)
            c0 = s2 - mean * s1
        r = _correlation(pairs, mean, mean, c0, c0, n, n, self.adjusted)
        return r if n_lags > 1 else r[..., 0]


def _efolding(r: np.ndarray, lags: np.ndarray) -> np.ndarray:
    """First lag where r(lag) < 1/e, linearly interpolated; inf if r stays above. (..., L)."""
    threshold = np.exp(-1.0)
    below = r < threshold
    j = np.argmax(below, axis=-1)[..., None]
    found = below.any(axis=-1)
    j = np.maximum(j, 1)
    r_before = np.take_along_axis(r, j - 1, -1)[..., 0]
    r_after = np.take_along_axis(r, j, -1)[..., 0]
    lag_before, lag_after = lags[j - 1][..., 0], lags[j][..., 0]
    frac = _ratio(r_before - threshold, r_before - r_after)
    value = lag_before + frac * (lag_after - lag_before)
    return np.where(found, value, np.inf)


@dataclass(frozen=True)
class EfoldingTime:
    """Block statistic: the e-folding time of the pooled ACF (lags 0..max_lag), in time steps.

    inf when the ACF stays above 1/e up to `max_lag` (raise `max_lag`). Sums are those of
    `Autocorrelation` for lags 0..max_lag.
    """

    max_lag: int = 30
    demean: Demean = "global"
    adjusted: bool = True
    acf: Autocorrelation | None = None
    name: str = "efolding"
    long_name: str = "e-folding time of the autocorrelation"
    units: str = "days"

    def _acf(self) -> Autocorrelation:
        return self.acf or Autocorrelation(
            lags=tuple(range(self.max_lag + 1)), demean=self.demean, adjusted=self.adjusted
        )

    def prepare(self, *datasets: xr.DataArray) -> EfoldingTime:
        return replace(self, acf=self._acf().prepare(*datasets))

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        return self._acf().per_block(x)

    def finish(self, sums: np.ndarray) -> np.ndarray:
        return _efolding(self._acf().finish(sums), np.arange(self.max_lag + 1))


def _lag_units(x: xr.DataArray) -> str:
    if "time" not in x.coords or not timeaxis.has_dates(x["time"]) or x.sizes["time"] < 2:
        return "days"
    kind = timeaxis.time_kind(x["time"])
    return {"daily": "days", "monthly": "months"}.get(kind, "time steps")


def _index_name(x: xr.DataArray) -> str:
    return str(x.name) if x.name is not None else "index"


def acf(
    index: xr.DataArray,
    max_lag: int = 30,
    *,
    demean: Demean = "global",
    adjusted: bool = True,
) -> xr.DataArray:
    """Autocorrelation function of an index, pooled over blocks.

    Parameters
    ----------
    index : DataArray (member, time), with or without dates; NaN marks missing days.
    max_lag : largest lag, in time steps (days for daily data).
    demean : "global" removes the mean over all days of all blocks; "block" each block's own.
    adjusted : divide lagged sums by the number of pairs (True) or of days (False).

    Returns
    -------
    DataArray on `lag` (0..max_lag), dimensionless.
    """
    max_lag = _check_lag(max_lag)
    _check_demean(demean)
    index = _as_member_time(index, "acf: index")
    stat = Autocorrelation(tuple(range(max_lag + 1)), demean, adjusted).prepare(index)
    values = np.atleast_1d(stat.finish(stat.per_block(index).sum(0)))
    lag = xr.DataArray(np.arange(max_lag + 1), dims="lag", attrs={"units": _lag_units(index)})
    return xr.DataArray(
        values,
        dims="lag",
        coords={"lag": lag},
        name=f"{_index_name(index)}_acf",
        attrs={
            "long_name": f"autocorrelation of {_index_name(index)}",
            "units": "1",
            "method": f"pooled within-block lagged products, demean={demean}, adjusted={adjusted}",
        },
    )


def efolding_time(
    index: xr.DataArray,
    max_lag: int = 30,
    *,
    demean: Demean = "global",
    adjusted: bool = True,
) -> xr.DataArray:
    """Lag at which the pooled ACF first falls below 1/e, linearly interpolated between lags.

    Returns a scalar DataArray in time steps (days for daily data). NaN, with an
    `InputWarning`, when the ACF stays above 1/e up to `max_lag`. For an AR(1) series with
    coefficient phi the value is -1 / ln(phi).
    """
    r = acf(index, max_lag, demean=demean, adjusted=adjusted)
    value = float(_efolding(r.values, r["lag"].values))
    if np.isinf(value):
        warnings.warn(
            f"efolding_time: the ACF stays above 1/e up to lag {max_lag}; returning NaN "
            "(raise max_lag)",
            InputWarning,
            stacklevel=2,
        )
        value = np.nan
    return xr.DataArray(
        value,
        name=f"{_index_name(index)}_efolding_time",
        attrs={
            "long_name": f"e-folding time of the autocorrelation of {_index_name(index)}",
            "units": r["lag"].attrs["units"],
            "method": "first crossing of 1/e by the ACF, linear interpolation; "
            + r.attrs["method"],
        },
    )


def _ccf_block_sums(la: np.ndarray, lb: np.ndarray, lags: np.ndarray, demean: Demean) -> np.ndarray:
    """Additive per-block sums of a CCF: (n_blocks, 6 + 4 L).

    Columns: [n_a, sum a, sum a^2, n_b, sum b, sum b^2], then [pairs, sum a_t, sum b_(t+k),
    sum a_t b_(t+k)] for each lag k. With demean="block" each block is centred first.
    """
    if demean == "block":
        la, lb = _centre_blocks(la), _centre_blocks(lb)
    moments = [
        np.isfinite(la).sum(1),
        np.nansum(la, 1),
        np.nansum(la**2, 1),
        np.isfinite(lb).sum(1),
        np.nansum(lb, 1),
        np.nansum(lb**2, 1),
    ]
    pairs = [_lagged_sums(la, lb, int(k)) for k in lags]  # each (n_blocks, 4)
    return np.concatenate([np.stack(moments, axis=1), *pairs], axis=1).astype(float)


def _ccf_finish(sums: np.ndarray, n_lags: int, adjusted: bool) -> np.ndarray:
    """The CCF (..., L) from summed block sums (..., 6 + 4 L): the global mean is removed."""
    na, sa, saa, nb, sb, sbb = (sums[..., i] for i in range(6))
    ma, mb = _ratio(sa, na), _ratio(sb, nb)
    c0a, c0b = saa - na * ma**2, sbb - nb * mb**2
    pairs = sums[..., 6:].reshape(*sums.shape[:-1], n_lags, 4)
    expand = (Ellipsis, None)
    return _correlation(
        pairs, ma[expand], mb[expand], c0a[expand], c0b[expand], na[expand], nb[expand], adjusted
    )


def ccf_interval(
    a: xr.DataArray,
    b: xr.DataArray,
    max_lag: int = 30,
    *,
    n_resamples: int = 1000,
    confidence: float = 0.95,
    seed: int | np.random.Generator = 0,
    demean: Demean = "global",
    adjusted: bool = True,
) -> xr.Dataset:
    """Block-bootstrap percentile interval of `ccf(a, b)` at every lag.

    Whole blocks are drawn with replacement (the same blocks for both indices) and every
    replicate is a weighted sum of the per-block sums (DESIGN.md principle 3).

    Returns
    -------
    Dataset on `lag` with `ccf`, `low` and `high` (dimensionless).
    """
    from .resampling import _percentile, bootstrap_weights

    value = ccf(a, b, max_lag, demean=demean, adjusted=adjusted)
    lags = value["lag"].values
    sums = _ccf_block_sums(
        block_array(_as_member_time(a, "ccf_interval: first index")),
        block_array(_as_member_time(b, "ccf_interval: second index")),
        lags,
        demean,
    )
    weights = bootstrap_weights(sums.shape[0], n_resamples, seed)
    replicates = _ccf_finish(weights @ sums, lags.size, adjusted)
    alpha = 1 - confidence
    low, high = _percentile(replicates, [alpha / 2, 1 - alpha / 2])
    method = (
        f"block bootstrap percentile interval, confidence={confidence}, "
        f"n_resamples={n_resamples}, blocks={sums.shape[0]}"
    )
    attrs = {"units": "1", "method": method}
    return xr.Dataset(
        {
            "ccf": value,
            "low": ("lag", low, {**attrs, "long_name": "lower end of the interval"}),
            "high": ("lag", high, {**attrs, "long_name": "upper end of the interval"}),
        }
    )


def ccf(
    a: xr.DataArray,
    b: xr.DataArray,
    max_lag: int = 30,
    *,
    demean: Demean = "global",
    adjusted: bool = True,
) -> xr.DataArray:
    """Cross-correlation function of two indices, pooled over blocks.

    Sign convention: ccf(a, b)[k] = corr(a_t, b_{t+k}). At positive lag `a` leads `b` (a peak at
    k > 0 means b follows a by k steps); at negative lag `b` leads. (statsmodels' ccf(x, y)[k]
    is corr(x_{t+k}, y_t), so ccf(a, b)[k] here matches statsmodels' ccf(b, a)[k] for k >= 0.)

    Parameters
    ----------
    a, b : DataArray (member, time) on the same members and times; NaN marks missing days.
    max_lag : largest lag in time steps; the result covers -max_lag..max_lag.
    demean, adjusted : as in `acf`; each index's variance is taken over its own valid days.

    Returns
    -------
    DataArray on `lag` (-max_lag..max_lag), dimensionless.
    """
    max_lag = _check_lag(max_lag)
    _check_demean(demean)
    a = _as_member_time(a, "ccf: first index")
    b = _as_member_time(b, "ccf: second index")
    if a.shape != b.shape or not all(
        np.array_equal(a[d].values, b[d].values) for d in ("member", "time") if d in a.coords
    ):
        raise InputError.make(
            "ccf",
            f"shapes {a.shape} and {b.shape} or different coordinates",
            "two indices on the same members and times",
            "align them first (xr.align)",
        )
    lags = np.arange(-max_lag, max_lag + 1)
    sums = _ccf_block_sums(block_array(a), block_array(b), lags, demean)
    values = _ccf_finish(sums.sum(0), lags.size, adjusted)
    lag = xr.DataArray(
        lags,
        dims="lag",
        attrs={"units": _lag_units(a), "long_name": "lag (positive: first index leads)"},
    )
    return xr.DataArray(
        values,
        dims="lag",
        coords={"lag": lag},
        name=f"{_index_name(a)}_{_index_name(b)}_ccf",
        attrs={
            "long_name": f"cross-correlation corr({_index_name(a)}(t), {_index_name(b)}(t+lag))",
            "units": "1",
            "method": f"pooled within-block lagged products, demean={demean}, adjusted={adjusted}",
        },
    )
