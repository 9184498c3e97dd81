"""Autocorrelation, cross-correlation and e-folding times (westerlies.timeseries)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from westerlies.errors import ConfigError, CoordinateError, InputWarning
from westerlies.resampling import block_array
from westerlies.seasons import select_season
from westerlies.timeseries import acf, ccf, efolding_time


def ar1(shape: tuple[int, ...], phi: float, rng: np.random.Generator) -> np.ndarray:
    """Stationary AR(1) along the last axis, unit innovations (synthetic: known truth)."""
    noise = rng.normal(size=shape)
    out = np.empty(shape)
    out[..., 0] = noise[..., 0] / np.sqrt(1 - phi**2)
    for t in range(1, shape[-1]):
        out[..., t] = phi * out[..., t - 1] + noise[..., t]
    return out


def undated(values: np.ndarray) -> xr.DataArray:
    values = np.atleast_2d(values)
    return xr.DataArray(values, dims=("member", "time"), name="index")


def daily_winters(members: int, rng: np.random.Generator, phi: float = 0.7) -> xr.DataArray:
    time = pd.date_range("2000-11-01", "2004-03-31", freq="D")
    data = ar1((members, time.size), phi, rng)
    da = xr.DataArray(data, dims=("member", "time"), coords={"time": time}, name="nao")
    return select_season(da, "DJF")


def test_acf_single_block_matches_statsmodels():
    # Independent library: statsmodels.tsa.stattools.acf (adjusted and unadjusted forms).
    from statsmodels.tsa.stattools import acf as sm_acf

    rng = np.random.default_rng(0)
    x = ar1((300,), 0.6, rng) + 3.0
    for adjusted in (True, False):
        ours = acf(undated(x), 20, adjusted=adjusted).values
        theirs = sm_acf(x, nlags=20, adjusted=adjusted, fft=False)
        np.testing.assert_allclose(ours, theirs, rtol=1e-10, atol=1e-12)


def test_ccf_matches_statsmodels_and_sign_convention():
    # Independent library: statsmodels.tsa.stattools.ccf(x, y)[k] = corr(x_{t+k}, y_t).
    from statsmodels.tsa.stattools import ccf as sm_ccf

    rng = np.random.default_rng(1)
    a = ar1((400,), 0.5, rng)
    b = np.roll(a, 3) + 0.5 * rng.normal(size=400)  # b follows a by 3 days: a leads
    result = ccf(undated(a), undated(b), 10)
    assert int(result.idxmax("lag")) == 3  # positive lag: first index leads
    positive = result.sel(lag=slice(0, 10)).values
    negative = result.sel(lag=slice(0, -10, -1)).values
    np.testing.assert_allclose(positive, sm_ccf(b, a, adjusted=True, fft=False)[:11], rtol=1e-10)
    np.testing.assert_allclose(negative, sm_ccf(a, b, adjusted=True, fft=False)[:11], rtol=1e-10)


def brute_force_acf(da: xr.DataArray, lag: int) -> float:
    """Direct definition: all pairs in one block, `lag` days apart, both valid (global mean)."""
    x = da.transpose("member", "time").values
    days = (da["time"].values - da["time"].values[0]) / np.timedelta64(1, "D")
    season = da["season_year"].values
    m = np.nanmean(x)
    total, count = 0.0, 0
    for member in range(x.shape[0]):
        for i in range(x.shape[1]):
            for j in range(i, min(i + lag + 2, x.shape[1])):
                same = season[i] == season[j] and days[j] - days[i] == lag
                if same and np.isfinite(x[member, i]) and np.isfinite(x[member, j]):
                    total += (x[member, i] - m) * (x[member, j] - m)
                    count += 1
    variance = np.nanmean((x - m) ** 2)
    return total / count / variance


def test_acf_pairs_only_inside_blocks_and_across_no_gap():
    # Analytic definition (module docstring), computed by brute force over explicit pairs.
    rng = np.random.default_rng(2)
    da = daily_winters(2, rng)
    da[0, 5] = np.nan  # a missing day given as NaN
    da = da.isel(time=np.delete(np.arange(da.sizes["time"]), [40, 41, 150]))  # and as absent days
    result = acf(da, 3)
    for lag in (1, 2, 3):
        assert result.sel(lag=lag).item() == pytest.approx(brute_force_acf(da, lag), rel=1e-10)
    layout = block_array(da)
    assert layout.shape[0] == 2 * 4  # 2 members x 4 winters
    # Removing the days leaves holes at their positions instead of closing the gap.
    assert np.isnan(layout[0, 40]) and np.isnan(layout[0, 41])


def test_ar1_pooled_acf_and_efolding_time_match_theory():
    # Analytic AR(1): r(k) = phi^k and e-folding time -1 / ln(phi).
    rng = np.random.default_rng(3)
    phi = 0.8
    da = undated(ar1((500, 90), phi, rng))  # 500 blocks of 90 days, no dates
    result = acf(da, 10)
    np.testing.assert_allclose(result.values, phi ** np.arange(11), atol=0.02)
    # Linear interpolation between lags 4 and 5 adds about +0.03 days to -1/ln(0.8) = 4.48.
    assert efolding_time(da).item() == pytest.approx(-1 / np.log(phi), abs=0.15)
    assert efolding_time(da).attrs["units"] == "days"


def test_block_demeaning_removes_between_block_variance():
    # Analytic: blocks with different constant offsets and white noise inside. With the global
    # mean, the offsets make r(k) > 0; with block means, r(k) is near 0 (about -1/n).
    rng = np.random.default_rng(4)
    offsets = rng.normal(scale=2.0, size=(200, 1))
    da = undated(offsets + rng.normal(size=(200, 60)))
    assert acf(da, 2, demean="global").sel(lag=1).item() > 0.5
    assert acf(da, 2, demean="block").sel(lag=1).item() == pytest.approx(-1 / 60, abs=0.03)


def test_efolding_beyond_max_lag_warns_and_bad_options_raise():
    rng = np.random.default_rng(5)
    da = undated(ar1((50, 90), 0.97, rng))
    with pytest.warns(InputWarning, match="raise max_lag"):
        assert np.isnan(efolding_time(da, 3).item())
    with pytest.raises(ConfigError, match="demean"):
        acf(da, 3, demean="season")
    with pytest.raises(ConfigError, match="max_lag"):
        acf(da, -1)
    with pytest.raises(CoordinateError, match="extra dimensions"):
        acf(da.expand_dims(regime=[0, 1]), 3)


def test_ccf_interval_matches_scipy_bootstrap_of_pearson_correlation():
    # scipy.stats.bootstrap (paired, percentile) of scipy.stats.pearsonr: with one day per block
    # the block bootstrap of the lag-0 CCF is the ordinary bootstrap of the correlation.
    from scipy import stats

    from westerlies.timeseries import ccf_interval

    rng = np.random.default_rng(7)
    x = rng.normal(size=400)
    y = 0.5 * x + rng.normal(size=400)
    a = xr.DataArray(x[:, None], dims=("member", "time"), name="a")
    b = xr.DataArray(y[:, None], dims=("member", "time"), name="b")
    ours = ccf_interval(a, b, max_lag=0, n_resamples=4000, seed=1)
    assert float(ours["ccf"].sel(lag=0)) == pytest.approx(stats.pearsonr(x, y)[0], abs=1e-12)
    ref = stats.bootstrap(
        (x, y),
        lambda u, v: stats.pearsonr(u, v)[0],
        paired=True,
        vectorized=False,
        n_resamples=4000,
        method="percentile",
        random_state=2,
    ).confidence_interval
    assert float(ours["low"].sel(lag=0)) == pytest.approx(ref.low, abs=0.02)
    assert float(ours["high"].sel(lag=0)) == pytest.approx(ref.high, abs=0.02)
