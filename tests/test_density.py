"""Kernel density of jet latitudes, modes, multimodality test and categories (`westerlies.density`).

The samples here are invented (mixtures of known truth) for recovery tests; the density itself
is checked against scipy.stats.gaussian_kde.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from scipy import fft, optimize, signal, stats

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


# --- the fast kernels against straightforward reference implementations --------------------
# The references below are the earlier, plainly written kernels (a find_peaks loop per
# replicate, the full alias sum, a full bisection and one replicate at a time); the fast paths
# must give the same numbers.


def _reference_smooth(counts, bandwidth, step):
    """Transfer function summed over the aliases m = -2..2, FFT length per call."""
    n_bins = counts.shape[-1]
    h = np.asarray(bandwidth, dtype=float)
    half = int(np.ceil(6 * np.max(h) / step))
    n_fft = fft.next_fast_len(n_bins + 2 * half + 1, real=True)
    spectrum = fft.rfft(counts, n_fft, axis=-1)
    alias = fft.rfftfreq(n_fft, d=step)[:, None] + np.arange(-2, 3) / step
    transfer = np.exp(-2 * np.pi**2 * (h[..., None, None] * alias) ** 2).sum(axis=-1)
    dens = fft.irfft(spectrum * transfer, n_fft, axis=-1)[..., :n_bins]
    return dens / (counts.sum(axis=-1, keepdims=True) * step)


def _reference_critical_bandwidth(counts, k, low, high, step, window, rtol=1e-4):
    from westerlies.density import _count_modes

    rows = counts.shape[:-1]
    lo = np.broadcast_to(np.asarray(low, dtype=float), rows).copy()
    hi = np.broadcast_to(np.asarray(high, dtype=float), rows).copy()
    ok_lo = _count_modes(_reference_smooth(counts, lo, step), *window) <= k
    n_iter = int(np.ceil(np.log2(np.log(np.max(hi / lo)) / np.log1p(rtol)))) + 1
    for _ in range(max(n_iter, 1)):
        mid = np.sqrt(lo * hi)
        ok = _count_modes(_reference_smooth(counts, mid, step), *window) <= k
        hi, lo = np.where(ok, mid, hi), np.where(ok, lo, mid)
    return np.where(ok_lo, np.broadcast_to(np.asarray(low, dtype=float), rows), hi)


def _reference_bootstrap_counts(x, blocks, n_blocks, n_rows, rng, hs, start, step, n_bins):
    """Replicate by replicate, the textbook smoothed bootstrap (Silverman 1986, section
    6.4.1: y = mean + (x* - mean + h eps) / sqrt(1 + h^2 / var)) with the documented random
    stream: blocks, then ceil(M / 2) uniforms u1 and as many u2 for M = n_blocks x (longest
    block) slots, Box and Muller's (1958) cos and sin deviates written out pair by pair, the
    drawn blocks' days taking the deviates of their slots."""
    from westerlies.density import _linear_bins

    mean, var = x.mean(), x.var(ddof=1)
    length = np.bincount(blocks).max()
    out = np.empty((len(hs), n_rows, n_bins))
    for r in range(n_rows):
        drawn = rng.integers(0, n_blocks, n_blocks)
        half = (n_blocks * length + 1) // 2
        u1 = rng.random(half, dtype=np.float32).astype(float)
        u2 = rng.random(half, dtype=np.float32).astype(float)
        radius = np.sqrt(-2 * np.log(1 - u1))
        eps = np.concatenate([radius * np.cos(2 * np.pi * u2), radius * np.sin(2 * np.pi * u2)])
        eps = eps[: n_blocks * length].reshape(n_blocks, length)
        resampled = np.concatenate([x[blocks == b] for b in drawn])
        noise = np.concatenate([eps[j, : (blocks == b).sum()] for j, b in enumerate(drawn)])
        for i, h in enumerate(hs):
            y = mean + (resampled - mean + h * noise) / np.sqrt(1 + h**2 / var)
            out[i, r] = _linear_bins(y, start, step, n_bins)
    return out


def _reference_basin_modes(dens, centres, edges, min_prominence):
    from westerlies.density import _refine

    out = np.full((dens.shape[0], edges.size - 1), np.nan)
    for r in range(dens.shape[0]):
        best = np.full(edges.size - 1, -np.inf)
        peaks, _ = signal.find_peaks(dens[r], prominence=min_prominence * dens[r].max())
        for i in peaks:
            pos, value = _refine(centres, dens[r], i)
            m = int(np.searchsorted(edges, pos) - 1)
            if value > best[m]:
                best[m], out[r, m] = value, pos
    return out


def test_smooth_is_the_discrete_convolution_with_the_sampled_kernel():
    # Analytic case: the density is sum_i c_i K_h((j - i) step) / N with the Gaussian K_h
    # (scipy.stats.norm.pdf), summed directly; the FFT path (aliases beyond m = -1 and
    # transfer terms below exp(-50) dropped) agrees to round-off, also at h = 2 step where
    # the m = -1 alias (3e-9 at the Nyquist frequency) is needed, and at h = step.
    from westerlies.density import _smooth

    step, rng = 0.1, np.random.default_rng(20)
    counts = np.zeros((3, 400))
    counts[:, 150:260] = rng.poisson(3.0, (3, 110))
    lags = np.arange(-399, 400) * step
    for h in (step, 2 * step, 0.2345, 1.7, np.array([0.2, 0.9, 3.1]), np.array([0.1, 0.5, 2])):
        dens = _smooth(counts, h, step)
        for r, hr in enumerate(np.broadcast_to(h, 3)):
            kernel = stats.norm.pdf(lags, scale=hr)
            direct = np.convolve(counts[r], kernel)[399:-399] / counts[r].sum()
            np.testing.assert_allclose(dens[r], direct, rtol=0, atol=1e-12 * direct.max())
        reference = _reference_smooth(counts, h, step)
        np.testing.assert_allclose(dens, reference, rtol=0, atol=1e-13 * reference.max())


def test_prominent_peaks_follow_scipy_find_peaks():
    # scipy.signal.find_peaks(prominence=...) row by row on random rows, including rows with
    # flat tops and equal peaks (rounded values) and min_prominence 0.
    from westerlies.density import _prominent_peaks

    rng = np.random.default_rng(21)
    for trial in range(120):
        rows, n = rng.integers(1, 30), rng.integers(5, 150)
        values = (
            np.cumsum(rng.normal(size=(rows, n)), axis=1) if trial % 2 else rng.random((rows, n))
        )
        if trial % 3 == 0:
            values = np.round(values * 3)
        share = (0.0, 0.02, 0.1, 0.3)[trial % 4]
        got_rows, got_bins = _prominent_peaks(values, share)
        for r in range(rows):
            expected, _ = signal.find_peaks(values[r], prominence=share * values[r].max())
            np.testing.assert_array_equal(got_bins[got_rows == r], expected)


def test_basin_modes_equal_the_find_peaks_loop():
    # Random rows (with ties and flat tops) and bootstrap replicate densities of a three
    # component mixture: the vectorized rule equals the per-replicate find_peaks loop exactly.
    from westerlies.density import _basin_modes, _linear_bins, _smooth

    rng = np.random.default_rng(22)
    for trial in range(60):
        n = int(rng.integers(5, 120))
        values = rng.random((int(rng.integers(1, 25)), n))
        if trial % 2:
            values = np.round(values * 4)
        centres = 30 + 0.1 * np.arange(n)
        inner = np.sort(rng.uniform(centres[0], centres[-1], trial % 4))
        edges = np.concatenate([[-np.inf], inner, [np.inf]])
        np.testing.assert_array_equal(
            _basin_modes(values, centres, edges, 0.05),
            _reference_basin_modes(values, centres, edges, 0.05),
        )
    x = _mixture(rng, members=40, days=90)
    fit = jet_modes(_latitudes(x), n_resamples=0)
    start, n_bins = 100, 500
    centres = (start + np.arange(n_bins)) * 0.1
    block_counts = np.array([_linear_bins(row, start, 0.1, n_bins) for row in x])
    weights = rng.multinomial(40, np.full(40, 1 / 40), size=300)
    dens = _smooth(weights @ block_counts, fit.bandwidth, 0.1)
    edges = np.concatenate([[-np.inf], fit.bounds, [np.inf]])
    fast = _basin_modes(dens, centres, edges, 0.02)
    np.testing.assert_array_equal(fast, _reference_basin_modes(dens, centres, edges, 0.02))
    assert np.isfinite(fast).mean() > 0.9  # the replicates do have modes to compare


def test_bootstrap_counts_repeat_the_replicate_by_replicate_draws(monkeypatch):
    # The random stream and the binned numbers of the textbook formula drawn one replicate
    # at a time, to the float32 rounding of the fast path's deviates (about 1e-6 of a
    # deviate, 3e-5 of a day's weight here; the reference computes them in float64);
    # unequal blocks (one long, several one-day, days of different blocks interleaved)
    # exercise the padded table, and several bandwidths share the draws.
    import westerlies.density as density

    rng = np.random.default_rng(23)
    x = np.concatenate([rng.normal(46, 6, 101), rng.normal(46, 6, 4)])
    blocks = np.concatenate([np.zeros(101, int), np.arange(1, 5)])
    mixed = np.argsort(np.concatenate([np.arange(101), [3.5, 40.5, 41.5, 99.5]]))
    x, blocks = x[mixed], blocks[mixed]
    args = dict(start=200, step=0.1, n_bins=500)
    slow = _reference_bootstrap_counts(
        x, blocks, 5, 200, np.random.default_rng(7), (2.7, 1.2), **args
    )
    for pass_days in (1, 2**16):
        monkeypatch.setattr(density, "_PASS_DAYS", pass_days)
        fast = density._smoothed_bootstrap_counts(
            x, blocks, 5, 200, np.random.default_rng(7), hs=(2.7, 1.2), **args
        )
        np.testing.assert_allclose(fast, slow, rtol=0, atol=2e-4)
        np.testing.assert_allclose(fast.sum(axis=-1), slow.sum(axis=-1), rtol=1e-12)
    assert not np.array_equal(slow[0], slow[1])  # the two bandwidths do differ


def test_box_muller_deviates_are_standard_normal():
    # Against scipy.stats.norm (Kolmogorov-Smirnov) and the N(0, 1) moments.
    from westerlies.density import _box_muller

    rng = np.random.default_rng(8)
    u1, u2 = rng.random(100_000, dtype=np.float32), rng.random(100_000, dtype=np.float32)
    out = np.empty((2, 100_000), np.float32)
    _box_muller(u1, u2, out[0], out[1])
    z = out.ravel().astype(float)
    assert stats.kstest(z, "norm").pvalue > 1e-3
    assert abs(z.mean()) < 0.01 and abs(z.std() - 1) < 0.01
    assert abs(np.corrcoef(out[0], out[1])[0, 1]) < 0.01  # the pair's deviates are independent


def test_bisection_that_stops_early_settles_the_same_comparisons():
    # A row stops once no threshold lies in its bracket; compared with the thresholds it
    # gives the same answers as the full bisection (the reference, with the alias-sum
    # smoothing), and the full bisection itself agrees with the reference to rtol.
    from westerlies.density import _critical_bandwidth, _linear_bins

    rng = np.random.default_rng(24)
    separation = rng.uniform(4, 9, 60)
    samples = [np.r_[rng.normal(44, 2.5, 300), rng.normal(44 + d, 2.5, 200)] for d in separation]
    rows = np.array([_linear_bins(v, 0, 0.1, 1000) for v in samples])
    window = (380, 600)
    thresholds = np.unique(np.append(hall_york_lambda(np.arange(1, 1001) * 0.001), 1.0))
    for k in (1, 2):
        # Reference bandwidth in the middle of the rows' critical bandwidths.
        h_ref = float(np.median(_critical_bandwidth(rows, k, 0.2, 20.0, 0.1, window)))
        low, high = 0.9 * h_ref * thresholds[0], 1.1 * h_ref * thresholds[-1]
        full = _critical_bandwidth(rows, k, low, high, 0.1, window)
        reference = _reference_critical_bandwidth(rows, k, low, high, 0.1, window)
        np.testing.assert_allclose(full, reference, rtol=2e-4)
        early = _critical_bandwidth(rows, k, low, high, 0.1, window, settle=(h_ref, thresholds))
        np.testing.assert_array_equal(
            early[:, None] / h_ref >= thresholds, full[:, None] / h_ref >= thresholds
        )
        inside = (full > low) & (full < high)
        assert inside.sum() >= 5 and (early != full).sum() >= 3  # both cases are exercised


def test_mode_test_equals_the_reference_and_is_reproducible():
    # A weakly separated mixture gives p-values away from the extremes; the fast test gives
    # the same critical bandwidths and p-values as the reference loop for the same seed.
    from westerlies import density

    rng = np.random.default_rng(25)
    comp = rng.choice(2, size=(30, 40))
    da = _latitudes(np.array([43.0, 49.0])[comp] + rng.normal(0, 3.0, (30, 40)))
    x, blocks, n_blocks, _ = density._samples_by_block(da)
    start, step, n_bins, window = 0, 0.1, 1000, (360, 590)
    alphas = np.round(np.arange(1, 1001) * 0.001, 3)
    kw = dict(start=start, step=step, n_bins=n_bins, window=window, alphas=alphas)

    def reference(seed):
        gen = np.random.default_rng(seed)
        counts = density._linear_bins(x, start, step, n_bins)[None, :]
        h = [
            float(_reference_critical_bandwidth(counts, k, 2 * step, np.ptp(x), step, window)[0])
            for k in (1, 2)
        ]
        lam = hall_york_lambda(alphas)
        rows = _reference_bootstrap_counts(x, blocks, n_blocks, 99, gen, h, start, step, n_bins)
        out = []
        for k, h_k, row in zip((1, 2), h, rows, strict=True):
            low, high = max(2 * step, 0.9 * h_k * lam.min()), 1.1 * h_k * lam.max()
            h_star = _reference_critical_bandwidth(row, k, low, high, step, window)
            ratios = np.where(h_star <= low, 0.0, h_star / h_k)
            p = (1 + np.sum(ratios >= 1)) / 100
            q = (1 + np.sum(ratios[None, :] >= lam[:, None], axis=1)) / 100
            reject = np.flatnonzero(q <= alphas)
            out.append((h_k, p, float(alphas[reject[0]]) if reject.size else 1.0))
        return out

    def fast(seed):
        gen = np.random.default_rng(seed)
        return density._mode_tests(x, blocks, n_blocks, ks=(1, 2), n_resamples=99, rng=gen, **kw)

    results = fast(3)
    assert results == fast(3)
    for got, expected in zip(results, reference(3), strict=True):
        assert got[0] == pytest.approx(expected[0], rel=1e-12)
        assert got[1:] == expected[1:]
    assert 0.05 < results[0][1] < 1  # a p-value that the comparison can actually test
