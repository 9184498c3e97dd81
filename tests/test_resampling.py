"""The significance engine (westerlies.resampling): block bootstrap, permutation, KS, maps, FDR."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import xarray as xr

from westerlies.errors import ConfigError, CoordinateError, InputError
from westerlies.resampling import (
    BlockStatistic,
    Quantile,
    block_sums,
    bootstrap_ci,
    fdr_mask,
    get_statistic,
    ks_test,
    map_difference_test,
    map_ks_test,
    permutation_test,
    reference_percentile,
    register_statistic,
)
from westerlies.seasons import select_season


def ar1(shape: tuple[int, ...], phi: float, rng: np.random.Generator) -> np.ndarray:
    """Stationary AR(1) along the last axis, unit innovations (synthetic: known truth)."""
    noise = rng.normal(size=shape)
    out = np.empty(shape)
    out[..., 0] = noise[..., 0] / np.sqrt(1 - phi**2)
    for t in range(1, shape[-1]):
        out[..., t] = phi * out[..., t - 1] + noise[..., t]
    return out


def blocks_of(values: np.ndarray) -> xr.DataArray:
    """(blocks, days) values as an undated (member, time) index: each member is one block."""
    return xr.DataArray(np.atleast_2d(values), dims=("member", "time"), name="index")


def one_day_blocks(values: np.ndarray) -> xr.DataArray:
    """Independent samples: every value its own block (member), one time step."""
    return blocks_of(np.ravel(values)[:, None])


def mean_difference(x, y, axis=-1):
    return np.mean(y, axis=axis) - np.mean(x, axis=axis)


def test_permutation_test_matches_scipy_on_independent_samples():
    # Independent library: scipy.stats.permutation_test (independent samples, two-sided).
    rng = np.random.default_rng(0)
    x, y = rng.normal(size=40), rng.normal(0.25, 1.3, size=40)
    ours = permutation_test(one_day_blocks(x), one_day_blocks(y), n_resamples=4000, seed=1)
    theirs = scipy.stats.permutation_test(
        (x, y), mean_difference, n_resamples=20000, vectorized=True, rng=2
    )
    assert ours.statistic.item() == pytest.approx(theirs.statistic, rel=1e-12)
    p = theirs.pvalue
    monte_carlo = 3 * np.sqrt(p * (1 - p) / 4000) + 3 * np.sqrt(p * (1 - p) / 20000)
    assert abs(ours.p_value.item() - p) < monte_carlo
    assert 0.005 < p < 0.3  # the comparison is informative (not a trivial 0 or 1)


def test_bootstrap_percentile_interval_matches_scipy():
    # Independent library: scipy.stats.bootstrap(method="percentile").
    rng = np.random.default_rng(3)
    x = rng.gamma(2.0, size=1000)
    for name, func, tolerance in [
        ("mean", np.mean, 0.25),
        ("variance", lambda a, axis=-1: np.var(a, axis=axis, ddof=1), 0.25),
        # A sample quantile's bootstrap distribution is lumpy (it jumps between order
        # statistics), so its percentiles move more from one Monte Carlo run to the next.
        ("q0.9", lambda a, axis=-1: np.quantile(a, 0.9, axis=axis), 0.5),
    ]:
        ours = bootstrap_ci(one_day_blocks(x), name, n_resamples=4000, seed=4)
        theirs = scipy.stats.bootstrap(
            (x,), func, method="percentile", n_resamples=4000, rng=5, vectorized=True
        )
        spread = theirs.standard_error
        # Monte Carlo error of a 2.5 % percentile from 4000 replicates: about 0.06 standard
        # errors each (smooth statistics); the histogram quantile adds at most one spacing.
        low, high = theirs.confidence_interval
        assert ours.low.item() == pytest.approx(low, abs=tolerance * spread), name
        assert ours.high.item() == pytest.approx(high, abs=tolerance * spread), name


def test_quantile_within_one_bin_of_numpy():
    # Documented resolution: within one bin of the exact quantile (numpy.quantile).
    rng = np.random.default_rng(6)
    x = rng.normal(size=(300, 90))
    for q in (0.1, 0.5, 0.9):
        stat = Quantile(q=q).prepare(blocks_of(x))
        value = stat.finish(stat.per_block(blocks_of(x)).sum(0))
        exact = np.quantile(x, q)
        edges = np.asarray(stat.edges)
        bin_width = np.diff(edges)[np.searchsorted(edges, exact) - 1]
        assert abs(value - exact) <= bin_width


def test_ks_statistic_and_independent_permutation_pvalue_match_scipy():
    # Independent library: scipy.stats.ks_2samp (statistic; exact p-value on independent days).
    rng = np.random.default_rng(7)
    x, y = rng.normal(size=60), rng.normal(0.3, 1.4, size=50)
    ours = ks_test(one_day_blocks(x), one_day_blocks(y), n_resamples=4000, seed=8)
    theirs = scipy.stats.ks_2samp(x, y, method="exact")
    assert ours.statistic.item() == pytest.approx(theirs.statistic, rel=1e-12)
    p = theirs.pvalue
    assert abs(ours.p_value.item() - p) < 4 * np.sqrt(p * (1 - p) / 4000) + 0.005


def test_fdr_mask_matches_scipy_false_discovery_control():
    # Independent library: scipy.stats.false_discovery_control (Benjamini-Hochberg).
    rng = np.random.default_rng(9)
    p = np.concatenate([rng.uniform(size=300), rng.uniform(0, 0.001, size=40)])
    p[::37] = np.nan
    valid = np.isfinite(p)
    for wilks, level in ((True, 0.10), (False, 0.05)):
        mask = fdr_mask(p, 0.05, wilks=wilks)
        expected = np.zeros(p.shape, bool)
        expected[valid] = scipy.stats.false_discovery_control(p[valid], method="bh") <= level
        np.testing.assert_array_equal(mask, expected)
        assert 0 < mask.sum() < valid.sum()
    grid = xr.DataArray(p[:338].reshape(13, 26), dims=("lat", "lon"))
    assert fdr_mask(grid).dtype == bool and "Wilks" in fdr_mask(grid).attrs["method"]


def test_block_test_is_calibrated_and_day_test_over_rejects():
    # Analytic null: both ensembles from the same AR(1) generator (phi = 0.9, e-folding about
    # 9.5 days). Block permutation keeps the level (exact under exchangeable blocks); treating
    # days as independent ignores the variance inflation (1 + phi) / (1 - phi) = 19 of the mean.
    rng = np.random.default_rng(10)
    repetitions, n_blocks, n_days, phi = 200, 16, 60, 0.9
    data = ar1((repetitions, 2, n_blocks, n_days), phi, rng)
    p_blocks, p_days, p_shift = [], [], []
    for r in range(repetitions):
        x, y = data[r, 0], data[r, 1]
        p_blocks.append(
            permutation_test(blocks_of(x), blocks_of(y), n_resamples=500, seed=r).p_value.item()
        )
        if r >= 50:
            continue
        p_days.append(  # the same test with days as the unit: 50 repetitions show it
            permutation_test(
                one_day_blocks(x), one_day_blocks(y), n_resamples=500, seed=r
            ).p_value.item()
        )
        # Power: a planted shift of 1.5 standard deviations of a block mean.
        shift = 1.5 * np.sqrt(phi_block_variance(phi, n_days))
        p_shift.append(
            permutation_test(
                blocks_of(x), blocks_of(y + shift), n_resamples=500, seed=r
            ).p_value.item()
        )
    rate_blocks = np.mean(np.array(p_blocks) <= 0.05)
    rate_days = np.mean(np.array(p_days) <= 0.05)
    # Binomial(200, 0.05): standard deviation 0.015; 0.09 is more than 2.5 of them above.
    assert 0.015 <= rate_blocks <= 0.09
    assert rate_days > 0.4  # resampling days visibly over-rejects
    assert np.mean(np.array(p_shift) <= 0.05) > 0.9


def phi_block_variance(phi: float, n: int) -> float:
    """Variance of the mean of n days of a stationary unit-innovation AR(1) (analytic)."""
    k = np.arange(1, n)
    gamma0 = 1 / (1 - phi**2)
    return gamma0 / n * (1 + 2 * np.sum((1 - k / n) * phi**k))


def test_reference_percentile_spread_matches_sampling_theory():
    # Analytic: the mean of N distinct blocks drawn from n has standard deviation
    # sigma / sqrt(N) * sqrt((n - N) / (n - 1)) (finite-population correction).
    rng = np.random.default_rng(11)
    model = one_day_blocks(rng.normal(size=400))
    inside = one_day_blocks(rng.normal(size=40))
    outside = one_day_blocks(rng.normal(0.8, 1.0, size=40))
    result = reference_percentile(model, inside, n_resamples=4000, seed=12)
    sigma = float(model.std())
    expected = sigma / np.sqrt(40) * np.sqrt((400 - 40) / 399)
    assert result.distribution.std().item() == pytest.approx(expected, rel=0.05)
    assert 2.5 < result.percentile.item() < 97.5
    far = reference_percentile(model, outside, n_resamples=4000, seed=12)
    assert far.percentile.item() > 99 and far.p_value.item() < 0.01
    with pytest.raises(InputError, match="replace=True"):
        reference_percentile(inside, model)


def test_statistics_by_name_and_plugged_in_objects():
    rng = np.random.default_rng(13)
    x = blocks_of(ar1((30, 90), 0.7, rng))
    for name in ("mean", "variance", "std", "median", "q0.25", "acf1", "efolding"):
        ci = bootstrap_ci(x, name, n_resamples=200, seed=0)
        assert ci.low.item() <= ci.statistic.item() <= ci.high.item(), name
    assert bootstrap_ci(x, "std").statistic.item() == pytest.approx(float(x.std(ddof=1)))

    @dataclass(frozen=True)
    class Maximum:  # not additive over blocks by design, but any (sums -> value) works
        name: str = "share_above_one"

        def per_block(self, da):
            v = da.values
            return np.stack([(v > 1).sum(1), np.isfinite(v).sum(1)], axis=1).astype(float)

        def finish(self, sums):
            return sums[..., 0] / sums[..., 1]

    assert isinstance(Maximum(), BlockStatistic)
    register_statistic("share_above_one", Maximum)
    value = bootstrap_ci(x, "share_above_one").statistic.item()
    assert value == pytest.approx(float((x > 1).mean()))
    assert get_statistic(Maximum()).name == "share_above_one"
    with pytest.raises(ConfigError, match="statistic"):
        get_statistic("kurtosis")


def test_categorical_occupancy_and_persistence_of_a_markov_chain():
    # Analytic: a two-state Markov chain with stay probability p has occupancy 1/2 and mean
    # episode length 1 / (1 - p). Long blocks (1000 days), so block edges cut few episodes.
    rng = np.random.default_rng(14)
    p = 0.8
    switches = rng.uniform(size=(40, 1000)) > p
    da = blocks_of((np.cumsum(switches, axis=1) % 2).astype(float))
    occupancy = bootstrap_ci(da, "occupancy", seed=0)
    np.testing.assert_allclose(occupancy.statistic.values, [0.5, 0.5], atol=0.02)
    assert list(occupancy["category"].values) == [0, 1]
    persistence = bootstrap_ci(da, "persistence", seed=0)
    np.testing.assert_allclose(persistence.statistic.values, 1 / (1 - p), rtol=0.05)
    sums = block_sums("persistence", da)  # days and episodes of each category, per block
    assert sums.shape == (40, 4) and np.all(sums[:, :2].sum(1) == 1000)


def test_several_statistics_share_one_set_of_replicates():
    # Consistency: a sequence of statistics gives the same results as one call per statistic
    # with the same seed (one weight matrix, one matrix product for all).
    rng = np.random.default_rng(18)
    x, y = blocks_of(ar1((40, 90), 0.7, rng)), blocks_of(ar1((30, 90), 0.7, rng) + 0.2)
    names = ["mean", "std", "acf1", "q0.9"]
    together = permutation_test(x, y, names, n_resamples=300, seed=5)
    assert list(together) == names
    for name in names:
        xr.testing.assert_allclose(
            together[name], permutation_test(x, y, name, n_resamples=300, seed=5)
        )
    cis = bootstrap_ci(x, names, n_resamples=300, seed=5)
    xr.testing.assert_allclose(cis["acf1"], bootstrap_ci(x, "acf1", n_resamples=300, seed=5))
    with pytest.raises(ConfigError, match="distinct names"):
        bootstrap_ci(x, ["mean", "mean"])


def test_dated_seasons_make_blocks_and_results_are_deterministic():
    rng = np.random.default_rng(15)
    time = pd.date_range("2000-12-01", "2006-02-28", freq="D")
    da = xr.DataArray(
        rng.normal(size=(3, time.size)), dims=("member", "time"), coords={"time": time}
    )
    djf = select_season(da, "DJF")
    assert block_sums("mean", djf).shape == (3 * 6, 2)  # 3 members x 6 winters
    a = permutation_test(djf.isel(member=[0]), djf.isel(member=[1, 2]), "acf1", seed=3)
    b = permutation_test(djf.isel(member=[0]), djf.isel(member=[1, 2]), "acf1", seed=3)
    xr.testing.assert_identical(a, b)
    with pytest.raises(ConfigError, match="n_resamples"):
        bootstrap_ci(djf, n_resamples=0)


def test_map_ttest_without_autocorrelation_equals_welch():
    # Independent library: scipy.stats.ttest_ind(equal_var=False). With one day per block
    # there are no lag-1 pairs, so the Bretherton et al. (1999) N_eff equals N.
    rng = np.random.default_rng(16)
    x = rng.normal(size=(30, 1, 3, 4))
    y = rng.normal(0.4, 1.5, size=(25, 1, 3, 4))
    dims = ("member", "time", "lat", "lon")
    result = map_difference_test(
        xr.DataArray(x, dims=dims), xr.DataArray(y, dims=dims), method="ttest"
    )
    welch = scipy.stats.ttest_ind(y[:, 0], x[:, 0], axis=0, equal_var=False)
    np.testing.assert_allclose(result.p_value.values, welch.pvalue, rtol=1e-8)
    np.testing.assert_allclose(result.difference.values, y.mean((0, 1)) - x.mean((0, 1)))


def test_map_tests_calibrated_null_and_detect_planted_shift():
    # Recovery of known truth (synthetic AR(1) fields, phi = 0.8, independent grid points):
    # a shift planted at the first 20 points; the other 80 are null.
    rng = np.random.default_rng(17)
    time = pd.date_range("2000-12-01", "2010-02-28", freq="D")
    shape = (4, 10, 10, time.size)
    fields = []
    for shift in (0.0, 1.0):
        values = ar1(shape, 0.8, rng)
        values[:, :2] += shift
        da = xr.DataArray(
            values,
            dims=("member", "lat", "lon", "time"),
            coords={"time": time, "lat": np.arange(10.0), "lon": np.arange(10.0)},
        )
        fields.append(select_season(da, "DJF"))
    x, y = fields
    planted = np.zeros((10, 10), bool)
    planted[:2] = True
    for method in ("permutation", "ttest"):
        result = map_difference_test(x, y, method=method, n_resamples=500, seed=0)
        p = result.p_value.values
        assert result.p_value.dims == ("lat", "lon")
        assert np.all(p[planted] < 0.01), method
        assert np.mean(p[~planted] <= 0.05) < 0.15, method
        assert fdr_mask(result.p_value).values[planted].all()
    # The same fields with days treated as independent over-reject at the null points.
    naive = scipy.stats.ttest_ind(
        y.values.reshape(-1, 10, 10), x.values.reshape(-1, 10, 10), axis=0
    )
    assert np.mean(naive.pvalue[~planted] <= 0.05) > 0.3
    ks = map_ks_test(x, y, n_resamples=300, seed=0)
    exact = scipy.stats.ks_2samp(  # independent library: scipy.stats.ks_2samp, one point
        x.isel(lat=5, lon=5).values.ravel(), y.isel(lat=5, lon=5).values.ravel()
    ).statistic
    assert abs(ks.statistic.isel(lat=5, lon=5).item() - exact) <= 2 / 50
    assert np.all(ks.p_value.values[planted] < 0.01)
    with pytest.raises(CoordinateError, match="grid"):
        map_difference_test(x.isel(lon=0), y.isel(lon=0).isel(lat=0))


def test_map_test_on_shared_block_sums_equals_the_direct_test():
    # Same numbers from precomputed per-block sums (one pass per field shared between tests).
    from westerlies.resampling import field_block_sums, map_difference_test

    rng = np.random.default_rng(3)
    dims = ("member", "time", "lat", "lon")
    coords = {"lat": [10.0, 20.0, 30.0], "lon": [0.0, 5.0]}
    x = xr.DataArray(rng.normal(size=(6, 20, 3, 2)), dims=dims, coords=coords)
    y = xr.DataArray(rng.normal(size=(7, 20, 3, 2)) + 0.5, dims=dims, coords=coords)
    direct = map_difference_test(x, y, n_resamples=199, seed=4)
    shared = map_difference_test(field_block_sums(x), field_block_sums(y), n_resamples=199, seed=4)
    xr.testing.assert_allclose(direct["difference"], shared["difference"])
    np.testing.assert_array_equal(direct["p_value"].values, shared["p_value"].values)
    # difference of means: numpy on the raw arrays
    np.testing.assert_allclose(
        direct["difference"].values, y.mean(("member", "time")) - x.mean(("member", "time"))
    )
    with pytest.raises(ConfigError, match="ttest"):
        map_difference_test(field_block_sums(x), y, method="ttest")


def test_weight_matrices_are_reused_for_one_seed_and_fresh_for_a_generator():
    from westerlies.resampling import bootstrap_weights, permutation_weights

    first = permutation_weights(30, 20, 200, seed=7)
    again = permutation_weights(30, 20, 200, seed=7)
    assert again is first  # the cached matrix, not a new draw
    assert not first.flags.writeable  # shared, so nobody may change it in place
    assert np.all(first.sum(axis=1) == 30)  # each row relabels exactly 30 blocks as "first"
    assert not np.array_equal(permutation_weights(30, 20, 200, seed=8), first)
    boot = bootstrap_weights(50, 200, seed=7)
    assert np.all(boot.sum(axis=1) == 50)
    # a Generator's state moves on: two draws from one generator must differ
    rng = np.random.default_rng(7)
    assert not np.array_equal(bootstrap_weights(50, 200, rng), bootstrap_weights(50, 200, rng))
