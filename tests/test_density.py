"""Kernel density of jet latitudes, modes, multimodality test and categories (`westerlies.density`).

The samples here are invented (mixtures of known truth) for recovery tests; the density itself
is checked against scipy.stats.gaussian_kde.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from scipy import optimize, stats

from westerlies.density import hall_york_lambda, jet_modes, silverman_bandwidth
from westerlies.errors import ConfigError, InputError, InputWarning, MissingValueError

PEAKS = np.array([37.0, 46.0, 56.0])  # three preferred latitudes (from memory, see REFERENCES)
WEIGHTS = np.array([0.3, 0.4, 0.3])
SD = 2.5


def _latitudes(values: np.ndarray) -> xr.DataArray:
    """(member, time) latitudes: each member is one block (no season label)."""
    return xr.DataArray(values, dims=("member", "time"), name="latitude")


def _mixture(rng, members=60, days=90):
    comp = rng.choice(3, size=(members, days), p=WEIGHTS)
    return PEAKS[comp] + rng.normal(0, SD, size=(members, days))


def _mixture_pdf(x, h=0.0):
    """The mixture density convolved with a Gaussian kernel of bandwidth h (analytic)."""
    s = np.sqrt(SD**2 + h**2)
    return sum(w * stats.norm.pdf(x, m, s) for w, m in zip(WEIGHTS, PEAKS, strict=True))


def test_silverman_rule_of_thumb():
    # Silverman (1986), eq. 3.31: h = 0.9 min(sd, IQR / 1.34) n^(-1/5); IQR from scipy.stats.
    x = np.random.default_rng(0).gamma(3.0, 2.0, 700)
    expected = 0.9 * min(np.std(x, ddof=1), stats.iqr(x) / 1.34) * 700 ** (-0.2)
    assert silverman_bandwidth(x) == pytest.approx(expected, rel=1e-12)


def test_density_and_modes_match_scipy_gaussian_kde():
    rng = np.random.default_rng(1)
    x = _mixture(rng, members=20, days=60)
    fit = jet_modes(_latitudes(x), n_resamples=0)
    flat = x.ravel()
    # scipy.stats.gaussian_kde with the same bandwidth: bw factor = h / sd (ddof=1).
    kde = stats.gaussian_kde(flat, bw_method=fit.bandwidth / np.std(flat, ddof=1))
    grid = fit.density["latitude"].values
    reference = kde(grid)
    np.testing.assert_allclose(fit.density.values, reference, atol=2e-4 * reference.max())
    assert np.trapezoid(fit.density.values, grid) == pytest.approx(1.0, abs=1e-3)
    # Modes: local maxima of the scipy density on a 0.005-degree grid.
    fine = np.arange(grid[0], grid[-1], 0.005)
    d = kde(fine)
    ref_modes = fine[1:-1][(d[1:-1] > d[:-2]) & (d[1:-1] > d[2:])]
    ref_modes = ref_modes[kde(ref_modes) > 0.02 * d.max()]
    np.testing.assert_allclose(fit.modes.values, ref_modes, atol=0.02)
    np.testing.assert_allclose(fit.mode_density.values, kde(ref_modes), rtol=1e-3)


def test_three_component_mixture_gives_three_modes():
    rng = np.random.default_rng(2)
    x = _mixture(rng)
    fit = jet_modes(_latitudes(x), n_resamples=199, seed=5)
    assert fit.modes.size == 3
    # Analytic truth: modes of the mixture smoothed by the kernel (scipy.optimize on the pdf).
    truth = [
        optimize.minimize_scalar(
            lambda v: -_mixture_pdf(v, fit.bandwidth), bounds=(m - 3, m + 3), method="bounded"
        ).x
        for m in PEAKS
    ]
    np.testing.assert_allclose(fit.modes.values, truth, atol=0.5)
    assert np.all(np.diff(fit.minima.values) > 0)
    assert PEAKS[0] < fit.minima.values[0] < PEAKS[1] < fit.minima.values[1] < PEAKS[2]
    # Intervals bracket the modes, every replicate finds all three.
    lower, upper = fit.mode_interval.sel(bound="lower"), fit.mode_interval.sel(bound="upper")
    assert np.all((lower < fit.modes) & (fit.modes < upper))
    np.testing.assert_allclose(fit.mode_support.values, 1.0)
    # The test rejects "at most two modes" and "at most one mode".
    assert np.all(fit.test["p_value"].values < 0.05)
    assert fit.test["critical_bandwidth"].sel(max_modes=1) > fit.test["critical_bandwidth"].sel(
        max_modes=2
    )
    assert fit.three_modes_supported(0.05)
    # The density band contains the fitted density.
    band = fit.density_band
    assert np.all(
        (band.sel(bound="lower") <= fit.density) & (fit.density <= band.sel(bound="upper"))
    )


def test_categories_and_occupancy():
    rng = np.random.default_rng(3)
    x = _mixture(rng, members=40, days=90)
    fit = jet_modes(_latitudes(x), n_resamples=0)
    assert fit.categories == ("south", "central", "north")
    b1, b2 = fit.bounds
    flat = x.ravel()
    direct = [np.mean(flat < b1), np.mean((flat >= b1) & (flat < b2)), np.mean(flat >= b2)]
    np.testing.assert_allclose(fit.occupancy(_latitudes(x)).values, direct)
    # The mixture weights are recovered (known truth, loosely: tails cross the minima).
    np.testing.assert_allclose(direct, WEIGHTS, atol=0.03)
    # Another dataset on the same bounds: everything shifted 20 degrees north is all "north".
    other = fit.occupancy(_latitudes(x[:5] + 20.0))
    assert other.sel(category="north") > 0.95
    per_block = fit.occupancy(_latitudes(x), per_block=True)
    assert per_block.shape == (40, 3) and int(per_block.sum()) == x.size
    labels = fit.categorize(_latitudes(x))
    assert set(np.unique(labels.values)) == {0, 1, 2}


def test_gaussian_sample_one_mode_and_unimodality_not_rejected():
    # Under a unimodal truth the calibrated test should reject at 5 % in few repetitions.
    rejections = 0
    for rep in range(8):
        rng = np.random.default_rng(100 + rep)
        x = rng.normal(46.0, 6.0, size=(40, 30))
        fit = jet_modes(_latitudes(x), n_resamples=99, seed=rep)
        assert fit.modes.size == 1
        assert abs(float(fit.modes[0]) - 46.0) < 3.0  # a sample mode is noisy (n = 1200)
        rejections += float(fit.test["p_value"].sel(max_modes=1)) <= 0.05
    assert rejections <= 1


def test_critical_bandwidth_of_two_points_is_half_their_distance():
    # Analytic case: an equal mixture of two Gaussians of sd h, d apart, is unimodal exactly
    # when d <= 2 h, so the critical bandwidth for one mode is d / 2.
    from westerlies.density import _critical_bandwidth, _linear_bins

    step, d = 0.1, 7.3
    counts = _linear_bins(np.array([40.0, 40.0 + d]), 0, step, 1000)[None, :]
    window = (350, 520)
    h1 = _critical_bandwidth(counts, 1, 2 * step, 50.0, step, window)[0]
    assert h1 == pytest.approx(d / 2, rel=1e-3)
    h2 = _critical_bandwidth(counts, 2, 2 * step, 50.0, step, window)[0]
    assert h2 == 2 * step  # at most two modes already at the smallest bandwidth


def test_hall_york_lambda_values():
    # Hall and York (2001) calibration polynomial (from memory): about 1.13 at alpha = 0.05,
    # larger than 1 at the usual levels (Silverman's test is conservative).
    assert hall_york_lambda(0.05) == pytest.approx(1.1294, abs=1e-3)
    lam = hall_york_lambda(np.array([0.01, 0.05, 0.1, 0.2]))
    assert np.all(lam > 1) and np.all(np.diff(lam) < 0)


def test_bootstrap_resamples_whole_blocks():
    # Blocks of 50 identical days behave like one day per block: resampling whole blocks gives
    # the same replicate densities; resampling days would give narrower bands.
    rng = np.random.default_rng(4)
    one = rng.normal(46, 6, size=(30, 1))
    many = np.repeat(one, 50, axis=1)
    a = jet_modes(_latitudes(one), bandwidth=2.0, n_resamples=200, seed=9)
    b = jet_modes(_latitudes(many), bandwidth=2.0, n_resamples=200, seed=9)
    np.testing.assert_allclose(a.density.values, b.density.values, atol=1e-12)
    np.testing.assert_allclose(a.density_band.values, b.density_band.values, atol=1e-12)
    # Season labels split members into blocks: 30 members x 2 winters = 60 blocks.
    time = xr.date_range("2001-01-01", periods=4, freq="D")
    da = _latitudes(rng.normal(46, 6, size=(30, 4))).assign_coords(
        time=time, season_year=("time", [2001, 2001, 2002, 2002])
    )
    assert jet_modes(da, n_resamples=0).n_blocks == 60


def test_deterministic_and_netcdf_round_trip(tmp_path):
    x = _mixture(np.random.default_rng(5), members=20, days=30)
    x[0, :5] = np.nan  # filter edges: dropped and counted
    a = jet_modes(_latitudes(x), n_resamples=50, seed=11)
    b = jet_modes(_latitudes(x), n_resamples=50, seed=11)
    assert a.n_missing == 5 and a.n_samples == x.size - 5
    xr.testing.assert_identical(a.to_dataset(), b.to_dataset())
    a.to_dataset().to_netcdf(tmp_path / "modes.nc")
    back = xr.open_dataset(tmp_path / "modes.nc")
    np.testing.assert_allclose(back["mode_latitude"].values, a.modes.values)


def test_bad_inputs_raise():
    with pytest.raises(InputError):
        jet_modes(np.arange(100.0))
    with pytest.raises(MissingValueError):
        jet_modes(_latitudes(np.full((2, 30), np.nan)))
    x = _latitudes(np.random.default_rng(6).normal(46, 6, (5, 30)))
    with pytest.raises(ConfigError):
        jet_modes(x, bandwidth="scott")
    with pytest.raises(ConfigError):
        jet_modes(x, bandwidth=0.1)  # below twice the 0.1-degree resolution
    with pytest.raises(InputError):
        jet_modes(x.expand_dims(level=[1]))
    with pytest.warns(InputWarning, match="single block"):
        single = jet_modes(x.isel(member=[0]), n_resamples=10)
    assert np.isnan(single.test["p_value"]).all() and np.isfinite(single.density).all()


def test_mode_latitudes_through_the_resampling_engine():
    # Three-component mixture (analytic modes, see _mixture_pdf): the engine's block statistic
    # reproduces the fit's modes, and a permutation test finds a 1-degree shift of every
    # component but not a second sample of the same mixture.
    from westerlies.resampling import bootstrap_ci, permutation_test

    rng = np.random.default_rng(11)
    first = _latitudes(_mixture(rng))
    fit = jet_modes(first, n_resamples=0)
    stat = fit.mode_statistic()
    ci = bootstrap_ci(first, stat, n_resamples=200, seed=1)
    np.testing.assert_allclose(ci["statistic"].values, fit.modes.values, atol=0.05)
    assert (ci["low"].values < fit.modes.values).all() and (
        fit.modes.values < ci["high"].values
    ).all()
    shifted = _latitudes(_mixture(rng) - 1.0)
    test = permutation_test(first, shifted, stat, n_resamples=199, seed=2)
    assert (test["statistic"].values < -0.5).all() and (test["p_value"].values < 0.05).all()
    same = permutation_test(first, _latitudes(_mixture(rng)), stat, n_resamples=199, seed=3)
    assert (same["p_value"].values > 0.01).all()
