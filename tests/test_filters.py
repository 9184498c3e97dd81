"""Lanczos weights and block-aware low-pass filtering (`westerlies.filters`)."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import xarray as xr

from westerlies.errors import ConfigError, InputError, InputWarning, TimeStepError
from westerlies.filters import lanczos_response, lanczos_weights, lowpass, select_filtered_season
from westerlies.seasons import select_season


def _duchon_weights(n_weights: int, fc: float) -> list[float]:
    """Duchon (1979), J. Appl. Meteor. 18, eq. for the sigma-factor low-pass weights, unscaled.

    w_k = sin(2 pi fc k) / (pi k) * sin(pi k / n) / (pi k / n), w_0 = 2 fc, 2n - 1 weights.
    """
    n = (n_weights + 1) // 2
    out = []
    for k in range(-(n - 1), n):
        if k == 0:
            out.append(2 * fc)
        else:
            sigma = math.sin(math.pi * k / n) / (math.pi * k / n)
            out.append(math.sin(2 * math.pi * fc * k) / (math.pi * k) * sigma)
    return out


def _duchon_response(weights: list[float], f: float) -> float:
    """Duchon (1979): R(f) = w_0 + 2 sum_{k>0} w_k cos(2 pi f k)."""
    n = (len(weights) + 1) // 2
    w0 = weights[n - 1]
    return w0 + 2 * sum(weights[n - 1 + k] * math.cos(2 * math.pi * f * k) for k in range(1, n))


def _daily(values: np.ndarray, start: str = "2000-11-01", calendar: str = "standard"):
    """Wrap (member, time) or (member, time, lat) values on a daily axis."""
    time = xr.date_range(
        start,
        periods=values.shape[1],
        freq="D",
        calendar=calendar,
        use_cftime=calendar != "standard",
    )
    dims = ("member", "time", "lat")[: values.ndim]
    coords = {"member": np.arange(values.shape[0]), "time": time}
    return xr.DataArray(values, dims=dims, coords=coords, name="x")


def test_weights_match_duchon_1979_formula():
    # Duchon (1979), J. Appl. Meteor. 18, 1016-1022: weights with sigma factors.
    raw = np.array(_duchon_weights(61, 0.1))
    w = lanczos_weights(61, 0.1)
    assert w.size == 61
    np.testing.assert_allclose(w, raw / raw.sum(), rtol=1e-12)
    np.testing.assert_allclose(w, w[::-1])
    assert w.sum() == pytest.approx(1.0)
    # The unscaled weights already sum to about 1 (R(0) close to 1 in Duchon's figures).
    assert raw.sum() == pytest.approx(1.0, abs=0.01)


def test_response_matches_duchon_1979():
    # Duchon (1979): R(f) = w_0 + 2 sum w_k cos(2 pi f k); R(fc) close to 0.5.
    raw = _duchon_weights(61, 0.1)
    w = lanczos_weights(61, 0.1)
    for f in (1 / 30, 0.1, 0.25, 0.37):
        assert lanczos_response(w, f) == pytest.approx(
            _duchon_response(raw, f) / sum(raw), abs=1e-12
        )
    assert lanczos_response(w, 1 / 30) == pytest.approx(1.0, abs=0.01)  # 30-day period
    assert lanczos_response(w, 0.1) == pytest.approx(0.5, abs=0.02)  # the cutoff
    assert lanczos_response(w, 0.25) == pytest.approx(0.0, abs=0.01)  # 4-day period


@pytest.mark.parametrize("period", [30.0, 10.0, 4.0])
def test_sinusoid_is_scaled_by_the_response(period):
    # Analytic case: a sinusoid through a symmetric filter is multiplied by R(f) (Duchon 1979).
    t = np.arange(200)
    x = np.cos(2 * np.pi * t / period + 0.3)
    out = lowpass(_daily(x[None, :]), cutoff_days=10, n_weights=61)
    expected = _duchon_response(_duchon_weights(61, 0.1), 1 / period) / sum(
        _duchon_weights(61, 0.1)
    )
    inner = out.values[0, 30:-30]
    np.testing.assert_allclose(inner, expected * x[30:-30], atol=1e-10)
    assert np.isnan(out.values[0, :30]).all() and np.isnan(out.values[0, -30:]).all()


def test_block_edges_are_nan_and_counted():
    # Two NDJFM winters per member, then season selection: each winter is a block (DESIGN.md).
    time = xr.date_range("2000-11-01", "2002-03-31", freq="D")
    x = np.ones((3, time.size))
    da = xr.DataArray(x, dims=("member", "time"), coords={"member": [0, 1, 2], "time": time})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        nd = select_season(da, "NDJFM")
    out = lowpass(nd)
    lengths = [151, 151]  # NDJFM 2001 and 2002 (no 29 February), calendar arithmetic
    assert out.attrs["filter_edge_days"] == 3 * 60 * len(lengths)
    assert int(out.isnull().sum()) == 3 * 60 * len(lengths)
    first = out.isel(member=0).values
    # First and last 30 days of each winter NaN, the day after Nov 30 + 30 valid.
    assert np.isnan(first[:30]).all() and np.isfinite(first[30])
    assert np.isnan(first[151 - 30 : 151 + 30]).all()
    assert np.isfinite(first[151 - 31]) and np.isfinite(first[151 + 30])
    np.testing.assert_allclose(first[np.isfinite(first)], 1.0)  # unit-sum weights
    assert "season_year" in out.coords


def test_date_gaps_and_missing_values_end_runs():
    t = np.arange(300.0)
    da = _daily(np.stack([np.sin(t / 9), np.cos(t / 9)]))
    # A 3-day gap in the dates after day 99, and a NaN on day 230 of member 1.
    da = da.isel(time=np.r_[0:100, 103:300])
    da[1, 227] = np.nan  # index 227 is day 230
    out = lowpass(da)
    m0, m1 = out.values
    assert np.isnan(m0[70:130]).all() and np.isfinite(m0[69]) and np.isfinite(m0[130])
    assert np.isnan(m1[197:258]).all() and np.isfinite(m1[196]) and np.isfinite(m1[258])
    assert np.isfinite(m0[197:258]).all()  # member 0 unaffected by member 1's NaN
    # Inside a run the result is the plain convolution with the weights.
    w = lanczos_weights(61, 0.1)
    assert m1[258] == pytest.approx(float(np.dot(w, da.values[1, 228:289])))
    # Structure only (block edges and gaps): 4 run edges per member x 30 days.
    assert out.attrs["filter_edge_days"] == 2 * 4 * 30


def test_dask_member_chunks_match_numpy():
    rng = np.random.default_rng(3)
    da = _daily(rng.standard_normal((4, 120, 5)))
    eager = lowpass(da)
    lazy = lowpass(da.chunk({"member": 1}))
    assert lazy.chunks is not None
    np.testing.assert_allclose(lazy.values, eager.values, equal_nan=True)


def test_shrink_edges_keep_constants_and_match_inside():
    rng = np.random.default_rng(4)
    da = _daily(5.0 + rng.standard_normal((1, 100)))
    shrink = lowpass(da, edge="shrink")
    assert int(shrink.isnull().sum()) == 0
    np.testing.assert_allclose(shrink.values[0, 30:-30], lowpass(da).values[0, 30:-30])
    const = lowpass(_daily(np.full((1, 40), 7.0)), edge="shrink")
    np.testing.assert_allclose(const.values, 7.0)  # renormalized weights sum to one


def test_cftime_360_day_calendar():
    x = np.cos(2 * np.pi * np.arange(150) / 30)[None, :]
    out = lowpass(_daily(x, start="2001-11-01", calendar="360_day"))
    assert int(out.notnull().sum()) == 150 - 60


def test_season_selected_after_filtering_is_complete():
    time = xr.date_range("2000-11-01", "2001-03-31", freq="D")
    da = xr.DataArray(np.ones((2, time.size)), dims=("member", "time"), coords={"time": time})
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)
        djf = select_filtered_season(lowpass(da), "DJF")
    assert djf.attrs["season_days_missing"] == 0 and djf.sizes["time"] == 90
    short = da.sel(time=slice("2000-11-20", None))
    with pytest.warns(InputWarning, match="no filtered value"):
        djf = select_filtered_season(lowpass(short), "DJF")
    assert djf.attrs["season_days_missing"] == 2 * 19  # Dec 1-19 lack 30 days before


def test_bad_inputs_raise():
    with pytest.raises(ConfigError):
        lanczos_weights(60, 0.1)
    with pytest.raises(ConfigError):
        lanczos_weights(61, 0.6)
    da = _daily(np.ones((1, 40)))
    with pytest.raises(InputError, match="longest run"):
        lowpass(da)  # every block shorter than the 61-day window
    with pytest.raises(ConfigError):
        lowpass(_daily(np.ones((1, 100))), edge="mirror")
    monthly = xr.DataArray(
        np.ones((1, 100)),
        dims=("member", "time"),
        coords={"time": xr.date_range("2000-01-01", periods=100, freq="MS")},
    )
    with pytest.raises(TimeStepError):
        lowpass(monthly)
    backwards = _daily(np.ones((1, 100))).isel(time=slice(None, None, -1))
    with pytest.raises(TimeStepError, match="increasing"):
        lowpass(backwards)
    with pytest.raises(InputError):
        lowpass(xr.DataArray(np.ones(100), dims="time"))
